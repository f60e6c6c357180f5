"""The thin orchestration layer: settings -> engine chunks -> run file.

Python runs only between chunks (one chunk = one sample interval): it turns the
chunk's accumulator into a sample row, adds the production histograms, stores frames,
writes checkpoints and reports progress. The engine's loop over a chunk runs in
compiled code.

Exact resume: everything that decides what happens next lives either in the engine's
state dict or in the driver's counters (end of production, next frame time, sample
and frame counts), and both go into every checkpoint. Checkpoints are taken only at
chunk boundaries, so a resumed run replays the same chunks on the same state and
writes the same samples, bit for bit. That holds for any fixed numba thread count
(measured with 1 and 2 threads for the hard-sphere and Lennard-Jones engines);
resuming with a different thread count changes the order of floating-point sums in
parallel kernels, so the continuation agrees only to round-off, growing chaotically.
"""

from __future__ import annotations

import math
import os
import platform
import shutil
import signal
import sys
import threading
import time as _time
from pathlib import Path

import numpy as np

from . import observe
from .config import Settings
from .engines import get_engine
from .errors import InstabilityError, RunFileError, RunInterrupted, UserError
from .progress import Progress
from .store import (STATUS_COMPLETE, STATUS_FAILED, STATUS_INTERRUPTED, STATUS_RUNNING,
                    RunFileWriteError, RunWriter, estimate_file_bytes, read_checkpoint, read_run,
                    repair_truncated)

#: Seconds of wall time between flushes of buffered samples to the run file.
FLUSH_SECONDS = 2.0
#: Fewer particles than this give a surface-dominated, strongly fluctuating estimate.
MIN_BULK_PARTICLES = 100
#: Fewer production samples than this make block averaging unreliable.
MIN_SAMPLES = 100
#: Free disk space (bytes) kept in reserve: a run stops cleanly rather than fill the disk.
DISK_MARGIN = 16 * 2 ** 20
#: Production limit with ``target_stderr`` when ``max_produce`` is not given (× produce).
DEFAULT_MAX_FACTOR = 10.0


def simulate(settings: Settings, path: str | Path | None = None, *, force: bool = False,
             progress: bool | None = None) -> Path:
    """Run ``settings`` to completion and return the path of the finished run file.

    ``progress`` None shows a bar only when stderr is a terminal. SIGINT/SIGTERM stop
    the run after the current chunk with a checkpoint (:class:`RunInterrupted`).
    """
    out = Path(path or settings.output.path or "runs/run.h5")
    engine = get_engine(settings.gas.model)(settings)
    preflight(settings, out, force)
    writer = RunWriter(out, settings, force=force)
    try:
        _compile_notice(engine, progress)
        state = engine.initial_state()
        writer.write_state("initial", state)
    except BaseException as exc:
        _stop(writer, STATUS_FAILED, f"{exc.__class__.__name__}: {exc}")
        raise
    loop = _Loop(settings, engine, state, writer, progress)
    loop.run()
    return out


