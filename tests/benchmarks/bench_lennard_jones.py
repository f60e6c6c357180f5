"""Lennard-Jones speed beside the C yardstick, same state points, same session.

Builds ../shared/bench/lj_reference.c with the line in its header into
tests/benchmarks/bin/, runs it and the mdgas engine (1 and 2 threads) on
N = 32000, ρ* = 0.8442, T* = 0.72 and ρ* = 0.05, T* = 2.0 (r_c = 2.5, skin 0.3,
dt = 0.005, truncated and shifted, NVE from the start), and prints atom-steps per
second of each and their ratio. Then the cached second start (a fresh process that
imports mdgas, builds a small LJ state and advances it: import + cache load) and the
memory of a 1,000,000-particle gas.

Usage: .venv/bin/python tests/benchmarks/bench_lennard_jones.py
           [--quick] [--repeat N] [--state dense|gas]
The machine may be shared: read the ratios, which are measured side by side.
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
BIN = HERE / "bin"


def find_reference() -> Path:
    for base in (ROOT.parent / "shared" / "bench", ROOT / ".." / "shared" / "bench"):
        p = base / "lj_reference.c"
        if p.exists():
            return p.resolve()
    sys.exit("lj_reference.c not found beside the repository (../shared/bench/)")


def build_reference() -> Path:
    src = find_reference()
    line = next(l for l in src.read_text().splitlines() if "Build:" in l)
    cmd = line.split("Build:", 1)[1].strip().split()
    BIN.mkdir(exist_ok=True)
    out = BIN / "lj_reference"
    # The header's line, with the output and source paths made absolute.
    cmd[cmd.index("-o") + 1] = str(out)
    cmd[cmd.index("lj_reference.c")] = str(src)
    subprocess.run(cmd, check=True)
    return out


def run_reference(exe: Path, n: int, rho: float, t: float, steps: int) -> dict:
    r = subprocess.run([str(exe), str(n), str(rho), str(t), str(steps), "2.5", "0.3", "0.005"],
                       capture_output=True, text=True, check=True)
    return {k: float(v) for k, v in re.findall(r"(\w+)=([-+0-9.eE]+)", r.stdout)}


def run_mdgas(n: int, rho: float, t: float, steps: int, threads: int) -> dict:
    """Time ``steps`` steps of the engine in a child process with ``threads`` threads."""
    code = f"""
import time, numba, numpy as np
from mdgas import config
from mdgas.engines import get_engine
from mdgas.observe import new_accumulator
numba.set_num_threads({threads})
s = config.from_dict({{"gas": {{"model": "lennard-jones", "particles": {n}, "density": {rho},
                      "temperature": {t}}}, "container": {{"walls": "none"}},
                      "potential": {{"cutoff": 2.5, "skin": 0.3, "tail": "shifted"}},
                      "schedule": {{"timestep": 0.005, "thermostat": "none"}}}})
e = get_engine("lennard-jones")(s)
st = e.initial_state()
acc = new_accumulator()
warm = dict((k, v.copy()) for k, v in st.items())
e.advance(warm, 0.005 * 5, new_accumulator(), False)      # compile / load the cache
t0 = time.perf_counter()
e.advance(st, 0.005 * {steps}, acc, False)
el = time.perf_counter() - t0
T = (st["velocities"] ** 2).sum() / (3 * {n} - 3)
P = {rho} * T + acc[12:15].sum() / (3 * {steps} * 0.005) / e.settings.volume
print(f"seconds={{el}} atom_steps_per_s={{{n} * {steps} / el}} rebuilds={{acc[20]}} "
      f"temperature={{T}} pressure={{P}} half={{int(e.half)}}")
