"""The thin orchestration layer: settings -> engine chunks -> run file.

Python runs only between chunks (one chunk = one sample interval): it turns the
chunk's accumulator into a sample row, adds the production histograms, stores frames
and reports progress. The engine's loop over a chunk runs in compiled code.
"""

from __future__ import annotations

import time as _time
from pathlib import Path

import numpy as np

from . import observe
from .config import Settings
from .engines import get_engine
from .errors import InstabilityError
from .progress import Progress
from .store import (STATUS_COMPLETE, STATUS_FAILED, STATUS_INTERRUPTED, RunWriter)

#: Seconds of wall time between flushes of buffered samples to the run file.
FLUSH_SECONDS = 2.0


def simulate(settings: Settings, path: str | Path | None = None, *, force: bool = False,
             progress: bool | None = None) -> Path:
    """Run ``settings`` to completion and return the path of the finished run file.

    ``progress`` None shows a bar only when stderr is a terminal.
    """
    out = Path(path or settings.output.path or "runs/run.h5")
    engine = get_engine(settings.gas.model)(settings)
    writer = RunWriter(out, settings, force=force)
    try:
        _compile_notice(engine, progress)
        state = engine.initial_state()
        writer.write_state("initial", state)
        _run_phases(settings, engine, state, writer, progress)
        writer.write_state("final", state)
        writer.finish(STATUS_COMPLETE)
    except InstabilityError as exc:
        writer.finish(STATUS_FAILED, str(exc))
        raise
    except KeyboardInterrupt:
        writer.finish(STATUS_INTERRUPTED, "interrupted by the user")
        raise
    except BaseException as exc:
        writer.finish(STATUS_FAILED, f"{exc.__class__.__name__}: {exc}")
        raise
    finally:
        writer.close()
    return out


def _compile_notice(engine, progress) -> None:
    """Say so before the first call compiles the kernels (cached afterwards)."""
    import sys
    if progress is False:
        return
    cache_dir = Path(__file__).resolve().parent / "engines" / "__pycache__"
    mod = type(engine).__module__.rsplit(".", 1)[-1]
    if not any(cache_dir.glob(f"{mod}.*.nbi")):
        print(f"mdgas: compiling the {engine.name} kernels (first start only; cached after)",
              file=sys.stderr)


def _run_phases(settings: Settings, engine, state, writer: RunWriter, progress) -> None:
    sch, outp = settings.schedule, settings.output
    t_eq, t_end = sch.equilibrate, sch.equilibrate + sch.produce
    hist = observe.Histograms(settings)
    acc = observe.new_accumulator()
    bar = Progress(t_end, "simulated time τ", enabled=progress)
    times: list[float] = []
    rows: list[dict] = []
    next_frame = t_eq if outp.frame_every > 0 else np.inf
    last_flush = _time.monotonic()
    t = float(state["time"][0])
    eps = 1e-9 * max(1.0, t_end)
    while t < t_end - eps:
        producing = t >= t_eq - eps
        limit = t_end if producing else t_eq
        chunk = min(outp.sample_every, limit - t)
        acc[:] = 0.0
        engine.advance(state, chunk, acc, producing)
        t_new = float(state["time"][0])
        problem = engine.health(state)
        if problem:
            writer.append_samples(np.asarray(times), rows)
            raise InstabilityError(
                f"the run became unstable at t = {t_new:.4g} τ: {problem}. Data up to the "
                "last sample is kept. Try a smaller schedule.timestep or a gentler start.")
        rows.append(observe.sample_row(settings, engine, state, acc, t_new - t))
        times.append(t_new)
        t = t_new
        if t >= t_eq - eps and producing:
            hist.add(state)
        if t >= next_frame - eps:
            writer.append_frame(t, state["positions"], state["velocities"])
            next_frame += outp.frame_every
        if _time.monotonic() - last_flush > FLUSH_SECONDS:
            writer.append_samples(np.asarray(times), rows)
            writer.write_histograms(hist.arrays())
            times, rows, last_flush = [], [], _time.monotonic()
        bar.update(t)
    writer.append_samples(np.asarray(times), rows)
    writer.write_histograms(hist.arrays())
    bar.close()
