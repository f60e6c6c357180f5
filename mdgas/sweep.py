"""Sweeps: a base config plus axes -> many ordinary runs, a table and an HDF5 index.

A sweep file (TOML) names a base config (a path relative to the sweep file, or an
inline ``[base]`` table) and the keys to vary::

    name = "noble-isotherms"
    base = "bulk-lj.toml"
    replicas = 2
    [axes]
    "gas.temperature" = [1.5, 2.0, 3.0]
    "gas.density" = { start = 0.01, stop = 0.3, num = 8, spacing = "log" }
    [linked.pore]                       # keys that vary together, one value each
    "container.walls" = ["none", "z"]
    "pore.width" = [0.0, 4.0]           # slit width (σ); 0 = not a slit

The grid is the product of every ``[axes]`` key and every ``[linked.*]`` group, in
file order, times ``replicas``. Each state point is an ordinary run file in the sweep
folder, named from its parameters and a hash of its full settings, so a rerun finds
the runs it already has. ``pore.width`` is the one key that is not a config key: it sets
``container.aspect`` so that the single walled axis is that wide at the point's N and ρ.

Replica seeds are derived deterministically: ``schedule.seed`` is the base seed plus a
hash of the point's parameters and replica number (so points do not share random
numbers and adding points never changes another point's seed); a sweep that lists
``schedule.seed`` as an axis uses those seeds, plus the replica number.
"""

from __future__ import annotations

import csv
import copy
import dataclasses
import datetime as _dt
import difflib
import hashlib
import io
import itertools
import json
import math
import os
import signal
import sys
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping

import numpy as np

from . import config
from .errors import ConfigError, UserError

#: Sweep-only keys that are not config keys (see the module docstring).
PSEUDO_KEYS = {"pore.width": "slit width between the wall planes (σ); 0 leaves the box as set"}
TOP_KEYS = ("name", "description", "base", "replicas", "axes", "linked", "tolerances", "refine")
DEFAULT_TOLERANCES = (1.0, 5.0)  # percent, as [analysis] tolerance
TABLE_NAME, INDEX_NAME, REFINED_NAME = "table.csv", "sweep.h5", "refined.json"

#: Result columns taken from each run's summary, in table order.
RESULT_COLUMNS = ("Z", "Z_stderr", "Z_minus_1", "pressure", "pressure_stderr", "temperature",
                  "temperature_stderr", "pressure_source", "n_eff_Z", "pore_width",
                  "production_time", "wall_hits", "verdict")
STATUS_PENDING = "pending"


# -- the sweep file ------------------------------------------------------------------------

@dataclass(frozen=True)
class Axis:
    """One dimension of the grid: one key, or several linked keys varied together."""

    keys: tuple[str, ...]
    values: tuple[tuple[Any, ...], ...]   # values[i] = one value per key, the i-th grid step
    label: str = ""


@dataclass(frozen=True)
class Point:
    """One state point: its overrides (dotted keys), replica number and resolved settings.

    ``settings`` is None and ``error`` says why when the overrides do not make a valid config.
    """

    name: str
    params: dict[str, Any]
    replica: int
    seed: int
    settings: config.Settings | None
    error: str = ""

    @property
    def filename(self) -> str:
        return f"{self.name}.h5"


@dataclass
class Sweep:
    """A parsed sweep file (reduced units throughout)."""

    name: str
    source: str
    text: str
    base_raw: dict[str, Any]
    base_source: str
    axes: list[Axis]
    replicas: int = 1
    tolerances: tuple[float, ...] = DEFAULT_TOLERANCES
    description: str = ""
    refine_rounds: int = 3
    refine_axis: str = "gas.density"

    @property
    def varied_keys(self) -> list[str]:
        return [k for ax in self.axes for k in ax.keys]

    def expand(self, extra: Iterable[Mapping[str, Any]] = ()) -> list[Point]:
        """Every state point of the grid (file order), then the ``extra`` parameter sets."""
        combos: list[dict[str, Any]] = []
        for steps in itertools.product(*[range(len(ax.values)) for ax in self.axes]):
            params: dict[str, Any] = {}
            for ax, i in zip(self.axes, steps):
                params.update(zip(ax.keys, ax.values[i]))
            combos.append(params)
        seen = {_canonical(p) for p in combos}
        for p in extra:
            if _canonical(p) not in seen:
                combos.append(dict(p))
                seen.add(_canonical(p))
        return [self.point(p, r) for p in combos for r in range(self.replicas)]

    def point(self, params: Mapping[str, Any], replica: int = 0) -> Point:
        """The state point with these overrides and replica number."""
        params = dict(params)
        raw = copy.deepcopy(self.base_raw)
        base_seed = int(raw.get("schedule", {}).get("seed", config.Schedule.seed))
        if "schedule.seed" in params:
            seed = int(params["schedule.seed"]) + replica
        else:
            seed = (base_seed + _hash_int(_canonical(params), replica)) % (2 ** 31)
        cfg = {k: v for k, v in params.items() if k not in PSEUDO_KEYS}
        cfg["schedule.seed"] = seed
        label = _label(params, replica, self.varied_keys)
        try:
            config.apply_overrides(raw, cfg, self.source)
            settings = config.from_dict(raw, source=f"{self.source} [{label}]")
            if "pore.width" in params:
                settings = _apply_pore_width(settings, float(params["pore.width"]), self.source)
        except ConfigError as exc:
            name = f"{label}_{_hash_hex(_canonical({'p': params, 'r': replica}))}"
            return Point(name, params, replica, seed, None, str(exc))
        name = f"{label}_{_settings_hash(settings)}"
        text = (f"# state point {name} of sweep {self.name!r} ({self.source})\n"
                + to_toml(settings.as_dict()))
        settings = dataclasses.replace(settings, text=text)
        return Point(name, params, replica, seed, settings)


def load(path: str | Path) -> Sweep:
    """Read and validate a sweep file."""
    p = Path(path)
    try:
        text = p.read_text()
    except FileNotFoundError:
        raise ConfigError(str(path), "", "no such sweep file", "check the path") from None
    except (IsADirectoryError, PermissionError, UnicodeDecodeError) as exc:
        raise ConfigError(str(path), "", f"cannot read it ({exc.__class__.__name__})",
                          "give a readable TOML sweep file") from None
    return from_text(text, source=str(path), folder=p.parent, default_name=p.stem)