def resume(path: str | Path, *, progress: bool | None = None) -> Path:
    """Continue a run from its last checkpoint; returns the path once it is complete."""
    from . import config
    p = Path(path)
    raw = read_run(p)  # reads a truncated file from a padded copy, or says why it cannot
    # A write that failed on a full disk leaves the file shorter than HDF5 expects;
    # padding it to its recorded length lets HDF5 open it for writing again.
    repair_truncated(p)
    meta = raw["meta"]
    status = meta.get("status", "")
    if status == STATUS_COMPLETE:
        raise UserError(f"{p}: the run is already complete; nothing to resume "
                        "(use `mdgas run CONFIG --force` to run it again)")
    if status == STATUS_FAILED and not meta.get("resumable", False):
        raise UserError(f"{p}: the run failed ({meta.get('message', '')}); a failed run "
                        "cannot be resumed, fix the cause and run the config again")
    if status == STATUS_RUNNING and meta.get("host") == platform.node() \
            and _alive(int(meta.get("writer_pid", 0))):
        raise UserError(f"{p}: the run is still going (process {meta['writer_pid']}); "
                        "wait for it or stop it first")
    ckpt = read_checkpoint(p, max_samples=len(raw["times"]))
    if ckpt is None:
        raise RunFileError(f"{p}: the run file holds no checkpoint (it stopped before "
                           "the first one); run the config again with --force")
    settings = config.from_dict(raw["parameters"], source=str(p), text=raw["config_text"])
    engine = get_engine(settings.gas.model)(settings)
    writer = RunWriter.reopen(p)
    try:
        c = ckpt["counters"]
        if min(writer.n_samples, len(raw["times"])) < int(c["n_samples"]) or \
                min(writer.n_frames, raw["n_frames"]) < int(c["n_frames"]):
            raise RunFileError(f"{p}: the run file has fewer samples than its checkpoint "
                               "says (damaged); run the config again with --force")
        writer.truncate(int(c["n_samples"]), int(c["n_frames"]))
        writer.set_attrs({"status": STATUS_RUNNING, "message": "", "resumable": False,
                          "resumes": int(meta.get("resumes", 0)) + 1,
                          "writer_pid": os.getpid(), "host": platform.node()})
        state = ckpt["state"]
        missing = {"positions", "velocities", "time", "rng"} - set(state)
        if missing:
            raise RunFileError(f"{p}: the checkpoint lacks {', '.join(sorted(missing))}; "
                               "run the config again with --force")
        _compile_notice(engine, progress)
    except BaseException:
        writer.close()
        raise
    loop = _Loop(settings, engine, state, writer, progress, counters=c,
                 histograms=ckpt["histograms"],
                 production=_production_rows(raw, int(c["n_samples"])))
    loop.run()
    return p


class _DiskNearlyFull(Exception):
    def __init__(self, free: int) -> None:
        self.free = free


def _alive(pid: int) -> bool:
    if pid <= 0 or pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    # A zombie or a reused pid of another program would still answer; check the name.
    try:
        cmd = Path(f"/proc/{pid}/cmdline").read_bytes()
        return b"mdgas" in cmd or b"python" in cmd
    except OSError:
        return True


def _stop(writer: RunWriter, status: str, message: str, attrs: dict | None = None) -> None:
    """Mark the file and close it, even when the disk is what failed."""
    try:
        writer.finish(status, message, attrs)
    except (OSError, RuntimeError, KeyError):
        pass
    try:
        writer.close()
    except (OSError, RuntimeError):
        pass


def _compile_notice(engine, progress) -> None:
    """Say so before the first call compiles the kernels (cached afterwards)."""
    if progress is False:
        return
    cache_dir = Path(__file__).resolve().parent / "engines" / "__pycache__"
    mod = type(engine).__module__.rsplit(".", 1)[-1]
    if not any(cache_dir.glob(f"{mod}.*.nbi")):
        print(f"mdgas: compiling the {engine.name} kernels (first start only; cached after)",
              file=sys.stderr)


# Pre-flight checks and warnings ---------------------------------------------------------

def preflight(settings: Settings, out: Path, force: bool) -> None:
    """Refuse, before any work, a run whose file cannot be written or would not fit."""
    if out.exists() and not force:
        raise UserError(f"{out}: a run file is already there; "
                        "use --force to overwrite it or -o to choose another path")
    parent = out.parent
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    if not parent.is_dir():
        raise UserError(f"{out}: {parent} is not a folder; choose a writable folder with -o")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise UserError(f"{out}: the folder {parent} is not writable; "
                        "choose a writable folder with -o")
    need = estimate_file_bytes(settings, state_bytes(settings))
    free = shutil.disk_usage(parent).free
    if out.exists():
        free += out.stat().st_size
    if need > free:
        raise UserError(f"{out}: the run file will take about {need / 2**20:.0f} MB but only "
                        f"{free / 2**20:.0f} MB are free on that disk; free some space, "
                        "choose another folder with -o, or store fewer frames "
                        "(output.frame_every = 0 stores none)")


