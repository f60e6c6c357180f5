"""Run files: the only module that knows the HDF5 layout.

The layout follows H5MD 1.1 where it fits (``h5md/``, ``particles/``, ``observables/``,
``parameters/``) and keeps mdgas's own bookkeeping under ``mdgas/``. The README's
"Run files" table documents every path; ``tests/test_store_layout.py`` holds the two
to each other.

Crash safety (measured by tests/test_interrupt.py, not assumed):

- Files are written with HDF5's default (earliest) format. A file created with
  ``libver="latest"`` carries a "file open for writing" flag in its superblock, so after
  a SIGKILL HDF5 refuses to open it at all; the earliest format has no such flag and a
  killed writer leaves a file readable up to its last flush.
- The writer changes HDF5 metadata only in short bursts ended by a flush: datasets are
  resized and overwritten in place, never deleted and recreated while running (freed
  space would be reused under the feet of the last flushed metadata).
- The checkpoint lives in two alternating slots, ``mdgas/checkpoint/slot0|slot1``. A slot
  is marked invalid (``seq = -1``) and flushed before it is rewritten, and gets its
  sequence number only after its data is flushed; a reader takes the valid slot with
  the highest sequence number, so a crash while writing one slot leaves the other.
- Readers open without HDF5 file locking, so a running file can be summarised; writers
  keep the lock, so two processes cannot write the same run.
- Time series and frames carry Fletcher-32 chunk checksums: a damaged chunk is
  detected on reading, and everything before it is still returned.
"""

from __future__ import annotations

import datetime as _dt
import os
import platform
import shutil
import struct
import subprocess
import tempfile
import warnings
import zlib
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from .errors import RunFileError, UserError

LAYOUT_VERSION = 1
GROUP = "particles/gas"
STATUS_RUNNING, STATUS_COMPLETE = "running", "complete"
STATUS_INTERRUPTED, STATUS_FAILED = "interrupted", "failed"
CHECKPOINT = "mdgas/checkpoint"
SLOTS = ("slot0", "slot1")

#: Samples per stored chunk of a time series. Checksummed (filtered) chunks move to the
#: end of the file whenever they are rewritten, so only the last, partly filled chunk of
#: each series sits where a crash or a cut-off tail can hit it; small chunks keep all
#: earlier samples in full chunks that never move.
SERIES_CHUNK = 256

#: Units of each time series in observables/ (reduced units).
OBSERVABLE_UNITS = {
    "pressure_wall": "ε/σ³", "wall_hits": "1", "pressure_tensor": "ε/σ³",
    "pressure_virial": "ε/σ³", "kinetic_energy": "ε", "potential_energy": "ε",
    "total_energy": "ε", "temperature": "ε/k", "temperature_axes": "ε/k", "collisions": "1",
    "thermostat_work": "ε",
}


class RunFileWarning(UserWarning):
    """A run file was readable only in part; the message says what is missing."""


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


def _open_for_writing(path: Path, mode: str) -> h5py.File:
    try:
        return h5py.File(path, mode)
    except BlockingIOError:
        raise UserError(f"{path}: another process is writing this run file; "
                        "wait for it to finish or stop it first") from None
    except OSError as exc:
        if "lock" in str(exc).lower():
            raise UserError(f"{path}: another process is writing this run file; "
                            "wait for it to finish or stop it first") from None
        if mode == "w":
            raise UserError(f"{path}: cannot create the run file ({exc}); "
                            "choose a writable folder with -o") from None
        raise RunFileError(f"{path}: cannot open the run file for writing ({exc}); "
                           "check that it is an intact mdgas run file and writable") from None


class RunFileWriteError(OSError):
    """Writing to a run file failed (disk full, file-size limit, device gone).

    HDF5 cannot close a file whose writes fail, and its own clean-up at interpreter
    exit then crashes; ``hard_exit`` tells the command line to leave with os._exit.
    """

    hard_exit = True


