"""Hard-sphere engine speed beside the C yardstick (collisions per second, same session).

Builds /work/shared/bench/hs_reference.c (or ../shared/bench from the repo) with the
line in its header into tests/benchmarks/bin/ (git-ignored), then runs the yardstick
and the mdgas kernel on the same state points — fully periodic cube, packing fraction
0.3, fcc start, kT = 1 — one after the other, and prints collisions/s of each and
their ratio. The machine is shared: only the ratio measured side by side means much.

    .venv/bin/python tests/benchmarks/bench_hard_spheres.py [--collisions 2000000] [--n 32000 256000]
"""

from __future__ import annotations

import argparse
import math
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
BIN = HERE / "bin"
SOURCES = [HERE.parents[1].parent / "shared" / "bench" / "hs_reference.c",
           Path("/work/shared/bench/hs_reference.c")]


def build_reference() -> Path:
    src = next((p for p in SOURCES if p.exists()), None)
    if src is None:
        sys.exit("hs_reference.c not found next to the repository (../shared/bench/)")
    exe = BIN / "hs_reference"
    if not exe.exists() or exe.stat().st_mtime < src.stat().st_mtime:
        BIN.mkdir(exist_ok=True)
        cc = shutil.which("gcc") or shutil.which("cc")
        # the build line from the file's header
        subprocess.run([cc, "-O3", "-march=native", "-o", str(exe), str(src), "-lm"], check=True)
    return exe


def run_reference(exe: Path, n: int, eta: float, collisions: int) -> dict[str, float]:
    out = subprocess.run([str(exe), str(n), str(eta), str(collisions), "1"], check=True,
                         capture_output=True, text=True).stdout
    return {k: float(v) for k, v in (item.split("=") for item in out.split())}


def run_mdgas(n: int, eta: float, collisions: int, chunk: float | None) -> dict[str, float]:
    """Time the kernel over about ``collisions`` collisions after a warm-up of a tenth.

    ``chunk`` None advances in one call; otherwise in calls of that length (τ), as the
    driver does with output.sample_every (the calendar is rebuilt at every call).
    """
    from mdgas import config, observe
    from mdgas.engines import get_engine
    s = config.from_dict({"gas": {"model": "hard-sphere", "particles": n,
                                  "density": 6 * eta / math.pi},
                          "container": {"walls": "none"}}, source="<bench>")
    engine = get_engine("hard-sphere")(s)
    state = engine.initial_state()
    rate = engine.collision_rate_estimate()  # per particle per τ
    duration = 2.0 * collisions / (n * rate)
    acc = observe.new_accumulator()
    engine.advance(state, 0.1 * duration, acc, False)  # warm-up (and compile/load cache)
    acc[:] = 0.0
    e0 = float((state["velocities"] ** 2).sum())
    steps = 1 if chunk is None else max(1, int(round(duration / chunk)))
    t0 = time.perf_counter()
    for _ in range(steps):
        engine.advance(state, duration / steps, acc, True)
    secs = time.perf_counter() - t0
    e1 = float((state["velocities"] ** 2).sum())
    ncoll = acc[observe.COLLISIONS]
    z = 1.0 + acc[observe.VIRIAL:observe.VIRIAL + 3].sum() / (e1 * duration)
    return {"collisions": ncoll, "seconds": secs, "collisions_per_s": ncoll / secs, "Z": z,
            "collision_rate_per_particle": 2.0 * ncoll / (n * duration),
            "energy_rel_change": (e1 - e0) / e0}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--collisions", type=int, default=2_000_000)
    ap.add_argument("--n", type=int, nargs="+", default=[32000, 256000])
    ap.add_argument("--eta", type=float, default=0.3)
    ap.add_argument("--repeats", type=int, default=1)
    args = ap.parse_args()
    exe = build_reference()
    run_mdgas(4000, args.eta, 20000, None)  # compile or load the cached kernels first
    print("machine shared with other work: compare the ratios, not the absolute figures")
    for n in args.n:
        for rep in range(args.repeats):
            c = run_reference(exe, n, args.eta, args.collisions)
            m = run_mdgas(n, args.eta, args.collisions, None)
            k = run_mdgas(n, args.eta, args.collisions, 0.5)
            print(f"N={n} eta={args.eta} run {rep + 1}:")
            print(f"  C yardstick      {c['collisions_per_s']:.3e} coll/s  Z={c['Z']:.4f}  "
                  f"rate={c['collision_rate_per_particle']:.4f}")
            print(f"  mdgas one chunk  {m['collisions_per_s']:.3e} coll/s  Z={m['Z']:.4f}  "
                  f"rate={m['collision_rate_per_particle']:.4f}  dE/E={m['energy_rel_change']:.1e}"
                  f"  ratio {m['collisions_per_s'] / c['collisions_per_s']:.2f}x")
            print(f"  mdgas 0.5 τ chunks {k['collisions_per_s']:.3e} coll/s  "
                  f"ratio {k['collisions_per_s'] / c['collisions_per_s']:.2f}x "
                  "(calendar rebuilt per chunk, as in a run)")
            sys.stdout.flush()


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
