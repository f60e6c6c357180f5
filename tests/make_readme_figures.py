"""Make the small example figures the README shows (mdgas/data/figures/*.png).

Run from the repository root: ``.venv/bin/python tests/make_readme_figures.py``. It
simulates three small state points (about a minute on two cores), draws them with
:mod:`mdgas.plots` and keeps every PNG under 200 kB. Not part of the test suite.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import mdgas
from mdgas import plots, style

OUT = Path(__file__).resolve().parent.parent / "mdgas" / "data" / "figures"
LIMIT = 200_000  # bytes per figure

STATES = {
    # A dense, attractive Lennard-Jones gas: the ideal-gas law fails by tens of percent.
    "lj-dense": {"gas.model": "lennard-jones", "gas.particles": 500, "gas.density": 0.3,
                 "gas.temperature": 1.5, "container.walls": "none",
                 "schedule.equilibrate": 10.0, "schedule.produce": 60.0,
                 "output.sample_every": 0.25, "output.frame_every": 10.0, "schedule.seed": 3},
    # A dilute ideal gas in a closed box: the control experiment.
    "ideal-box": {"gas.model": "ideal", "gas.particles": 10000, "gas.density": 0.05,
                  "schedule.equilibrate": 1.0, "schedule.produce": 400.0,
                  "output.sample_every": 2.0, "output.frame_every": 100.0, "schedule.seed": 3},
}
#: (state, figure name) -> README file name.
PICKS = {("lj-dense", "references"): "z-vs-references.png",
         ("lj-dense", "blocking"): "blocking.png",
         ("lj-dense", "rdf"): "rdf.png",
         ("ideal-box", "speed"): "speed-distribution.png",
         ("ideal-box", "pressure"): "wall-pressure.png"}


def main() -> int:
    OUT.mkdir(parents=True, exist_ok=True)
    import matplotlib.pyplot as plt
    with tempfile.TemporaryDirectory() as tmp:
        for state, keys in STATES.items():
            run = mdgas.simulate(None, path=Path(tmp) / f"{state}.h5", force=True, **keys)
            summary = run.summary()
            print(f"{state}: {summary['verdict']['statement']}")
            figs = plots.figures(run, summary)
            with style.use():
                for (st, name), fname in PICKS.items():
                    if st != state or name not in figs:
                        continue
                    path = OUT / fname
                    for dpi in (100, 80, 64):
                        figs[name].savefig(path, dpi=dpi)
                        if path.stat().st_size < LIMIT:
                            break
                    print(f"  {path.relative_to(OUT.parent.parent.parent)} "
                          f"({path.stat().st_size / 1000:.0f} kB)")
                for f in figs.values():
                    plt.close(f)
    return 0


if __name__ == "__main__":
    sys.exit(main())
