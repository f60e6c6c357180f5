"""Run files: the only module that knows the HDF5 layout.

The layout follows H5MD 1.1 where it fits (``h5md/``, ``particles/``, ``observables/``,
``parameters/``) and keeps mdgas's own bookkeeping under ``mdgas/``. The README's
"Run files" table documents every path; ``tests/test_store_layout.py`` holds the two
to each other.
"""

from __future__ import annotations

import datetime as _dt
import os
import platform
import subprocess
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from .errors import RunFileError, UserError

LAYOUT_VERSION = 1
GROUP = "particles/gas"
STATUS_RUNNING, STATUS_COMPLETE = "running", "complete"
STATUS_INTERRUPTED, STATUS_FAILED = "interrupted", "failed"

#: Units of each time series in observables/ (reduced units).
OBSERVABLE_UNITS = {
    "pressure_wall": "ε/σ³", "wall_hits": "1", "pressure_tensor": "ε/σ³",
    "pressure_virial": "ε/σ³", "kinetic_energy": "ε", "potential_energy": "ε",
    "total_energy": "ε", "temperature": "ε/k", "collisions": "1", "thermostat_work": "ε",
}


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def _git_commit() -> str:
    here = Path(__file__).resolve().parent
    try:
        out = subprocess.run(["git", "rev-parse", "HEAD"], cwd=here, capture_output=True,
                             text=True, timeout=5)
        return out.stdout.strip() if out.returncode == 0 else ""
    except (OSError, subprocess.SubprocessError):
        return ""


def provenance() -> dict[str, str]:
    import numba
    import scipy

    from . import __version__
    return {"mdgas_version": __version__, "git_commit": _git_commit(),
            "numpy_version": np.__version__, "numba_version": numba.__version__,
            "h5py_version": h5py.__version__, "scipy_version": scipy.__version__,
            "python_version": platform.python_version(), "host": platform.node()}