def state_bytes(settings: Settings) -> int:
    """Bytes of one engine state (positions, velocities and per-particle extras)."""
    return 8 * 8 * settings.gas.particles


def memory_estimate(settings: Settings, engine=None) -> int:
    """Peak resident memory of a run (bytes), an upper bound checked by a test.

    Measured peak RSS of ideal-gas runs with one thread (shared 2-core machine, h5py
    3.16, numba 0.6x): 214 MB at N = 1e3, 261 MB at 3e5, 351 MB at 1e6, i.e. about
    215 MB for the interpreter, numpy, numba, h5py and the compiled kernels plus
    ~140 bytes per particle; a first start that compiles the kernels adds about 30 MB
    (399 MB at 1e6 with a cold cache). On top of the engine's own arrays (``memory_bytes``) the
    driver holds about 12 doubles per particle: the snapshot copies that histograms,
    checkpoints and frames are written from. See
    tests/test_interrupt.py::test_million_particle_ideal_run_fits_in_2_gb.
    """
    engine = engine or get_engine(settings.gas.model)(settings)
    n = settings.gas.particles
    return int(265 * 2 ** 20 + engine.memory_bytes() + 96 * n)


def time_estimate(settings: Settings, engine=None) -> float:
    """Rough wall-clock seconds for the whole run: start-up, the engine's chunks, and the
    driver's per-sample (snapshot histograms, sample rows) and per-frame (compression)
    work, with coefficients measured on the 2-core development machine."""
    if engine is None:
        engine = get_engine(settings.gas.model)(settings)
    sch, out = settings.schedule, settings.output
    produce = (sch.max_produce or DEFAULT_MAX_FACTOR * sch.produce) if sch.target_stderr \
        else sch.produce
    total = sch.equilibrate + produce
    n = settings.gas.particles
    samples = total / out.sample_every
    frames = (produce / out.frame_every + 1) if out.frame_every > 0 else 0
    return 0.2 + engine.cost_per_time() * total + samples * (1e-3 + 1e-7 * n) \
        + frames * 1.2e-6 * n


def warnings_for(settings: Settings) -> list[str]:
    """Legal but unwise settings: one sentence each, with what to change."""
    s = settings
    out = []
    if s.gas.particles < MIN_BULK_PARTICLES:
        out.append(f"only {s.gas.particles} particles: the pressure and Z of so few are "
                   "dominated by fluctuations and surface effects, not a bulk estimate; "
                   f"use gas.particles >= {MIN_BULK_PARTICLES}")
    samples = s.schedule.produce / s.output.sample_every
    if samples < MIN_SAMPLES:
        out.append(f"only {samples:.0f} production samples: block-averaged error bars need "
                   f"at least {MIN_SAMPLES}; lengthen schedule.produce or shorten "
                   "output.sample_every")
    se = predicted_z_stderr(s, s.schedule.max_produce or s.schedule.produce
                            if s.schedule.target_stderr else s.schedule.produce)
    target = s.schedule.target_stderr
    if se is not None and target is not None and se > target:
        longest = s.schedule.max_produce or DEFAULT_MAX_FACTOR * s.schedule.produce
        need = longest * (se / target) ** 2
        out.append(f"the run is too short for the requested precision: even at its longest "
                   f"({longest:.4g} τ) the error of Z is expected to be about {se:.2g}, above "
                   f"schedule.target_stderr = {target:g}; raise schedule.max_produce to about "
                   f"{need:.3g} τ or use more particles")
    elif se is not None and target is None and se > 0.5 * s.analysis.tolerance / 100.0:
        out.append(f"the run is too short for the requested precision: the error of Z is "
                   f"expected to be about {100 * se:.2g} %, not small against the "
                   f"{s.analysis.tolerance:g} % tolerance; lengthen schedule.produce or set "
                   "schedule.target_stderr")
    return out