def _guard(method):
    """Report any failure of HDF5 to write as one RunFileWriteError."""
    import functools

    @functools.wraps(method)
    def wrapper(self, *args, **kwargs):
        try:
            return method(self, *args, **kwargs)
        except UserError:
            raise
        except (OSError, RuntimeError) as exc:
            _quiet_failed_writes()
            text = str(exc)
            reason = "the disk is full" if ("errno = 28" in text or "No space" in text) else \
                "the file size limit was reached" if "errno = 27" in text else \
                text.splitlines()[0][:160] if text else exc.__class__.__name__
            raise RunFileWriteError(getattr(exc, "errno", None) or 0, reason) from exc
    return wrapper


def _is_failed_write(exc: BaseException | None) -> bool:
    """An HDF5 error raised while freeing an object after a write failed."""
    return isinstance(exc, (RuntimeError, OSError)) and "write failed" in str(exc)


def _quiet_failed_writes() -> None:
    """After a failed write, every h5py object freed makes HDF5 retry the write and h5py
    print the failure as an ignored exception; the one error message says it all."""
    import sys
    previous = sys.unraisablehook
    if getattr(previous, "_mdgas", False):
        return

    def hook(info):
        if _is_failed_write(info.exc_value):
            return
        previous(info)
    hook._mdgas = True  # type: ignore[attr-defined]
    sys.unraisablehook = hook
    # Cython's unraisable path also prints the traceback through sys.excepthook.
    previous_except = sys.excepthook

    def except_hook(kind, value, tb):
        if _is_failed_write(value):
            return
        previous_except(kind, value, tb)
    sys.excepthook = except_hook


def _refuse_if_in_use(path: Path) -> None:
    try:
        h5py.File(path, "r+").close()
    except BlockingIOError:
        raise UserError(f"{path}: another process is writing this run file; "
                        "wait for it to finish or stop it first") from None
    except OSError as exc:
        if "lock" in str(exc).lower():
            raise UserError(f"{path}: another process is writing this run file; "
                            "wait for it to finish or stop it first") from None
        # Not an HDF5 file we can open: nobody is writing it as a run.