"""
    env = dict(os.environ, NUMBA_NUM_THREADS=str(max(2, threads)))
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                       cwd=ROOT)
    if r.returncode:
        sys.exit(r.stderr)
    return {k: float(v) for k, v in re.findall(r"(\w+)=([-+0-9.eE]+)", r.stdout)}


def cached_start() -> float:
    code = ("import mdgas\nfrom mdgas import config\nfrom mdgas.engines import get_engine\n"
            "from mdgas.observe import new_accumulator\n"
            "s = config.from_dict({'gas': {'model': 'lennard-jones', 'particles': 500, "
            "'density': 0.8}, 'container': {'walls': 'none'}})\n"
            "e = get_engine('lennard-jones')(s)\nst = e.initial_state()\n"
            "e.advance(st, 0.05, new_accumulator(), False)\n"
            "e.advance(st, 0.05, new_accumulator(), True)\n")
    subprocess.run([sys.executable, "-c", code], check=True, cwd=ROOT)   # fill the cache
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", code], check=True, cwd=ROOT)
    return time.perf_counter() - t0


def million_gas_memory() -> float:
    code = ("import resource\nfrom mdgas import config\nfrom mdgas.engines import get_engine\n"
            "from mdgas.observe import new_accumulator\n"
            "s = config.from_dict({'gas': {'model': 'lennard-jones', 'particles': 1000000, "
            "'density': 0.05, 'temperature': 2.0}, 'container': {'walls': 'none'},"
            "'potential': {'cutoff': 2.5}})\n"
            "e = get_engine('lennard-jones')(s)\nst = e.initial_state()\n"
            "e.advance(st, 0.05, new_accumulator(), False)\n"
            "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)\n")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                       check=True, cwd=ROOT)
    return float(r.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="fewer steps (noisier)")
    ap.add_argument("--repeat", type=int, default=3, help="runs per figure (median taken)")
    ap.add_argument("--state", choices=("dense", "gas"), help="only this state point, and "
                    "skip the start-up and memory figures")
    args = ap.parse_args()
    exe = build_reference()
    load = os.getloadavg()[0]
    print(f"load average before: {load:.2f} on {os.cpu_count()} cores "
          "(a busy machine makes every figure noisy; compare the ratios)")
    points = [("dense", 32000, 0.8442, 0.72, 100 if args.quick else 300),
              ("gas", 32000, 0.05, 2.0, 300 if args.quick else 1000)]
    print(f"{'state':<6} {'program':<16} {'atom-steps/s':>13} {'ratio':>6}  physics check")
    for name, n, rho, t, steps in points:
        if args.state and name != args.state:
            continue
        ref, ours1, ours2 = [], [], []
        for _ in range(args.repeat):   # interleaved, so drifting load hits all alike
            ref.append(run_reference(exe, n, rho, t, steps))
            ours1.append(run_mdgas(n, rho, t, steps, 1))
            ours2.append(run_mdgas(n, rho, t, steps, 2))

        def med(rows):
            rows = sorted(rows, key=lambda r: r["atom_steps_per_s"])
            return rows[len(rows) // 2]
        r, o1, o2 = med(ref), med(ours1), med(ours2)
        base = r["atom_steps_per_s"]
        print(f"{name:<6} {'C yardstick':<16} {base:>13.3e} {1.0:>6.2f}  "
              f"T={r['temperature']:.4f} P={r['pressure']:.4f} rebuilds={r['rebuilds']:.0f}")
        for label, o in (("mdgas 1 thread", o1), ("mdgas 2 threads", o2)):
            print(f"{name:<6} {label:<16} {o['atom_steps_per_s']:>13.3e} "
                  f"{o['atom_steps_per_s'] / base:>6.2f}  T={o['temperature']:.4f} "
                  f"P={o['pressure']:.4f} rebuilds={o['rebuilds']:.0f} "
                  f"list={'half' if o['half'] else 'full'}")
    if args.state:
        return
    print(f"cached second start (import + cache load + 2 short chunks): {cached_start():.2f} s")
    print(f"1,000,000-particle gas (ρ* = 0.05): peak memory {million_gas_memory():.0f} MB")
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