def predicted_z_stderr(settings: Settings, produce: float) -> float | None:
    """An optimistic (uncorrelated) guess of stderr(Z) from the expected wall hits.

    Each hit delivers 2|v_n|; with a flux-weighted Maxwell-Boltzmann |v_n| the relative
    variance of the summed impulse is <v²>/<v>² = 4/π per hit, so stderr(Z) ≈
    sqrt(4/(π H)) for H hits. Correlations only make it larger. None without walls.
    """
    s = settings
    if not any(s.walled):
        return None
    box = s.box
    area = sum(2 * box[(a + 1) % 3] * box[(a + 2) % 3] for a in range(3) if s.walled[a])
    mean_speed = math.sqrt(8.0 * s.gas.temperature / math.pi)
    hits = 0.25 * s.gas.density * mean_speed * area * produce
    return math.sqrt(4.0 / (math.pi * hits)) if hits > 0 else math.inf


# The chunk loop -------------------------------------------------------------------------

class _StopFlag:
    """SIGINT/SIGTERM handler: the first signal asks for a clean stop after the chunk,
    a second one aborts at once (KeyboardInterrupt)."""

    def __init__(self) -> None:
        self.signal: int | None = None
        self._old: dict[int, object] = {}

    def __enter__(self) -> "_StopFlag":
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, signal.SIGTERM):
                self._old[sig] = signal.signal(sig, self._handle)
        return self

    def _handle(self, signum, frame) -> None:
        if self.signal is not None:
            raise KeyboardInterrupt
        self.signal = signum

    def __exit__(self, *exc) -> None:
        for sig, old in self._old.items():
            signal.signal(sig, old)