class RunWriter:
    """Creates a run file (or reopens one to resume) and appends to it as the run goes on.

    Every method that changes the file ends with a flush, so what a method wrote
    survives a SIGKILL after it returns.
    """

    def __init__(self, path: str | os.PathLike, settings, force: bool = False,
                 _reopen: bool = False) -> None:
        self.path = Path(path)
        if _reopen:
            _quiet_failed_writes()
            self.repaired = repair_truncated(self.path)
            self.file = _open_for_writing(self.path, "r+")
            self.n_samples = _common_length(self.file)
            pos = self.file.get(f"{GROUP}/position/time")
            self.n_frames = int(pos.shape[0]) if pos is not None else 0
            return
        if self.path.exists() and not force:
            raise UserError(f"{self.path}: a run file is already there; "
                            "use --force to overwrite it or -o to choose another path")
        if self.path.is_dir():
            raise UserError(f"{self.path}: is a folder; give a file name ending in .h5")
        if self.path.exists():
            # HDF5 truncates a file before it checks the lock, so creating over a run
            # that another process is writing would destroy it: probe the lock first.
            _refuse_if_in_use(self.path)
            self.path.unlink()
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise UserError(f"{self.path}: cannot create the folder {self.path.parent} "
                            f"({exc.strerror or exc}); choose a writable folder with -o") from None
        _quiet_failed_writes()
        self.file = _open_for_writing(self.path, "w")
        self.n_samples = 0
        self.n_frames = 0
        self._init_layout(settings)

    @classmethod
    def reopen(cls, path: str | os.PathLike) -> "RunWriter":
        """Open an existing run file for appending (used by resume)."""
        return cls(path, None, _reopen=True)

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
        write_unit_system(par, s)

        m = f.create_group("mdgas")
        m.attrs["layout_version"] = LAYOUT_VERSION
        m.attrs["status"] = STATUS_RUNNING
        m.attrs["message"] = ""
        m.attrs["model"] = s.gas.model
        m.attrs["source"] = s.source
        m.attrs["started"] = _now()
        m.attrs["finished"] = ""
        m.attrs["production_start"] = float(s.schedule.equilibrate)
        m.attrs["production_time"] = float(s.schedule.produce)
        m.attrs["seed"] = s.schedule.seed
        m.attrs["resumable"] = False
        m.attrs["resumes"] = 0
        m.attrs["checkpoints"] = 0
        m.attrs["writer_pid"] = os.getpid()
        for k, v in provenance().items():
            m.attrs[k] = v
        f.create_group("observables")
        f.flush()

    def _series(self, name: str, sample_shape: tuple[int, ...], dtype=float) -> h5py.Group:
        g = self.file.require_group(f"observables/{name}")
        if "value" not in g:
            g.create_dataset("step", shape=(0,), maxshape=(None,), dtype=np.int64,
                             chunks=(SERIES_CHUNK,),
                             fletcher32=True)
            g.create_dataset("time", shape=(0,), maxshape=(None,), dtype=float,
                             chunks=(SERIES_CHUNK,),
                             fletcher32=True)
            chunk = (SERIES_CHUNK,) + sample_shape
            g.create_dataset("value", shape=(0,) + sample_shape, maxshape=(None,) + sample_shape,
                             dtype=dtype, chunks=chunk, fletcher32=True)
            g["value"].attrs["unit"] = OBSERVABLE_UNITS.get(name, "")
        return g

    # -- appending ---------------------------------------------------------------------
    @_guard
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

    @_guard
    def append_frame(self, time: float, positions: np.ndarray, velocities: np.ndarray) -> None:
        n = positions.shape[0]
        k = self.n_frames
        for name, data in (("position", positions), ("velocity", velocities)):
            g = self.file.require_group(f"{GROUP}/{name}")
            if "value" not in g:
                g.create_dataset("step", shape=(0,), maxshape=(None,), dtype=np.int64,
                                 chunks=(256,))
                g.create_dataset("time", shape=(0,), maxshape=(None,), dtype=float,
                                 chunks=(256,))
                g.create_dataset("value", shape=(0, n, 3), maxshape=(None, n, 3), dtype=float,
                                 chunks=(1, min(n, 65536), 3), compression="gzip",
                                 compression_opts=4, shuffle=True, fletcher32=True)
                g["value"].attrs["unit"] = "σ" if name == "position" else "σ/τ"
            for ds in (g["step"], g["time"], g["value"]):
                ds.resize(k + 1, axis=0)
            g["step"][k], g["time"][k], g["value"][k] = k, time, data
        self.n_frames = k + 1
        self.file.flush()

    @_guard
    def write_histograms(self, arrays: dict[str, np.ndarray]) -> None:
        """Store the production histograms, overwriting the previous ones in place."""
        _write_arrays(self.file.require_group("observables/histograms"), arrays)
        self.file.flush()

    @_guard
    def write_state(self, group: str, state: dict[str, np.ndarray],
                    extra: dict[str, Any] | None = None) -> None:
        """Store an engine state (every array) under ``mdgas/<group>``."""
        g = self.file["mdgas"].require_group(group)
        _write_arrays(g, state)
        for k, v in (extra or {}).items():
            g.attrs[k] = v
        self.file.flush()

    @_guard
    def write_checkpoint(self, state: dict[str, np.ndarray], histograms: dict[str, np.ndarray],
                         counters: dict[str, float | int]) -> int:
        """Write a checkpoint into the older of the two slots; returns its sequence number.

        ``counters`` are the driver's own numbers (next frame time, sample count, ...);
        the sample and frame counts of the file at this moment are added to them.
        """
        root = self.file.require_group(CHECKPOINT)
        seqs = {name: _slot_seq(root, name) for name in SLOTS}
        latest = max(seqs.values())
        target = min(SLOTS, key=lambda name: seqs[name])
        slot = root.require_group(target)
        slot.attrs["seq"] = -1
        self.file.flush()  # the slot is invalid on disk before any byte of it changes
        _write_arrays(slot.require_group("state"), state)
        _write_arrays(slot.require_group("histograms"), histograms)
        c = slot.require_group("counters")
        for k, v in counters.items():
            c.attrs[k] = v
        c.attrs["n_samples"] = self.n_samples
        c.attrs["n_frames"] = self.n_frames
        slot.attrs["written"] = _now()
        self.file.flush()
        seq = max(latest, 0) + 1
        slot.attrs["seq"] = seq
        self.file["mdgas"].attrs["checkpoints"] = seq
        self.file.flush()
        return seq

    @_guard
    def truncate(self, n_samples: int, n_frames: int) -> None:
        """Drop samples and frames written after a checkpoint (before resuming from it)."""
        obs = self.file["observables"]
        for name, g in obs.items():
            if name == "histograms" or not isinstance(g, h5py.Group):
                continue
            for key in ("step", "time", "value"):
                if key in g and g[key].shape[0] > n_samples:
                    g[key].resize(n_samples, axis=0)
        for name in ("position", "velocity"):
            g = self.file.get(f"{GROUP}/{name}")
            if g is None:
                continue
            for key in ("step", "time", "value"):
                if key in g and g[key].shape[0] > n_frames:
                    g[key].resize(n_frames, axis=0)
        self.n_samples, self.n_frames = n_samples, n_frames
        self.file.flush()

    @_guard
    def set_attrs(self, attrs: dict[str, Any]) -> None:
        m = self.file["mdgas"]
        for k, v in attrs.items():
            m.attrs[k] = v
        self.file.flush()

    @_guard
    def set_parameter(self, section: str, key: str, value: Any) -> None:
        """Change one stored parameter (e.g. the production time actually used)."""
        self.file[f"parameters/{section}"].attrs[key] = value
        self.file.flush()

    @_guard
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