class RunWriter:
    """Creates a run file and appends to it as the run goes on."""

    def __init__(self, path: str | os.PathLike, settings, force: bool = False) -> None:
        self.path = Path(path)
        if self.path.exists() and not force:
            raise UserError(f"{self.path}: a run file is already there; "
                            "use --force to overwrite it or -o to choose another path")
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self.file = h5py.File(self.path, "w", libver="latest")
        except OSError as exc:
            raise UserError(f"{self.path}: cannot create the run file ({exc}); "
                            "choose a writable folder with -o") from None
        self.n_samples = 0
        self._init_layout(settings)

    # -- creation --------------------------------------------------------------------
    def _init_layout(self, s) -> None:
        from . import __version__
        f = self.file
        h5 = f.create_group("h5md")
        h5.attrs["version"] = np.array([1, 1])
        h5.create_group("author").attrs["name"] = os.environ.get("USER", "mdgas user")
        cr = h5.create_group("creator")
        cr.attrs["name"], cr.attrs["version"] = "mdgas", __version__

        box = f.create_group(f"{GROUP}/box")
        box.attrs["dimension"] = 3
        box.attrs["boundary"] = np.array(["none" if w else "periodic" for w in s.walled],
                                         dtype=h5py.string_dtype())
        box.create_dataset("edges", data=s.box)

        par = f.create_group("parameters")
        par.create_dataset("config_text", data=s.text, dtype=h5py.string_dtype())
        for section, values in s.as_dict().items():
            g = par.create_group(section)
            for k, v in values.items():
                g.attrs[k] = "" if v is None else v
            g.attrs["_unset"] = np.array([k for k, v in values.items() if v is None],
                                         dtype=h5py.string_dtype())

        m = f.create_group("mdgas")
        m.attrs["layout_version"] = LAYOUT_VERSION
        m.attrs["status"] = STATUS_RUNNING
        m.attrs["message"] = ""
        m.attrs["model"] = s.gas.model
        m.attrs["source"] = s.source
        m.attrs["started"] = _now()
        m.attrs["finished"] = ""
        m.attrs["production_start"] = float(s.schedule.equilibrate)
        m.attrs["seed"] = s.schedule.seed
        for k, v in provenance().items():
            m.attrs[k] = v
        f.create_group("observables")
        f.flush()

    def _series(self, name: str, sample_shape: tuple[int, ...], dtype=float) -> h5py.Group:
        g = self.file.require_group(f"observables/{name}")
        if "value" not in g:
            g.create_dataset("step", shape=(0,), maxshape=(None,), dtype=np.int64, chunks=(1024,))
            g.create_dataset("time", shape=(0,), maxshape=(None,), dtype=float, chunks=(1024,))
            chunk = (max(1, 4096 // max(1, int(np.prod(sample_shape)))),) + sample_shape
            g.create_dataset("value", shape=(0,) + sample_shape, maxshape=(None,) + sample_shape,
                             dtype=dtype, chunks=chunk)
            g["value"].attrs["unit"] = OBSERVABLE_UNITS.get(name, "")
        return g

    # -- appending ---------------------------------------------------------------------
    def append_samples(self, times: np.ndarray, rows: list[dict[str, np.ndarray]]) -> None:
        """Append a batch of sample rows (dicts from observe.sample_row) and flush."""
        if not rows:
            return
        k = len(rows)
        steps = np.arange(self.n_samples, self.n_samples + k)
        for name in rows[0]:
            value = np.stack([np.asarray(r[name]) for r in rows])
            g = self._series(name, value.shape[1:])
            for ds, data in ((g["step"], steps), (g["time"], times), (g["value"], value)):
                ds.resize(self.n_samples + k, axis=0)
                ds[self.n_samples:] = data
        self.n_samples += k
        self.file.flush()

    def append_frame(self, time: float, positions: np.ndarray, velocities: np.ndarray) -> None:
        n = positions.shape[0]
        for name, data in (("position", positions), ("velocity", velocities)):
            g = self.file.require_group(f"{GROUP}/{name}")
            if "value" not in g:
                g.create_dataset("step", shape=(0,), maxshape=(None,), dtype=np.int64)
                g.create_dataset("time", shape=(0,), maxshape=(None,), dtype=float)
                g.create_dataset("value", shape=(0, n, 3), maxshape=(None, n, 3), dtype=float,
                                 chunks=(1, min(n, 65536), 3), compression="gzip",
                                 compression_opts=4, shuffle=True)
                g["value"].attrs["unit"] = "σ" if name == "position" else "σ/τ"
            k = g["time"].shape[0]
            for ds in (g["step"], g["time"], g["value"]):
                ds.resize(k + 1, axis=0)
            g["step"][k], g["time"][k], g["value"][k] = k, time, data
        self.file.flush()

    def write_histograms(self, arrays: dict[str, np.ndarray]) -> None:
        g = self.file.require_group("observables/histograms")
        for name, data in arrays.items():
            if name in g:
                del g[name]
            g.create_dataset(name, data=data)

    def write_state(self, group: str, state: dict[str, np.ndarray],
                    extra: dict[str, Any] | None = None) -> None:
        """Store an engine state (every array) under ``mdgas/<group>``, replacing it."""
        parent = self.file["mdgas"]
        if group in parent:
            del parent[group]
        g = parent.create_group(group)
        for k, v in state.items():
            g.create_dataset(k, data=v)
        for k, v in (extra or {}).items():
            g.attrs[k] = v
        self.file.flush()

    def finish(self, status: str, message: str = "", attrs: dict[str, Any] | None = None) -> None:
        m = self.file["mdgas"]
        m.attrs["status"] = status
        m.attrs["message"] = message
        m.attrs["finished"] = _now()
        for k, v in (attrs or {}).items():
            m.attrs[k] = v
        self.file.flush()

    def close(self) -> None:
        if self.file.id.valid:
            self.file.close()


# Reading -------------------------------------------------------------------------------

def open_run_file(path: str | os.PathLike) -> h5py.File:
    p = Path(path)
    if not p.exists():
        raise RunFileError(f"{p}: no such run file")
    try:
        f = h5py.File(p, "r")
    except OSError:
        raise RunFileError(f"{p}: not a readable HDF5 file (damaged or not a run file); "
                           "give a .h5 file written by `mdgas run`") from None
    if "mdgas" not in f or "layout_version" not in f["mdgas"].attrs:
        f.close()
        raise RunFileError(f"{p}: an HDF5 file, but not an mdgas run file")
    return f


def read_run(path: str | os.PathLike) -> dict[str, Any]:
    """Everything but the frames, as plain Python and NumPy objects."""
    with open_run_file(path) as f:
        meta = dict(f["mdgas"].attrs)
        params = {}
        for section, g in f["parameters"].items():
            if isinstance(g, h5py.Group):
                unset = set(g.attrs.get("_unset", []))
                params[section] = {k: (None if k in unset else _plain(v))
                                   for k, v in g.attrs.items() if k != "_unset"}
        text = f["parameters/config_text"][()]
        obs, times = {}, None
        for name, g in f["observables"].items():
            if name == "histograms":
                continue
            obs[name] = g["value"][()]
            times = g["time"][()]
        hist = {k: v[()] for k, v in f["observables/histograms"].items()} \
            if "observables/histograms" in f else {}
        n_frames = f[f"{GROUP}/position/time"].shape[0] if f"{GROUP}/position" in f else 0
        final = {k: v[()] for k, v in f["mdgas/final"].items()} if "mdgas/final" in f else {}
    return {"meta": {k: _plain(v) for k, v in meta.items()}, "parameters": params,
            "config_text": text.decode() if isinstance(text, bytes) else text,
            "observables": obs, "times": times if times is not None else np.zeros(0),
            "histograms": hist, "n_frames": n_frames, "final": final}


def read_frames(path: str | os.PathLike, which: slice | list[int] = slice(None)
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(times, positions, velocities) of the stored frames selected by ``which``."""
    with open_run_file(path) as f:
        if f"{GROUP}/position" not in f:
            return np.zeros(0), np.zeros((0, 0, 3)), np.zeros((0, 0, 3))
        t = f[f"{GROUP}/position/time"][which]
        return t, f[f"{GROUP}/position/value"][which], f[f"{GROUP}/velocity/value"][which]


def _plain(v: Any) -> Any:
    if isinstance(v, bytes):
        return v.decode()
    if isinstance(v, np.ndarray):
        return [_plain(x) for x in v.tolist()]
    if isinstance(v, np.generic):
        return v.item()
    return v