def from_text(text: str, source: str = "<sweep>", folder: str | Path = ".",
              default_name: str = "sweep") -> Sweep:
    """Parse a sweep file's text; a ``base`` path is looked up relative to ``folder``."""
    raw = config.parse_text(text, source)
    for key in raw:
        if key not in TOP_KEYS:
            hint = config._suggest(key, TOP_KEYS) or f"sweep files have {', '.join(TOP_KEYS)}"
            if key in config.SECTIONS:
                hint = f"config sections go under [base] (write [base.{key}])"
            raise ConfigError(source, key, "unknown sweep key", hint)
    name = raw.get("name", default_name)
    if not isinstance(name, str) or not name or any(c in name for c in "/\\\0") \
            or name in (".", ".."):
        raise ConfigError(source, "name", f"{name!r} is not a usable sweep name",
                          'give a short word, e.g. name = "noble-isotherms"')
    base_raw, base_source = _read_base(raw, source, Path(folder))
    replicas = raw.get("replicas", 1)
    if not isinstance(replicas, int) or isinstance(replicas, bool) or replicas < 1:
        raise ConfigError(source, "replicas", f"{replicas!r} is not a whole number >= 1",
                          "for example replicas = 3")
    axes = _read_axes(raw, source)
    tol = raw.get("tolerances", None)
    if tol is None:
        extra = base_raw.get("analysis", {}).get("tolerance")
        tol = sorted(set(DEFAULT_TOLERANCES) | ({float(extra)} if extra else set()))
    if not isinstance(tol, list) or not tol or not all(
            isinstance(t, (int, float)) and not isinstance(t, bool) and 0 < t < 100 for t in tol):
        raise ConfigError(source, "tolerances", f"{tol!r} is not a list of percentages",
                          "for example tolerances = [1.0, 5.0]")
    ref = raw.get("refine", {})
    if not isinstance(ref, dict) or set(ref) - {"rounds", "axis"}:
        raise ConfigError(source, "refine", "must be a table with rounds and/or axis",
                          'for example [refine] rounds = 3, axis = "gas.density"')
    rounds = ref.get("rounds", 3)
    if not isinstance(rounds, int) or isinstance(rounds, bool) or rounds < 1:
        raise ConfigError(source, "refine.rounds", f"{rounds!r} is not a whole number >= 1",
                          "for example rounds = 3")
    raxis = ref.get("axis", "gas.density")
    if raxis != "gas.density":
        raise ConfigError(source, "refine.axis", f"{raxis!r} cannot be refined",
                          'only "gas.density" is refined (pressure is measured, not set)')
    return Sweep(name=name, source=source, text=text, base_raw=base_raw, base_source=base_source,
                 axes=axes, replicas=replicas, tolerances=tuple(float(t) for t in tol),
                 description=str(raw.get("description", "")), refine_rounds=rounds,
                 refine_axis=raxis)


def _read_base(raw: dict, source: str, folder: Path) -> tuple[dict, str]:
    base = raw.get("base", {})
    if isinstance(base, dict):
        return copy.deepcopy(base), f"{source} [base]"
    if not isinstance(base, str):
        raise ConfigError(source, "base", "must be a path or a table",
                          'write base = "bulk.toml" or a [base] table of config sections')
    candidates = [folder / base, Path(base)]
    for c in candidates:
        if c.is_file():
            return config.parse_text(c.read_text(), str(c)), str(c)
    raise ConfigError(source, "base", f"no config file {base!r}",
                      f"looked for {candidates[0]} (beside the sweep file) and {candidates[1]}")


def _valid_keys() -> list[str]:
    return [k for k, _, _ in config.describe_keys()] + list(PSEUDO_KEYS)


def _check_key(key: str, where: str, source: str) -> None:
    valid = _valid_keys()
    if key not in valid:
        close = difflib.get_close_matches(key, valid, n=1, cutoff=0.0)
        raise ConfigError(source, where, f"{key!r} is not a config key",
                          f"did you mean '{close[0]}'?" if close else "")


def _read_values(key: str, spec: Any, where: str, source: str) -> list[Any]:
    """An axis' values: an explicit list or a ``{start, stop, num, spacing}`` range."""
    if isinstance(spec, list):
        if not spec:
            raise ConfigError(source, where, "an axis needs at least one value", "")
        return list(spec)
    if not isinstance(spec, dict):
        raise ConfigError(source, where, f"{spec!r} is neither a list nor a range",
                          'write [1.0, 2.0] or { start = 0.01, stop = 0.3, num = 8 }')
    unknown = set(spec) - {"start", "stop", "num", "spacing"}
    if unknown or not {"start", "stop", "num"} <= set(spec):
        raise ConfigError(source, where, "a range has start, stop, num and optional spacing",
                          'for example { start = 0.01, stop = 0.3, num = 8, spacing = "log" }')
    start, stop, num = spec["start"], spec["stop"], spec["num"]
    spacing = spec.get("spacing", "linear")
    if not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (start, stop)):
        raise ConfigError(source, where, "start and stop must be numbers", "")
    if not isinstance(num, int) or isinstance(num, bool) or num < 1:
        raise ConfigError(source, where, f"num = {num!r} is not a whole number >= 1", "")
    if spacing not in ("linear", "log"):
        raise ConfigError(source, where, f"spacing {spacing!r} is not allowed",
                          'allowed: "linear", "log"')
    if spacing == "log":
        if start <= 0 or stop <= 0:
            raise ConfigError(source, where, "a log range needs start and stop > 0", "")
        vals = np.geomspace(start, stop, num)
    else:
        vals = np.linspace(start, stop, num)
    out = [float(v) for v in vals]
    kind = _key_kind(key)
    if kind is int:
        out = sorted({int(round(v)) for v in out})
    return out


def _key_kind(key: str) -> type | None:
    if key in PSEUDO_KEYS:
        return float
    section, _, name = key.partition(".")
    for f in dataclasses.fields(config.SECTIONS[section]):
        if f.name == name:
            return f.metadata["kind"]
    return None