#: parameters/<UNITS_GROUP>: the unit system of the run (not a config section).
UNITS_GROUP = "units"


def write_unit_system(par: h5py.Group, settings) -> None:
    """parameters/units attrs: system "reduced", or "SI" with σ, ε, m and constants."""
    from .units import unit_attrs
    g = par.create_group(UNITS_GROUP)
    for k, v in unit_attrs(settings).items():
        g.attrs[k] = v


def read_unit_system(path: str | os.PathLike) -> dict[str, Any]:
    """The parameters/units attrs of a run file ({} for files written before it existed)."""
    with open_run_file(path) as f:
        g = f.get(f"parameters/{UNITS_GROUP}")
        return {k: _plain(v) for k, v in g.attrs.items()} if g is not None else {}


def _write_arrays(group: h5py.Group, arrays: dict[str, np.ndarray]) -> None:
    """Write every array into ``group``: in place when the shape and type match.

    Each dataset carries the CRC-32 of its bytes (attribute ``crc32``) so that a
    reader can tell a damaged state or histogram from an intact one.
    """
    for k, v in arrays.items():
        v = np.asarray(v)
        ds = group.get(k)
        if ds is not None and ds.shape == v.shape and ds.dtype == v.dtype:
            ds[...] = v
        else:
            if ds is not None:
                del group[k]
            ds = group.create_dataset(k, data=v)
        ds.attrs["crc32"] = np.uint32(zlib.crc32(v.tobytes()))


def _read_verified(ds: h5py.Dataset, valid_size: int | None) -> tuple[np.ndarray, str]:
    """A whole dataset written by _write_arrays, and a note if it is damaged."""
    data, note = _read_prefix(ds, valid_size)
    if note:
        return data, note
    crc = ds.attrs.get("crc32")
    if crc is not None and zlib.crc32(np.asarray(data).tobytes()) != int(crc):
        return data, "damaged (checksum mismatch)"
    return data, ""


def repair_truncated(path: Path) -> bool:
    """Pad a file cut short by a failed write to the length its superblock records.

    HDF5 refuses to open such a file at all; padded, everything written before the
    failure opens again (the padding itself holds nothing). True if it was padded.
    """
    eof = _hdf5_eof(path)
    size = path.stat().st_size
    if eof is None or size >= eof:
        return False
    try:
        os.truncate(path, eof)
    except OSError as exc:
        raise RunFileError(f"{path}: the file is truncated ({size} of {eof} bytes) and "
                           f"cannot be repaired ({exc.strerror or exc}); free disk space "
                           "and try again") from None
    return True