class _Loop:
    def __init__(self, settings: Settings, engine, state, writer: RunWriter, progress,
                 counters: dict | None = None, histograms: dict | None = None,
                 production: tuple[list, list] | None = None) -> None:
        self.s, self.engine, self.state, self.writer = settings, engine, state, writer
        sch, outp = settings.schedule, settings.output
        self.t_eq = sch.equilibrate
        self.hist = observe.Histograms(settings)
        self.fresh = counters is None
        if counters is None:
            self.t_end = sch.equilibrate + sch.produce
            self.next_frame = self.t_eq if outp.frame_every > 0 else math.inf
            self.extensions = 0
        else:
            self.t_end = float(counters["t_end"])
            self.next_frame = float(counters["next_frame"])
            self.extensions = int(counters["extensions"])
            self.hist.load(histograms)
        # Production samples behind the stderr(Z) of target_stderr: wall pressure rows,
        # virial pressure, temperature.
        self.production = production if production else tuple([] for _ in _Z_SERIES)
        self.progress = progress
        self.every = 60.0 * outp.checkpoint_every

    # -- bookkeeping ------------------------------------------------------------------
    def counters(self) -> dict:
        return {"t_end": self.t_end, "next_frame": self.next_frame,
                "extensions": self.extensions,
                "phase": "production" if self.state["time"][0] >= self.t_eq else "equilibration",
                "time": float(self.state["time"][0])}

    def room(self, needed: int) -> None:
        """Stop cleanly, before HDF5 hits a full disk, when the next write may not fit."""
        free = shutil.disk_usage(self.writer.path.parent).free
        if free < needed + DISK_MARGIN:
            raise _DiskNearlyFull(free)

    def flush(self, times: list, rows: list) -> None:
        self.room(len(rows) * 512 + 64 * 1024)
        self.writer.append_samples(np.asarray(times), rows)
        self.writer.write_histograms(self.hist.arrays())
        times.clear()
        rows.clear()

    def checkpoint(self) -> None:
        self.room(sum(np.asarray(v).nbytes for v in self.state.values()) + 256 * 1024)
        self.writer.write_checkpoint(self.state, self.hist.arrays(), self.counters())

    # -- the run ---------------------------------------------------------------------
    def run(self) -> None:
        w = self.writer
        try:
            with _StopFlag() as stop:
                self._chunks(stop)
        except RunInterrupted:
            raise
        except InstabilityError as exc:
            _stop(w, STATUS_FAILED, str(exc))
            raise
        except KeyboardInterrupt:
            # A second signal: no checkpoint of this moment, but the last one stands.
            _stop(w, STATUS_INTERRUPTED, "interrupted twice; resumable from the last "
                  "checkpoint", {"resumable": True})
            raise RunInterrupted(f"{w.path}: interrupted; continue from the last checkpoint "
                                 f"with: mdgas resume {w.path}") from None
        except _DiskNearlyFull as exc:
            t = float(self.state["time"][0])
            _stop(w, STATUS_INTERRUPTED, f"stopped at t = {t:.6g} τ: the disk is nearly full",
                  {"resumable": True})
            raise UserError(f"{w.path}: stopped at t = {t:.6g} τ because the disk is nearly "
                            f"full ({exc.free / 2**20:.0f} MB left); the data so far is intact. "
                            f"Free disk space, then continue with: mdgas resume {w.path}"
                            ) from None
        except RunFileWriteError as exc:
            t = float(self.state["time"][0])
            # No further HDF5 call on this file: after a failed write, closing or even
            # marking it can crash the library (measured: now and then a segfault). The
            # file keeps status "running" like a killed run, and resumes the same way.
            err = UserError(f"{w.path}: writing the run file failed at t = {t:.4g} τ "
                            f"({exc.strerror or exc}); the data flushed before is kept. Free "
                            f"disk space, then continue with: mdgas resume {w.path}")
            err.hard_exit = True  # type: ignore[attr-defined]
            raise err from None
        except BaseException as exc:
            _stop(w, STATUS_FAILED, f"{exc.__class__.__name__}: {exc}")
            raise
        w.close()

    def _chunks(self, stop: _StopFlag) -> None:
        s, engine, state, w = self.s, self.engine, self.state, self.writer
        outp = s.output
        acc = observe.new_accumulator()
        bar = Progress(self.t_end, "simulated time τ", enabled=self.progress)
        times: list[float] = []
        rows: list[dict] = []
        last_flush = last_ckpt = _time.monotonic()
        t = float(state["time"][0])
        if self.fresh:
            self.checkpoint()  # so that even a run killed in its first minutes can resume
        while True:
            eps = 1e-9 * max(1.0, self.t_end)
            while t < self.t_end - eps:
                producing = t >= self.t_eq - eps
                limit = self.t_end if producing else self.t_eq
                chunk = min(outp.sample_every, limit - t)
                acc[:] = 0.0
                try:
                    engine.advance(state, chunk, acc, producing)
                except InstabilityError:
                    self.flush(times, rows)  # keep what was recorded before the failure
                    raise
                t_new = float(state["time"][0])
                problem = engine.health(state)
                if problem:
                    self.flush(times, rows)
                    raise InstabilityError(
                        f"the run became unstable at t = {t_new:.4g} τ: {problem}. Data up to "
                        "the last sample is kept. Try a smaller schedule.timestep or a "
                        "gentler start.")
                row = observe.sample_row(s, engine, state, acc, t_new - t)
                rows.append(row)
                times.append(t_new)
                t = t_new
                if producing:
                    self.hist.add(state)
                    for series, name in zip(self.production, _Z_SERIES):
                        series.append(np.array(row[name]))
                if t >= self.next_frame - eps:
                    w.append_frame(t, state["positions"], state["velocities"])
                    self.next_frame += outp.frame_every
                now = _time.monotonic()
                if stop.signal is not None:
                    self.flush(times, rows)
                    self.checkpoint()
                    name = signal.Signals(stop.signal).name
                    w.finish(STATUS_INTERRUPTED, f"stopped by {name} at t = {t:.6g} τ",
                             {"resumable": True})
                    w.close()
                    if bar.enabled:
                        sys.stderr.write("\n")
                    raise RunInterrupted(
                        f"{w.path}: stopped by {name} at t = {t:.6g} τ of "
                        f"{self.t_end:.6g} τ; a checkpoint was written. Continue with: "
                        f"mdgas resume {w.path}")
                if now - last_ckpt > self.every:
                    self.flush(times, rows)
                    self.checkpoint()
                    last_flush = last_ckpt = now
                elif now - last_flush > FLUSH_SECONDS:
                    self.flush(times, rows)
                    last_flush = now
                bar.update(t)
            if not self._extend():
                break
            bar.total = self.t_end
        self.flush(times, rows)
        produced = self.t_end - self.t_eq
        w.write_state("final", state)
        self.checkpoint()
        if produced != s.schedule.produce:
            w.set_parameter("schedule", "produce", produced)
        w.finish(STATUS_COMPLETE, "", {"production_time": produced,
                                       "production_end": self.t_end,
                                       "produce_requested": s.schedule.produce,
                                       "extensions": self.extensions,
                                       "resumable": False})
        bar.close()

    def _extend(self) -> bool:
        """With ``target_stderr``: lengthen production if stderr(Z) is not there yet."""
        sch, outp = self.s.schedule, self.s.output
        target = sch.target_stderr
        if target is None:
            return False
        limit = self.t_eq + (sch.max_produce or DEFAULT_MAX_FACTOR * sch.produce)
        if self.t_end >= limit - 1e-9 * max(1.0, limit):
            return False
        se = z_stderr(self.s, *(np.asarray(x) for x in self.production))
        if se <= target:
            return False
        produced = self.t_end - self.t_eq
        # stderr ~ 1/sqrt(time): aim 10 % past the predicted need, but at most double
        # before checking again (the first estimate from a short run is rough).
        want = produced * (se / target) ** 2 * 1.1 if math.isfinite(se) else 2 * produced
        want = min(max(want, 1.25 * produced), 2.0 * produced)
        want = math.ceil(want / outp.sample_every - 1e-9) * outp.sample_every
        self.t_end = min(limit, self.t_eq + want)
        self.extensions += 1
        return True


