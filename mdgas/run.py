"""The ``Run`` object: a finished (or partial) run file opened for analysis."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from . import config, store


@dataclass
class Run:
    """Settings, time series, histograms and final state of one run file (reduced units).

    ``observables[name]`` has one row per sample, at ``times``; samples after
    ``production_start`` are production, earlier ones equilibration.
    """

    path: Path
    settings: config.Settings
    status: str
    message: str
    meta: dict[str, Any]
    times: np.ndarray
    observables: dict[str, np.ndarray]
    histograms: dict[str, np.ndarray]
    final_state: dict[str, np.ndarray] = field(default_factory=dict)
    n_frames: int = 0

    @property
    def production_start(self) -> float:
        return float(self.meta.get("production_start", 0.0))

    @property
    def complete(self) -> bool:
        return self.status == store.STATUS_COMPLETE

    def production_mask(self) -> np.ndarray:
        # A sample stamped at the end of its interval belongs to production when the
        # interval began at or after the production start.
        dt = self.settings.output.sample_every
        return self.times > self.production_start + 1e-9 * max(1.0, dt)

    def series(self, name: str, production: bool = True) -> tuple[np.ndarray, np.ndarray]:
        """(times, values) of one observable, production samples only by default."""
        if name not in self.observables:
            raise KeyError(f"{name!r} is not recorded in {self.path}; recorded: "
                           f"{', '.join(sorted(self.observables))}")
        v = self.observables[name]
        if not production:
            return self.times, v
        m = self.production_mask()
        return self.times[m], v[m]

    def frames(self, which: slice | list[int] = slice(None)):
        """(times, positions, velocities) of stored trajectory frames."""
        return store.read_frames(self.path, which)

    def summary(self) -> dict[str, Any]:
        from .analysis.summary import summarize
        return summarize(self)


def load(path: str | Path) -> Run:
    """Open a run file written by ``mdgas run`` (complete or not)."""
    raw = store.read_run(path)
    settings = config.from_dict(raw["parameters"], source=str(path), text=raw["config_text"],
                                check_model=False)
    meta = raw["meta"]
    return Run(path=Path(path), settings=settings, status=meta.get("status", "?"),
               message=meta.get("message", ""), meta=meta, times=raw["times"],
               observables=raw["observables"], histograms=raw["histograms"],
               final_state=raw["final"], n_frames=raw["n_frames"])