def _slot_seq(root: h5py.Group, name: str) -> int:
    if name not in root:
        return -1
    return int(root[name].attrs.get("seq", -1))


def _common_length(f: h5py.File) -> int:
    """Samples present in every time series (a crash between two appends leaves more in some)."""
    lengths = []
    for name, g in f["observables"].items():
        if name == "histograms" or not isinstance(g, h5py.Group):
            continue
        lengths += [g[k].shape[0] for k in ("step", "time", "value") if k in g]
    return min(lengths) if lengths else 0


# Reading -------------------------------------------------------------------------------

def _hdf5_eof(path: Path) -> int | None:
    """End-of-file address stored in an HDF5 superblock (version 0 or 1), else None."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(64)
    except OSError:
        return None
    if head[:8] != b"\x89HDF\r\n\x1a\n" or len(head) < 48 or head[8] not in (0, 1):
        return None
    off = 40 if head[8] == 0 else 44
    return struct.unpack("<Q", head[off:off + 8])[0]


def open_run_file(path: str | os.PathLike) -> h5py.File:
    """Open a run file for reading (no lock, so a running file can be read)."""
    p = Path(path)
    if not p.exists():
        raise RunFileError(f"{p}: no such run file; check the path")
    if p.is_dir():
        raise RunFileError(f"{p}: is a folder, not a run file; give the .h5 file inside it")
    try:
        f = h5py.File(p, "r", locking=False)
    except OSError as exc:
        size = p.stat().st_size
        if size == 0:
            raise RunFileError(f"{p}: the file is empty (the run that made it never wrote "
                               "anything); run the config again with --force") from None
        eof = _hdf5_eof(p)
        if eof is not None and size < eof:
            raise _Truncated(p, size, eof) from None
        with open(p, "rb") as fh:
            head = fh.read(8)
        if head != b"\x89HDF\r\n\x1a\n":
            raise RunFileError(f"{p}: not an HDF5 file, so not an mdgas run file; "
                               "give a .h5 file written by `mdgas run`") from None
        raise RunFileError(f"{p}: an HDF5 file too damaged to open ({exc}); "
                           "nothing in it can be read, run the config again") from None
    try:
        ok = "mdgas" in f and "layout_version" in f["mdgas"].attrs
    except (OSError, KeyError, RuntimeError):
        f.close()
        raise RunFileError(f"{p}: the run's bookkeeping (mdgas/ group and its attributes) "
                           "is damaged, so the file cannot be read as a run; run the config "
                           "again") from None
    if not ok:
        f.close()
        raise RunFileError(f"{p}: an HDF5 file, but not an mdgas run file (no mdgas/ "
                           "bookkeeping group); give a .h5 file written by `mdgas run`")
    return f


class _Truncated(RunFileError):
    def __init__(self, path: Path, size: int, eof: int) -> None:
        self.path, self.size, self.eof = path, size, eof
        super().__init__(f"{path}: the file is truncated ({size} of {eof} bytes)")


def _open_salvage(path: str | os.PathLike) -> tuple[h5py.File, list[str], Path | None]:
    """Open a run file, padding a truncated one in a temporary copy so HDF5 accepts it.

    Returns (file, damage notes, temporary path to delete or None).
    """
    try:
        return open_run_file(path), [], None
    except _Truncated as t:
        fd, tmp = tempfile.mkstemp(suffix=".h5", prefix="mdgas-salvage-")
        os.close(fd)
        tmp_path = Path(tmp)
        try:
            shutil.copyfile(t.path, tmp_path)
            os.truncate(tmp_path, t.eof)  # pads with zeros; nothing past t.size is trusted
            f = open_run_file(tmp_path)
        except RunFileError:
            tmp_path.unlink(missing_ok=True)
            raise RunFileError(f"{t.path}: the file is truncated ({t.size} of {t.eof} "
                               "bytes) and nothing in it can be read; run the config again"
                               ) from None
        f._mdgas_valid_size = t.size  # type: ignore[attr-defined]
        note = f"the file is truncated ({t.size} of {t.eof} bytes)"
        return f, [note], tmp_path


def _read_prefix(ds: h5py.Dataset, valid_size: int | None) -> tuple[np.ndarray, str]:
    """As much of a dataset as can be read intact from its start, and a note if not all."""
    n = ds.shape[0] if ds.shape else 0
    if ds.chunks is None or not ds.shape:
        try:
            if valid_size is not None and ds.id.get_offset() is not None and \
                    ds.id.get_offset() + ds.id.get_storage_size() > valid_size:
                raise OSError("past the end of the file")
            return ds[()], ""
        except (OSError, RuntimeError, ValueError) as exc:
            return np.zeros((0,) + ds.shape[1:], dtype=ds.dtype), f"unreadable ({exc})"
    step = ds.chunks[0]
    # Where each chunk's bytes end. A chunk missing from the index was never written
    # (HDF5 would read it as fill-value zeros); one ending past the file end was cut off.
    ends = {}
    for ci in range(ds.id.get_num_chunks()):
        info = ds.id.get_chunk_info(ci)
        ends[info.chunk_offset[0]] = max(ends.get(info.chunk_offset[0], 0),
                                         info.byte_offset + info.size)
    parts, stop = [], 0
    note = ""
    while stop < n:
        hi = min(n, stop + step)
        try:
            if stop not in ends:
                raise OSError("never written")
            if valid_size is not None and ends[stop] > valid_size:
                raise OSError("past the end of the file")
            parts.append(ds[stop:hi])
        except (OSError, RuntimeError, ValueError) as exc:
            note = f"damaged from row {stop} of {n} ({str(exc).splitlines()[0][:80]})"
            break
        stop = hi
    data = np.concatenate(parts) if parts else np.zeros((0,) + ds.shape[1:], dtype=ds.dtype)
    return data, note


def _intact_rows(ds: h5py.Dataset, valid_size: int | None) -> int:
    """Leading rows of a chunked dataset whose chunks were written and lie in the file."""
    ends = {}
    for ci in range(ds.id.get_num_chunks()):
        info = ds.id.get_chunk_info(ci)
        ends[info.chunk_offset[0]] = max(ends.get(info.chunk_offset[0], 0),
                                         info.byte_offset + info.size)
    rows, step = 0, ds.chunks[0]
    while rows < ds.shape[0] and rows in ends and \
            (valid_size is None or ends[rows] <= valid_size):
        rows += step
    return min(rows, ds.shape[0])


def _read_group_verified(f, group: str, valid, damage: list[str], whole: bool) -> dict:
    """Every intact dataset of ``group`` (checksums verified); damage is noted.

    ``whole``: one damaged member discards the group (a state is only usable entire).
    """
    out: dict = {}
    try:
        if group in f:
            for k, v in f[group].items():
                data, note = _read_verified(v, valid)
                if note:
                    damage.append(f"{group}/{k}: {note}")
                    if whole:
                        return {}
                    continue
                out[k] = data
    except (OSError, RuntimeError, KeyError) as exc:
        damage.append(f"{group} is unreadable ({_first_line(exc)})")
        return {}
    return out


def read_run(path: str | os.PathLike) -> dict[str, Any]:
    """Everything but the frames, as plain Python and NumPy objects.

    A damaged or truncated file gives what is readable; ``damage`` lists what is
    missing and a :class:`RunFileWarning` says so.
    """
    f, damage, tmp = _open_salvage(path)
    try:
        # Every chunk is checked against the real end of the file: after a failed write
        # HDF5 may index a chunk that never reached the disk, and it reads as zeros.
        valid = getattr(f, "_mdgas_valid_size", None) or Path(path).stat().st_size
        out = _read_open(f, damage, valid, Path(path))
    finally:
        f.close()
        if tmp is not None:
            tmp.unlink(missing_ok=True)
    if damage:
        warnings.warn(f"{path}: damaged run file, read what was intact: " + "; ".join(damage),
                      RunFileWarning, stacklevel=2)
    return out


def _read_open(f: h5py.File, damage: list[str], valid: int | None,
               path: Path) -> dict[str, Any]:
    meta = _safe_attrs(f["mdgas"], "mdgas", damage, path)
    if "parameters" not in f:
        raise RunFileError(f"{path}: the parameters/ group is missing, so the run "
                           "cannot be interpreted; run the config again")
    params = {}
    for section, g in f["parameters"].items():
        if isinstance(g, h5py.Group) and section != UNITS_GROUP:
            attrs = _safe_attrs(g, f"parameters/{section}", None, path)
            unset = set(_plain(attrs.get("_unset", [])))
            params[section] = {k: (None if k in unset else _plain(v))
                               for k, v in attrs.items() if k != "_unset"}
    try:
        text = f["parameters/config_text"][()]
    except (KeyError, OSError):
        text, _ = b"", damage.append("parameters/config_text is missing")
    obs: dict[str, np.ndarray] = {}
    times = None
    try:
        groups = list(f["observables"].items()) if "observables" in f else []
    except (OSError, RuntimeError, KeyError) as exc:
        groups = []
        damage.append(f"observables/ is unreadable ({_first_line(exc)})")
    for name, g in groups:
        if name == "histograms":
            continue
        try:
            value, n1 = _read_prefix(g["value"], valid)
            t, n2 = _read_prefix(g["time"], valid)
        except (KeyError, OSError, RuntimeError, AttributeError) as exc:
            damage.append(f"observables/{name} is unreadable ({_first_line(exc)})")
            continue
        for note in (n1, n2):
            if note:
                damage.append(f"observables/{name}: {note}")
        obs[name] = value
        times = t if times is None or len(t) < len(times) else times
    if obs:
        n = min([len(v) for v in obs.values()] + [len(times)])
        # A writer killed between two appends leaves some series longer: keep the
        # samples every series has.
        obs = {k: v[:n] for k, v in obs.items()}
        times = times[:n]
    if not obs and any("observables" in d for d in damage):
        raise RunFileError(f"{path}: no time series can be read (" + "; ".join(damage) +
                           "); nothing is left to analyse, run the config again")
    lost = [name for name in OBSERVABLE_UNITS if name not in obs]
    if lost and obs:
        damage.append(f"time series lost: {', '.join(lost)}")
    hist = _read_group_verified(f, "observables/histograms", valid, damage, whole=False)
    n_frames = 0
    try:
        if f"{GROUP}/position/time" in f and f"{GROUP}/velocity/time" in f:
            n_frames = min(f[f"{GROUP}/position/time"].shape[0],
                           f[f"{GROUP}/velocity/time"].shape[0],
                           _intact_rows(f[f"{GROUP}/position/value"], valid),
                           _intact_rows(f[f"{GROUP}/velocity/value"], valid))
    except (OSError, RuntimeError, KeyError) as exc:
        damage.append(f"the trajectory frames are unreadable ({_first_line(exc)})")
    final = _read_group_verified(f, "mdgas/final", valid, damage, whole=True)
    status = _plain(meta.get("status", ""))
    if status == STATUS_COMPLETE and not final:
        damage.append("the final state (mdgas/final) is missing")
    if status == STATUS_COMPLETE and not hist:
        damage.append("the production histograms are missing")
    return {"meta": {k: _plain(v) for k, v in meta.items()}, "parameters": params,
            "config_text": text.decode() if isinstance(text, bytes) else text,
            "observables": obs, "times": times if times is not None else np.zeros(0),
            "histograms": hist, "n_frames": n_frames, "final": final, "damage": list(damage)}


def read_checkpoint(path: str | os.PathLike, max_samples: int | None = None
                    ) -> dict[str, Any] | None:
    """The latest valid checkpoint: {"state", "histograms", "counters", "seq"}, or None.

    ``max_samples``: skip a checkpoint that counts more samples than the file holds
    intact (a write that failed after it can cost samples it had counted).
    """
    with open_run_file(path) as f:
        root = f.get(CHECKPOINT)
        if root is None:
            return None
        order = sorted(SLOTS, key=lambda name: _slot_seq(root, name), reverse=True)
        for name in order:
            seq = _slot_seq(root, name)
            if seq < 0:
                continue
            try:
                slot = root[name]
                arrays = {}
                for part in ("state", "histograms"):
                    arrays[part] = {}
                    for k, v in slot[part].items():
                        data, note = _read_verified(v, None)
                        if note:
                            raise OSError(note)
                        arrays[part][k] = data
                counters = {k: _plain(v) for k, v in slot["counters"].attrs.items()}
                if max_samples is not None and int(counters["n_samples"]) > max_samples:
                    continue
                return {**arrays, "seq": seq, "slot": name, "counters": counters}
            except (KeyError, OSError, RuntimeError):
                continue  # this slot is damaged: fall back to the other one
    return None


def read_frames(path: str | os.PathLike, which: slice | list[int] = slice(None)
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(times, positions, velocities) of the stored frames selected by ``which``."""
    with open_run_file(path) as f:
        if f"{GROUP}/position" not in f or f"{GROUP}/velocity/value" not in f:
            return np.zeros(0), np.zeros((0, 0, 3)), np.zeros((0, 0, 3))
        n = min(f[f"{GROUP}/position/time"].shape[0], f[f"{GROUP}/position/value"].shape[0],
                f[f"{GROUP}/velocity/value"].shape[0])
        idx = np.arange(n)[which]
        t = f[f"{GROUP}/position/time"][:n][idx]
        if isinstance(which, slice):
            sl = slice(*which.indices(n))
            return t, f[f"{GROUP}/position/value"][sl], f[f"{GROUP}/velocity/value"][sl]
        return t, f[f"{GROUP}/position/value"][list(idx)], f[f"{GROUP}/velocity/value"][list(idx)]


