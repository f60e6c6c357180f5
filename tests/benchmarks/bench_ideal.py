"""Ideal-gas engine speed: wall hits per second, and the time a 1e6-hit run takes.

There is no C yardstick for free flight; the figure is reported on its own. Run:
    .venv/bin/python tests/benchmarks/bench_ideal.py
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np


def main() -> None:
    import mdgas
    from mdgas import observe
    from mdgas.config import default_settings
    from mdgas.engines import get_engine

    s = default_settings().replace(**{"gas.particles": 20000, "gas.density": 1.0,
                                      "container.wall": "thermal",
                                      "container.wall_temperature": 1.0})
    engine = get_engine("ideal")(s)
    state = engine.initial_state()
    acc = observe.new_accumulator()
    engine.advance(state, 1.0, acc, True)  # compile / load cache
    acc[:] = 0
    t0 = time.perf_counter()
    engine.advance(state, 300.0, acc, True)
    dt = time.perf_counter() - t0
    hits = acc[observe.HITS:observe.HITS + 6].sum()
    print(f"kernel: {hits:.3g} wall hits in {dt:.3f} s = {hits / dt:.3g} hits/s")

    with tempfile.TemporaryDirectory() as d:
        t0 = time.perf_counter()
        run = mdgas.simulate(s.replace(**{"schedule.produce": 600.0, "output.sample_every": 1.0,
                                          "output.frame_every": 0.0}),
                             path=Path(d) / "b.h5")
        dt = time.perf_counter() - t0
        hits = run.summary()["wall_hits"]
    print(f"mdgas.simulate: {hits:,} wall hits in {dt:.2f} s (whole run: samples, histograms, file)")


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