def _read_axes(raw: dict, source: str) -> list[Axis]:
    axes: list[Axis] = []
    plain = raw.get("axes", {})
    linked = raw.get("linked", {})
    if not isinstance(plain, dict) or not isinstance(linked, dict):
        raise ConfigError(source, "axes" if not isinstance(plain, dict) else "linked",
                          "must be a table", "write [axes] or [linked.NAME]")
    for key, spec in plain.items():
        if isinstance(spec, dict) and not ({"start", "stop", "num"} & set(spec)):
            raise ConfigError(source, f"axes.{key}", "looks like a section, not a dotted key",
                              f'quote dotted keys: "{key}.KEY" = [...]')
        _check_key(key, f"axes.{key}", source)
        vals = _read_values(key, spec, f"axes.{key}", source)
        axes.append(Axis((key,), tuple((v,) for v in vals), key))
    for group, table in linked.items():
        where = f"linked.{group}"
        if not isinstance(table, dict) or not table:
            raise ConfigError(source, where, "must be a table of keys varied together",
                              f'write [linked.{group}] and "section.key" = [...] below it')
        cols = []
        for key, spec in table.items():
            _check_key(key, f"{where}.{key}", source)
            cols.append(_read_values(key, spec, f"{where}.{key}", source))
        lengths = {len(c) for c in cols}
        if len(lengths) != 1:
            raise ConfigError(source, where, "linked keys must have the same number of values",
                              f"lengths are {', '.join(str(len(c)) for c in cols)}")
        axes.append(Axis(tuple(table), tuple(zip(*cols)), group))
    keys = [k for ax in axes for k in ax.keys]
    dup = {k for k in keys if keys.count(k) > 1}
    if dup:
        raise ConfigError(source, sorted(dup)[0], "is varied twice", "name each key once")
    return axes


def _apply_pore_width(s: config.Settings, width: float, source: str) -> config.Settings:
    if width == 0.0:
        return s
    walled = [a for a in range(3) if s.walled[a]]
    if len(walled) != 1:
        raise ConfigError(source, "pore.width", "a slit width needs exactly one walled axis",
                          'set container.walls = "z" (or "x", "y")')
    if width <= 0:
        raise ConfigError(source, "pore.width", f"{width!r} must be > 0", "give a width in σ")
    a = width ** 1.5 / math.sqrt(s.volume)  # edges (V/a)^(1/3) ⊥, a^(2/3) V^(1/3) = width ∥
    aspect = [1.0, 1.0, 1.0]
    aspect[walled[0]] = a
    return s.replace(**{"container.aspect": aspect})


# -- names, hashes and TOML ---------------------------------------------------------------

def _canonical(obj: Any) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)


def _hash_hex(text: str, n: int = 8) -> str:
    return hashlib.sha1(text.encode()).hexdigest()[:n]


def _hash_int(text: str, replica: int) -> int:
    return int(hashlib.sha1(f"{text}|replica={replica}".encode()).hexdigest()[:8], 16)


def _settings_hash(s: config.Settings) -> str:
    d = s.as_dict()
    d["output"].pop("path", None)
    return _hash_hex(_canonical(d))


def _fmt(v: Any) -> str:
    if isinstance(v, bool):
        return str(v).lower()
    if isinstance(v, float):
        return f"{v:.6g}"
    if isinstance(v, (list, tuple)):
        return "x".join(_fmt(x) for x in v)
    text = str(v)
    return "".join(c if c.isalnum() or c in "-." else "-" for c in text) or "-"


def _short_names(keys: list[str]) -> dict[str, str]:
    last = [k.rsplit(".", 1)[-1] for k in keys]
    return {k: (s if last.count(s) == 1 else k.replace(".", "-")) for k, s in zip(keys, last)}


def _label(params: Mapping[str, Any], replica: int, keys: list[str]) -> str:
    """A readable, file-safe name: short key names with values, then the replica."""
    short = _short_names(keys + [k for k in params if k not in keys])
    parts = [f"{short[k]}{_fmt(params[k])}" for k in list(keys) + [k for k in params
                                                                  if k not in keys]
             if k in params]
    return "_".join(parts + [f"r{replica}"])


def to_toml(d: Mapping[str, Mapping[str, Any]]) -> str:
    """A nested dict of config sections as TOML (None values are left out)."""
    lines = []
    for section, values in d.items():
        lines.append(f"[{section}]")
        for k, v in values.items():
            if v is None:
                continue
            lines.append(f"{k} = {_toml_value(v)}")
        lines.append("")
    return "\n".join(lines)


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v) if not isinstance(v, float) or math.isfinite(v) else "nan"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return json.dumps(str(v))


# -- one state point (runs in a worker) -----------------------------------------------------

def result_columns(summary: Mapping[str, Any]) -> dict[str, Any]:
    """The table's result columns from a run summary (see RESULT_COLUMNS)."""
    z = summary.get("Z") or {}
    p = summary.get("pressure") or {}
    t = summary.get("temperature") or {}
    zm = z.get("mean")
    box = summary.get("box") or []
    walls = summary.get("walls", "none")
    walled = [box[a] for a, c in enumerate("xyz") if walls != "none" and c in walls]
    verdict = summary.get("verdict")
    if isinstance(verdict, dict):
        verdict = verdict.get("text") or verdict.get("summary") or _canonical(verdict)
    return {
        "Z": zm, "Z_stderr": z.get("stderr"), "Z_minus_1": None if zm is None else zm - 1.0,
        "pressure": p.get("mean"), "pressure_stderr": p.get("stderr"),
        "temperature": t.get("mean"), "temperature_stderr": t.get("stderr"),
        "pressure_source": summary.get("pressure_source"),
        "n_eff_Z": (summary.get("effective_samples") or {}).get("Z"),
        "pore_width": min(walled) if len(walled) == 1 else None,
        "production_time": summary.get("production_time"),
        "wall_hits": summary.get("wall_hits"),
        "verdict": verdict if verdict is None or isinstance(verdict, str) else str(verdict),
    }


#: True inside a local worker process (set by its initializer).
_IN_WORKER = False


def execute_point(settings: config.Settings, path: str) -> dict[str, Any]:
    """Run one state point to its run file and return its status and result columns.

    An interrupted run left by an earlier attempt is resumed from its checkpoint
    (bit-exact), anything else incomplete is run afresh. A failure of this point
    (instability, a bad value only the engine rejects) is returned as ``status =
    "failed"`` with the message, never raised, so the sweep goes on. Top-level so that
    process pools and Dask can ship it.
    """
    from .driver import resume, simulate
    from .errors import RunInterrupted
    from .run import load as load_run
    t0 = time.monotonic()
    try:
        try:
            if not _resumable(Path(path)):
                raise FileNotFoundError(path)
            resume(path, progress=False)
        except RunInterrupted:
            raise
        except (UserError, OSError):  # no usable checkpoint: start this point again
            simulate(settings, path, force=True, progress=False)
        summary = load_run(path).summary()
        row = {"status": summary.get("status", "complete"), "message": ""}
        row.update(result_columns(summary))
    except RunInterrupted as exc:
        if not _IN_WORKER:
            raise  # in the sweep process itself: the whole sweep stops
        row = {"status": "interrupted", "message": str(exc)}
    except Exception as exc:  # one bad point must not stop the others
        row = {"status": "failed", "message": f"{exc.__class__.__name__}: {exc}"}
    row["wall_seconds"] = time.monotonic() - t0
    return row