def estimate_file_bytes(settings, state_bytes: int) -> int:
    """Rough size of the finished run file (samples, frames, four state copies)."""
    s = settings
    produce = max(s.schedule.produce, s.schedule.max_produce or 0.0)
    n_samples = (s.schedule.equilibrate + produce) / s.output.sample_every + 2
    sample_bytes = 10 * 16 + 25 * 8  # step + time per series, and the values
    frames = 0 if s.output.frame_every <= 0 else produce / s.output.frame_every + 1
    frame_bytes = s.gas.particles * 6 * 8  # random doubles hardly compress
    return int(n_samples * sample_bytes + frames * frame_bytes + 4 * state_bytes + 2 ** 20)


def _safe_attrs(obj, where: str, damage: list[str] | None, path: Path) -> dict[str, Any]:
    """An object's attributes, skipping damaged ones (noted in ``damage``); with
    ``damage`` None a damaged attribute is fatal (parameters cannot be guessed)."""
    try:
        names = list(obj.attrs.keys())
    except (OSError, RuntimeError, KeyError) as exc:
        raise RunFileError(f"{path}: the attributes of {where}/ are damaged "
                           f"({_first_line(exc)}); the run cannot be interpreted, run the "
                           "config again") from None
    out = {}
    for name in names:
        try:
            out[name] = obj.attrs[name]
        except (OSError, RuntimeError, KeyError) as exc:
            if damage is None:
                raise RunFileError(f"{path}: {where}/@{name} is damaged ({_first_line(exc)}); "
                                   "the run cannot be interpreted, run the config again"
                                   ) from None
            damage.append(f"{where}/@{name} is damaged")
    return out


def _first_line(exc: BaseException) -> str:
    text = str(exc)
    return text.splitlines()[0][:120] if text else exc.__class__.__name__


def _plain(v: Any) -> Any:
    if isinstance(v, bytes):
        return v.decode()
    if isinstance(v, np.ndarray):
        return [_plain(x) for x in v.tolist()]
    if isinstance(v, np.generic):
        return v.item()
    return v