_Z_SERIES = ("pressure_wall", "pressure_virial", "temperature", "temperature_axes")


def z_stderr(settings: Settings, *series: np.ndarray) -> float:
    """Block-averaging stderr of Z from production samples of ``_Z_SERIES``, computed
    by the summary's own rule (:func:`mdgas.analysis.summary.z_inputs`). Unlike the
    summary it does not drop an automatically detected equilibration stretch."""
    from .analysis.statistics import ratio_series
    from .analysis.summary import z_inputs
    if len(series[2]) < 4:
        return math.inf
    arrays = dict(zip(_Z_SERIES, series))
    _, p, t = z_inputs(settings, arrays.__getitem__)
    z = ratio_series(p, t, 1.0 / settings.gas.density)
    return z.stderr if math.isfinite(z.stderr) else math.inf


def _production_rows(raw: dict, n_samples: int) -> tuple[list, ...]:
    """The production samples among the first ``n_samples`` of a run file, as rows."""
    times = raw["times"][:n_samples]
    if not len(times):
        return tuple([] for _ in _Z_SERIES)
    settings_dt = float(raw["parameters"]["output"]["sample_every"])
    start = float(raw["meta"]["production_start"])
    # Same rule as mdgas.run.Run.production_mask: a sample stamped at the end of an
    # interval that began at or after the production start.
    mask = times > start + 1e-9 * max(1.0, settings_dt)
    return tuple(list(raw["observables"][name][:n_samples][mask]) for name in _Z_SERIES)