def _resumable(path: Path) -> bool:
    """A run file an earlier attempt left interrupted or running (killed)."""
    from . import store
    if not path.is_file():
        return False
    try:
        with store.open_run_file(path) as f:
            status = f["mdgas"].attrs.get("status")
    except Exception:  # damaged beyond reading: not resumable
        return False
    status = status.decode() if isinstance(status, bytes) else status
    return status in (store.STATUS_INTERRUPTED, store.STATUS_RUNNING)


def existing_result(path: Path) -> dict[str, Any] | None:
    """The row of a run file that says it is complete, else None (missing, partial, damaged)."""
    from . import store
    from .errors import RunFileError
    from .run import load as load_run
    if not path.is_file():
        return None
    try:
        with store.open_run_file(path) as f:
            status = f["mdgas"].attrs.get("status")
            status = status.decode() if isinstance(status, bytes) else status
            started, finished = f["mdgas"].attrs.get("started"), f["mdgas"].attrs.get("finished")
        if status != store.STATUS_COMPLETE:
            return None
        summary = load_run(path).summary()
    except (RunFileError, OSError, KeyError, ValueError):
        return None
    row = {"status": summary.get("status", "complete"), "message": ""}
    row.update(result_columns(summary))
    row["wall_seconds"] = _seconds_between(started, finished)
    return row


def _seconds_between(a: Any, b: Any) -> float | None:
    try:
        a = a.decode() if isinstance(a, bytes) else a
        b = b.decode() if isinstance(b, bytes) else b
        return (_dt.datetime.fromisoformat(b) - _dt.datetime.fromisoformat(a)).total_seconds()
    except (TypeError, ValueError, AttributeError):
        return None


# -- executors ------------------------------------------------------------------------------

def _worker_init(threads: int) -> None:
    """Per worker process: numba threads, no Ctrl-C of its own, die with the sweep."""
    global _IN_WORKER
    _IN_WORKER = True
    os.environ["NUMBA_NUM_THREADS"] = str(threads)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the sweep process handles Ctrl-C
    try:  # Linux: an orphaned worker must not go on writing a run file a rerun will redo
        import ctypes
        ctypes.CDLL("libc.so.6", use_errno=True).prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass


def threads_per_worker(workers: int, cores: int | None = None) -> int:
    """numba threads for each of ``workers`` processes so that workers × threads <= cores."""
    cores = cores or os.cpu_count() or 1
    return max(1, cores // max(1, workers))


class LocalExecutor:
    """State points in local worker processes (``workers`` 1: in the sweep process itself)."""

    def __init__(self, workers: int | None = None) -> None:
        cores = os.cpu_count() or 1
        self.workers = max(1, workers or cores)
        self.threads = threads_per_worker(self.workers, cores)
        self.label = (f"{self.workers} local worker process(es), {self.threads} numba "
                      "thread(s) each" if self.workers > 1 else "in this process")

    def run(self, jobs: list[tuple[str, config.Settings, str]],
            on_result: Callable[[str, dict], None]) -> None:
        if not jobs:
            return
        if self.workers == 1:
            for key, settings, path in jobs:
                on_result(key, execute_point(settings, path))
            return
        import concurrent.futures as cf
        import multiprocessing as mp
        ctx = mp.get_context("spawn")  # a fresh interpreter: numba threads set before import
        pending = list(jobs)
        crashes: dict[str, int] = {}
        while pending:
            started = time.time()
            pool = cf.ProcessPoolExecutor(max_workers=min(self.workers, len(pending)),
                                          mp_context=ctx, initializer=_worker_init,
                                          initargs=(self.threads,))
            futures = {pool.submit(execute_point, s, p): (k, s, p) for k, s, p in pending}
            pending, reported = [], set()
            try:
                for fut in cf.as_completed(futures):
                    try:
                        row = fut.result()
                    except cf.process.BrokenProcessPool:
                        # A worker died (killed, crashed in native code). Points that had
                        # begun (their run file was written since this pool started) count a
                        # crash and fail at the second; the rest are simply resubmitted.
                        pending = self._after_crash(futures, reported, started, crashes,
                                                    on_result)
                        break
                    reported.add(fut)
                    on_result(futures[fut][0], row)
            except BaseException:
                _stop_pool(pool, futures, reported, on_result)
                raise
            pool.shutdown(wait=True)

    @staticmethod
    def _after_crash(futures, reported, started: float, crashes: dict[str, int],
                     on_result) -> list:
        again = []
        for f, (key, s, path) in futures.items():
            if f in reported:
                continue
            if f.done() and f.exception() is None:
                on_result(key, f.result())
                continue
            p = Path(path)
            if p.is_file() and p.stat().st_mtime >= started - 1.0:
                crashes[key] = crashes.get(key, 0) + 1
                if crashes[key] >= 2:
                    on_result(key, {"status": "failed", "message":
                                    "the worker process died while running this point (twice)"})
                    continue
            again.append((key, s, path))
        return again


def _stop_pool(pool, futures, reported, on_result) -> None:
    """Stop the workers on Ctrl-C. A terminal's Ctrl-C reaches them too and the driver
    stops each run after its chunk with a checkpoint; give them a moment, then SIGTERM
    (the driver's clean stop again), then SIGKILL. Results that arrive are kept."""
    import concurrent.futures as cf
    procs = list(getattr(pool, "_processes", {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    cf.wait([f for f in futures if not f.cancelled()], timeout=3.0)
    for p in procs:
        if p.is_alive():
            p.terminate()
    for p in procs:
        p.join(timeout=10)
        if p.is_alive():
            p.kill()
    cf.wait([f for f in futures if not f.cancelled()], timeout=2.0)  # clean stops' rows
    for f, job in futures.items():
        if f.done() and not f.cancelled() and f.exception() is None and f not in reported:
            on_result(job[0], f.result())


class DaskExecutor:
    """State points as tasks on a Dask distributed cluster (workers must share the folder)."""

    def __init__(self, address: str | None = None, scheduler_file: str | None = None,
                 client=None, timeout: float = 30.0) -> None:
        try:
            import distributed
        except ImportError:
            raise UserError("the Dask executor needs dask[distributed]: "
                            "pip install 'dask[distributed]'") from None
        if client is not None:
            self.client, self._own = client, False
        else:
            try:
                self.client = distributed.Client(address=address, scheduler_file=scheduler_file,
                                                 timeout=timeout)
            except (OSError, TimeoutError, ValueError) as exc:
                where = address or scheduler_file
                raise UserError(f"cannot reach the Dask scheduler at {where} ({exc}); "
                                "check the address or scheduler file") from None
            self._own = True
        self.label = f"Dask cluster {self.client.scheduler.address}"

    def run(self, jobs, on_result) -> None:
        from distributed import as_completed
        if not jobs:
            return
        futures = {}
        for key, settings, path in jobs:
            fut = self.client.submit(execute_point, settings, path, pure=False,
                                     key=f"mdgas-{key}-{uuid.uuid4().hex[:8]}")
            futures[fut] = key
        try:
            for fut in as_completed(list(futures)):
                key = futures[fut]
                try:
                    row = fut.result()
                except Exception as exc:  # a worker lost with the task, a serialisation error
                    row = {"status": "failed", "message": f"{exc.__class__.__name__}: {exc}"}
                on_result(key, row)
        except BaseException:
            self.client.cancel(list(futures))
            raise

    def close(self) -> None:
        if self._own:
            self.client.close()


# -- running a sweep ------------------------------------------------------------------------

@dataclass
class SweepResult:
    """What a sweep run did: its rows (table order) and where the table and index are."""

    sweep: Sweep
    folder: Path
    points: list[Point]
    rows: list[dict[str, Any]]
    ran: int = 0
    reused: int = 0
    interrupted: bool = False
    refinements: list[dict] = field(default_factory=list)

    @property
    def table_path(self) -> Path:
        return self.folder / TABLE_NAME

    @property
    def index_path(self) -> Path:
        return self.folder / INDEX_NAME

    @property
    def failed(self) -> list[dict[str, Any]]:
        return [r for r in self.rows if r["status"] not in ("complete", STATUS_PENDING)]

    @property
    def complete(self) -> list[dict[str, Any]]:
        return [r for r in self.rows if r["status"] == "complete"]


def default_folder(sweep: Sweep) -> Path:
    return Path("runs") / sweep.name


def refined_params(folder: Path) -> list[dict[str, Any]]:
    """Parameter sets added by earlier ``--refine`` rounds in this folder."""
    p = folder / REFINED_NAME
    if not p.is_file():
        return []
    try:
        data = json.loads(p.read_text())
        return [dict(d) for d in data.get("points", [])]
    except (ValueError, AttributeError):
        return []


def _save_refined(folder: Path, params: list[dict[str, Any]]) -> None:
    _atomic_write(folder / REFINED_NAME, json.dumps({"points": params}, indent=1))


def dry_run(sweep: Sweep, folder: Path | None = None, workers: int | None = None) -> str:
    """The expanded list of runs, which exist already, and the estimated cost."""
    from .driver import time_estimate
    folder = Path(folder or default_folder(sweep))
    points = sweep.expand(refined_params(folder))
    keys = sweep.varied_keys
    short = _short_names(keys)
    lines = [f"sweep {sweep.name!r} ({sweep.source}): {len(points)} run(s) in {folder}/"]
    header = ["#", *[short[k] for k in keys], "rep", "seed", "est. s", "state"]
    body, total, todo = [], 0.0, 0.0
    for i, pt in enumerate(points):
        vals = [_fmt(pt.params.get(k, "")) for k in keys]
        if pt.settings is None:
            body.append([str(i + 1), *vals, str(pt.replica), str(pt.seed), "-",
                         f"invalid: {pt.error}"])
            continue
        est = time_estimate(pt.settings)
        have = (folder / pt.filename).is_file()
        total += est
        todo += 0.0 if have else est
        body.append([str(i + 1), *vals, str(pt.replica), str(pt.seed), f"{est:.3g}",
                     "file exists" if have else "to run"])
    widths = [max(len(r[c]) for r in [header] + body) for c in range(len(header))]
    for r in [header] + body:
        lines.append("  " + "  ".join(x.ljust(w) for x, w in zip(r, widths)).rstrip())
    w = LocalExecutor(workers).workers
    lines.append(f"estimated cost: {total:.3g} s of CPU in total; {todo:.3g} s still to run, "
                 f"about {todo / max(1, min(w, len(points))):.3g} s wall time on {w} worker(s)")
    lines.append("(estimates from each engine's cost model and the driver's overheads; files "
                 "that exist are checked "
                 "for completeness when the sweep runs)")
    return "\n".join(lines)


def run(sweep: Sweep, folder: str | Path | None = None, *, workers: int | None = None,
        scheduler: str | None = None, scheduler_file: str | None = None, client=None,
        refine: int = 0, progress: bool | None = None) -> SweepResult:
    """Run every state point that has no complete run file yet; write the table and index.

    ``refine`` > 0 then adds up to that many rounds of bisection points near each
    breakdown crossing (see :mod:`mdgas.breakdown`). Ctrl-C stops the workers, writes
    the table (unfinished points as ``pending``) and re-raises KeyboardInterrupt.
    """
    folder = Path(folder or default_folder(sweep)).absolute()
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserError(f"{folder}: cannot create the sweep folder ({exc}); "
                        "choose another with -o") from None
    if scheduler or scheduler_file or client is not None:
        executor: Any = DaskExecutor(scheduler, scheduler_file, client)
    else:
        executor = LocalExecutor(workers)
    result = SweepResult(sweep, folder, [], [])
    try:
        _run_points(sweep, folder, executor, result, refined_params(folder), progress)
        rounds = 0
        while refine and rounds < refine and not result.interrupted:
            from . import breakdown
            new = breakdown.propose(result.rows, sweep)
            known = {_canonical(p) for p in [pt.params for pt in result.points]}
            new = [p for p in new if _canonical(p) not in known]
            if not new:
                break
            rounds += 1
            added = refined_params(folder) + new
            _save_refined(folder, added)
            result.refinements.append({"round": rounds, "points": new})
            _run_points(sweep, folder, executor, result, added, progress)
    finally:
        if isinstance(executor, DaskExecutor):
            executor.close()
    return result


def _run_points(sweep: Sweep, folder: Path, executor, result: SweepResult,
                extra: list[dict], progress: bool | None) -> None:
    from .progress import Progress
    points = sweep.expand(extra)
    rows: dict[str, dict] = {}
    jobs = []
    for pt in points:
        base = _row_base(sweep, pt)
        if pt.settings is None:
            rows[pt.name] = {**base, "status": "failed", "message": pt.error}
            continue
        have = existing_result(folder / pt.filename)
        if have is not None:
            rows[pt.name] = {**base, **have}
            result.reused += 1
        else:
            rows[pt.name] = {**base, "status": STATUS_PENDING, "message": ""}
            jobs.append((pt.name, _with_path(pt.settings, folder / pt.filename),
                         str(folder / pt.filename)))
    result.points, result.rows = points, [rows[p.name] for p in points]
    write_table(result)
    bar = Progress(len(jobs), "runs", enabled=progress)
    if jobs:
        print(f"mdgas sweep {sweep.name}: {len(jobs)} run(s) to do, {result.reused} already "
              f"complete, on {executor.label}", file=sys.stderr)
    counts = {"done": 0, "failed": 0}

    def on_result(key: str, row: dict) -> None:
        rows[key].update(row)
        counts["done" if row["status"] == "complete" else "failed"] += 1
        result.ran += 1
        write_table(result)
        bar.update(counts["done"] + counts["failed"],
                   f"{counts['done']} done, {counts['failed']} failed")

    from .errors import RunInterrupted
    try:
        bar.update(0, "starting")
        executor.run(jobs, on_result)
    except (KeyboardInterrupt, RunInterrupted):
        result.interrupted = True
        for r in result.rows:
            if r["status"] == STATUS_PENDING:
                r["message"] = "not run: the sweep was interrupted"
        write_table(result)
        write_index(result)
        bar.close()
        done = sum(r["status"] == "complete" for r in result.rows)
        raise RunInterrupted(
            f"sweep {sweep.name!r} interrupted with {done} of {len(result.rows)} run(s) "
            f"complete; the table is written ({result.table_path}); run the same "
            "`mdgas sweep` again to continue") from None
    bar.close()
    write_index(result)


def _with_path(s: config.Settings, path: Path) -> config.Settings:
    return dataclasses.replace(s, output=dataclasses.replace(s.output, path=str(path)))


def _row_base(sweep: Sweep, pt: Point) -> dict[str, Any]:
    row: dict[str, Any] = {"name": pt.name, "file": pt.filename, "replica": pt.replica,
                           "seed": pt.seed}
    for k in sweep.varied_keys:
        row[k] = pt.params.get(k)
    if pt.settings is not None:
        row["density"] = pt.settings.gas.density
        row["temperature_set"] = pt.settings.gas.temperature
        row["model"] = pt.settings.gas.model
    return row


# -- the table and the index ---------------------------------------------------------------

def table_columns(sweep: Sweep) -> list[str]:
    return (["name", "status", "message", *sweep.varied_keys, "replica", "seed", "model",
             "density", "temperature_set", *RESULT_COLUMNS, "file"])


def _cell(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ""
    if isinstance(v, (list, tuple)):
        return json.dumps(list(v))
    return str(v)


def write_table(result: SweepResult) -> Path:
    """The CSV table, written atomically (a reader never sees half a file)."""
    cols = table_columns(result.sweep)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in result.rows:
        w.writerow([_cell(r.get(c)) for c in cols])
    _atomic_write(result.table_path, buf.getvalue())
    return result.table_path


def read_table(path: str | Path) -> list[dict[str, Any]]:
    """Rows of a sweep table, numbers as floats (empty cells as None)."""
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    return [{k: _parse_cell(v) for k, v in r.items()} for r in rows]


def _parse_cell(v: str) -> Any:
    if v == "":
        return None
    if v.startswith("["):
        try:
            return json.loads(v)
        except ValueError:
            return v
    try:
        return int(v)
    except ValueError:
        pass
    try:
        return float(v)
    except ValueError:
        return v


def _atomic_write(path: Path, text: str) -> None:
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(text)
    os.replace(tmp, path)


def write_index(result: SweepResult) -> Path:
    """The HDF5 sweep index: the sweep file, every run's parameters, status and results,
    and an external link to each run file (``runs/<name>``), written atomically."""
    import h5py
    from . import __version__
    path = result.index_path
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    cols = table_columns(result.sweep)
    rows = result.rows
    s = h5py.string_dtype()
    with h5py.File(tmp, "w") as f:
        g = f.create_group("sweep")
        g.attrs["name"] = result.sweep.name
        g.attrs["source"] = result.sweep.source
        g.attrs["created"] = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        g.attrs["mdgas_version"] = __version__
        g.attrs["tolerances_percent"] = np.asarray(result.sweep.tolerances, dtype=float)
        g.create_dataset("sweep_text", data=result.sweep.text, dtype=s)
        g.create_dataset("varied_keys", data=np.array(result.sweep.varied_keys, dtype=object),
                         dtype=s)
        t = f.create_group("table")
        for c in cols + ["wall_seconds"]:
            vals = [r.get(c) for r in rows]
            numeric = [v for v in vals if v is not None]
            if numeric and all(isinstance(v, (int, float)) and not isinstance(v, bool)
                               for v in numeric):
                t.create_dataset(c, data=np.array([np.nan if v is None else float(v)
                                                   for v in vals]))
            else:
                t.create_dataset(c, data=np.array([_cell(v) for v in vals], dtype=object),
                                 dtype=s)
        links = f.create_group("runs")
        for r in rows:
            if (result.folder / r["file"]).is_file():
                links[r["name"]] = h5py.ExternalLink(r["file"], "/")
    os.replace(tmp, path)
    return path


def summary_text(result: SweepResult) -> str:
    lines = [f"sweep {result.sweep.name}: {len(result.complete)} complete, "
             f"{len(result.failed)} failed, {result.ran} run now, {result.reused} reused",
             f"table  {result.table_path}", f"index  {result.index_path}"]
    for r in result.failed:
        lines.append(f"failed {r['name']}: {r['message']}")
    for ref in result.refinements:
        lines.append(f"refine round {ref['round']}: {len(ref['points'])} new point(s)")
    return "\n".join(lines)


# -- analysis of a sweep folder -------------------------------------------------------------

BREAKDOWN_NAME = "breakdown.csv"


@dataclass
class Folder:
    """A sweep folder read back: its table rows and what the index says about the sweep."""

    path: Path
    name: str
    varied_keys: list[str]
    tolerances: tuple[float, ...]
    rows: list[dict[str, Any]]
    sweep_text: str = ""


def is_sweep_folder(path: str | Path) -> bool:
    p = Path(path)
    return p.is_dir() and (p / TABLE_NAME).is_file() and (p / INDEX_NAME).is_file()


def open_folder(path: str | Path) -> Folder:
    """Read a sweep folder written by :func:`run` (table.csv and sweep.h5)."""
    import h5py
    p = Path(path)
    if not is_sweep_folder(p):
        raise UserError(f"{p}: not a sweep folder (no {TABLE_NAME} and {INDEX_NAME}); "
                        "give the folder `mdgas sweep` wrote, e.g. runs/<sweep name>")
    try:
        with h5py.File(p / INDEX_NAME, "r") as f:
            g = f["sweep"]
            name = g.attrs["name"]
            keys = [k.decode() if isinstance(k, bytes) else k for k in g["varied_keys"][()]]
            tol = tuple(float(t) for t in g.attrs["tolerances_percent"])
            text = g["sweep_text"][()]
    except (OSError, KeyError) as exc:
        raise UserError(f"{p / INDEX_NAME}: damaged sweep index ({exc}); rerun the sweep to "
                        "rewrite it") from None
    return Folder(p, name.decode() if isinstance(name, bytes) else str(name), keys, tol,
                  read_table(p / TABLE_NAME), text.decode() if isinstance(text, bytes) else text)


def second_virial_for(rows: list[dict[str, Any]], folder: Path | None = None):
    """A B2(model, T) function that uses the sweep's potential tail and cut-off."""
    from . import breakdown
    tail, cutoff = "corrected", 3.0
    for r in rows:
        if folder is not None and r.get("status") == "complete":
            try:
                from .run import load as load_run
                s = load_run(folder / r["file"]).settings
                tail, cutoff = s.potential.tail, s.potential.cutoff
            except Exception:  # the table alone still gives an answer without B2 details
                pass
            break
    return lambda model, t: breakdown.second_virial(model, t, tail, cutoff)


def analyse(folder: Folder):
    """The breakdown crossings of a sweep folder; also written to breakdown.csv there."""
    from . import breakdown
    keys = breakdown.group_keys(folder.varied_keys)
    crossings = breakdown.find(folder.rows, keys, folder.tolerances,
                               second_virial_for(folder.rows, folder.path))
    breakdown.write_csv(crossings, folder.path / BREAKDOWN_NAME)
    return crossings


# -- the command line -----------------------------------------------------------------------

def add_parser(sub) -> None:
    """The ``mdgas sweep`` sub-command (called from mdgas.cli.build_parser)."""
    p = sub.add_parser("sweep", help="run a sweep file: many state points, a table and a map",
                       description="Run every state point of a sweep file that has no complete "
                                   "run file yet; rerunning resumes.")
    p.add_argument("sweep", help="sweep file (TOML)")
    p.add_argument("-o", "--output", metavar="DIR", help="sweep folder (default: runs/<name>)")
    p.add_argument("--dry-run", action="store_true",
                   help="print the expanded runs and the estimated cost, run nothing")
    p.add_argument("--workers", type=int, metavar="N",
                   help="local worker processes (default: one per core; 1 = in this process)")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--scheduler", metavar="ADDRESS",
                   help="run on a Dask distributed scheduler, e.g. tcp://host:8786")
    g.add_argument("--scheduler-file", metavar="PATH", help="Dask scheduler file")
    p.add_argument("--refine", nargs="?", type=int, const=-1, default=0, metavar="ROUNDS",
                   help="add bisection points near each crossing (default rounds: the sweep "
                        "file's [refine] rounds, else 3)")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar")


def command_line(args) -> int:
    """``mdgas sweep``: exit 0 when every point is complete, 1 when some failed."""
    from . import breakdown
    sw = load(args.sweep)
    folder = Path(args.output) if args.output else default_folder(sw)
    if args.workers is not None and args.workers < 1:
        raise UserError("--workers must be at least 1")
    if args.dry_run:
        print(dry_run(sw, folder, args.workers))
        return 0
    rounds = sw.refine_rounds if args.refine == -1 else max(0, args.refine)
    result = run(sw, folder, workers=args.workers, scheduler=args.scheduler,
                 scheduler_file=args.scheduler_file, refine=rounds,
                 progress=False if args.quiet else None)
    print(summary_text(result))
    crossings = analyse(open_folder(result.folder))
    print(breakdown.render_text(crossings))
    print(f"crossings  {result.folder / BREAKDOWN_NAME}")
    print(f"next: mdgas plot {result.folder}   mdgas report {result.folder}")
    return 1 if result.failed else 0


# -- figures and report of a sweep folder (the hooks of `mdgas plot` / `mdgas report`) ------

def plot_sweep(folder: str | Path, out: str | Path | None = None, fmt: str = "png"
               ) -> list[Path]:
    """Write the sweep's map and isotherm figures; returns the paths written."""
    from .sweepplots import plot_folder
    return plot_folder(folder, out, fmt=fmt)


def report_sweep(folder: str | Path, out: str | Path | None = None) -> str:
    """The sweep's self-contained HTML report (map, isotherms, crossings, every run)."""
    import matplotlib.pyplot as plt

    from . import breakdown, report, style, sweepplots
    fo = open_folder(folder)
    crossings = analyse(fo)
    figs = []
    captions = {
        "map": "Temperature against density and against measured pressure; each state "
               "point shaded by |Z − 1|, lines are the tolerance contours interpolated over "
               "the points, markers the crossings found along each isotherm (± stderr), "
               "dotted lines the second-virial estimate ρ = τ/|B2(T)|.",
        "isotherms-density": "Z − 1 against density per isotherm (± 1 stderr) with the "
                             "reference equation of state (dashed) and the crossings (★).",
        "isotherms-pressure": "The same against the measured pressure.",
    }
    with style.use():
        for name, fig in sweepplots.figures(fo, crossings).items():
            figs.append(report.Figure(name, captions.get(name, name), png=_png(fig)))
            plt.close(fig)
    by = {f.name: f for f in figs}
    ok = [r for r in fo.rows if r.get("status") == "complete"]
    bad = [r for r in fo.rows if r.get("status") != "complete"]
    found = [c for c in crossings if c.status == breakdown.FOUND]
    lead = (f"<p>Where does PV = NkT stop being good enough? This sweep ran "
            f"{len(fo.rows)} state point(s): {len(ok)} complete"
            + (f", <b>{len(bad)} not complete</b>" if bad else "")
            + f". Tolerances: {', '.join(f'{t:g} %' for t in fo.tolerances)} on |Z − 1|.</p>")
    if found:
        lead += "<ul>" + "".join(
            f"<li>{report.esc(_group_text(c.group))}: |Z − 1| reaches {c.tolerance:g} % at "
            f"ρ = {c.density:.4g} ± {c.density_stderr:.2g} σ⁻³ "
            f"(P = {c.pressure:.4g} ± {c.pressure_stderr:.2g} ε/σ³)</li>" for c in found) + "</ul>"
    crows = []
    for c in crossings:
        crows.append([_group_text(c.group), f"{c.tolerance:g} %", c.status,
                      _pm(c.density, c.density_stderr), _pm(c.pressure, c.pressure_stderr),
                      "" if c.virial_estimate is None else f"{c.virial_estimate:.4g}",
                      c.method or c.note])
    ctable = report.table(crows, ["group", "tolerance", "status", "ρ* (σ⁻³)", "P* (ε/σ³)",
                                  "B2 estimate ρ", "how"])
    keys = fo.varied_keys
    rrows = [[r["name"], ("html", report.badge("pass" if r.get("status") == "complete"
                                                else "fail")),
              *[_fmt(r.get(k)) for k in keys],
              _pm(r.get("Z"), r.get("Z_stderr")), r.get("message") or ""] for r in fo.rows]
    rtable = report.table(rrows, ["run", "status", *keys, "Z", "message"])
    method = ("<p>Replicas at one density are combined by inverse-variance weighting. The "
              "first density whose |Z − 1| reaches the tolerance and the one before it "
              "bracket the crossing; Z − 1 is fitted against ρ by weighted least squares "
              "(weights 1/stderr²) on up to two points either side (a quadratic with four "
              "points, else a line) and solved for the crossing. Its standard error is "
              "propagated from the fit's covariance to first order, scaled up by the reduced "
              "χ² when that exceeds 1. At the crossing Z = 1 ± τ, so P* = (1 ± τ) ρ* T with "
              "T the measured temperature. <code>mdgas sweep SWEEP --refine</code> adds "
              "bisection points inside each bracket still wider than twice the error.</p>"
              "<p>Crossings are in "
              f"<code>{report.esc(fo.path / BREAKDOWN_NAME)}</code>, every run in "
              f"<code>{report.esc(fo.path / TABLE_NAME)}</code>.</p>")
    sections = [
        report.Section("Breakdown", ctable, "breakdown", [by[n] for n in ("map",) if n in by]),
        report.Section("Isotherms", "<p>Measured Z − 1 with the reference equations of state "
                       "from the analysis references.</p>", "isotherms",
                       [by[n] for n in ("isotherms-density", "isotherms-pressure") if n in by]),
        report.Section("Method", method, "method"),
        report.Section("Runs", rtable, "runs"),
        report.Section("Sweep file", f"<pre>{report.esc(fo.sweep_text)}</pre>", "sweep-file"),
        report.cautions_section(),
    ]
    doc = report.build_html(f"mdgas sweep report: {fo.name}", lead, sections,
                            subtitle=f"{len(fo.rows)} runs · varied: {', '.join(keys)}",
                            footer="Made by mdgas from the sweep folder. Figures are embedded; "
                                   "the file opens without a network.")
    if out is not None:
        try:
            Path(out).write_text(doc, encoding="utf-8")
        except OSError as exc:
            raise UserError(f"{out}: cannot write the report ({exc.strerror or exc})") from None
    return doc


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    return buf.getvalue()


def _pm(mean: Any, err: Any) -> str:
    if mean is None or (isinstance(mean, float) and not math.isfinite(mean)):
        return ""
    if err is None or (isinstance(err, float) and not math.isfinite(err)):
        return f"{mean:.5g}"
    return f"{mean:.5g} ± {err:.2g}"


def _group_text(group: Mapping[str, Any]) -> str:
    return ", ".join(f"{k.rsplit('.', 1)[-1]} = {_fmt(v)}" for k, v in group.items()) or "all"


# -- the embedded demo ---------------------------------------------------------------------

DEMO_TEXT = """\
# The embedded demo: a noble-gas-like Lennard-Jones fluid on three supercritical
# isotherms (the critical temperature is about 1.31 ε/k), in bulk and in a slit 4 σ wide,
# from dilute to moderately dense. Where does PV = NkT stop being good enough?
name = "demo"
description = "Lennard-Jones isotherms, bulk and a 4 σ slit"
tolerances = [1.0, 5.0]
[base.gas]
model = "lennard-jones"
particles = 500
[base.container]
wall = "specular"
[base.schedule]
equilibrate = 5.0
produce = 300.0      # long enough for the slit's wall-pressure Z to resolve about 1 %
seed = 2024
[base.output]
frame_every = 0.0
sample_every = 0.5
[axes]
"gas.temperature" = [1.5, 2.0, 3.0]
"gas.density" = { start = 0.005, stop = 0.2, num = 5, spacing = "log" }
[linked.geometry]
"container.walls" = ["none", "z"]
"pore.width" = [0.0, 4.0]
"""


def demo(output: str | Path | None = None, workers: int | None = None) -> int:
    """Run the embedded demo sweep, its figures and report; print where they are."""
    from . import breakdown
    sw = from_text(DEMO_TEXT, source="<embedded demo sweep>")
    folder = Path(output) if output else default_folder(sw)
    print(f"mdgas demo: {len(sw.expand())} Lennard-Jones runs (3 isotherms × 5 densities × "
          f"bulk and a 4 σ slit) -> {folder}/", file=sys.stderr)
    t0 = time.monotonic()
    result = run(sw, folder, workers=workers)
    fo = open_folder(result.folder)
    print(breakdown.render_text(analyse(fo)))
    figs = plot_sweep(fo.path, fo.path / "figures")
    rep = fo.path / "report.html"
    report_sweep(fo.path, rep)
    print(f"\n{summary_text(result)}")
    print(f"map     {next((f for f in figs if f.stem.endswith('-map')), figs[0] if figs else '')}")
    print(f"report  {rep}")
    print(f"(done in {time.monotonic() - t0:.0f} s; the sweep file is mdgas.sweep.DEMO_TEXT: "
          "python -c 'import mdgas.sweep as s; print(s.DEMO_TEXT)')", file=sys.stderr)
    return 1 if result.failed else 0
