"""The registry of engines and the one interface they share.

An engine turns settings into an initial state (a dict of NumPy arrays, so the store
can checkpoint it without knowing the engine) and advances that state by a chunk of
simulated time inside compiled code, adding time integrals and counts to the shared
accumulator laid out in :mod:`mdgas.observe`.
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np

from ..errors import ConfigError


class Engine:
    """Base class. Subclasses set ``name`` and implement ``initial_state`` and ``advance``.

    State arrays every engine provides: ``positions`` (N, 3) in [0, L) per axis,
    ``velocities`` (N, 3), ``time`` (1,) simulated time, ``rng`` (4,) uint64 generator
    state (see :mod:`mdgas.engines.rng`). Engines may add arrays of their own.
    """

    name: ClassVar[str] = ""
    #: Long-range tail corrections added to every sample (zero unless the model has them).
    energy_tail: float = 0.0     # per particle (ε)
    pressure_tail: float = 0.0   # (ε/σ³)

    def __init__(self, settings) -> None:
        self.settings = settings
        self.box = settings.box
        self.walled = np.array(settings.walled, dtype=np.bool_)

    @classmethod
    def validate(cls, settings) -> None:
        """Raise ConfigError for settings this engine cannot run."""

    def initial_state(self) -> dict[str, np.ndarray]:
        raise NotImplementedError

    def advance(self, state: dict[str, np.ndarray], duration: float, acc: np.ndarray,
                producing: bool) -> None:
        """Advance ``state`` in place by about ``duration`` (τ); ``state['time']`` says how far.

        ``producing`` is False during equilibration (thermostats may then differ).
        """
        raise NotImplementedError

    def health(self, state: dict[str, np.ndarray]) -> str:
        """Empty when the state is sound, else what went wrong (NaN, particle outside)."""
        pos, vel = state["positions"], state["velocities"]
        if not (np.isfinite(pos).all() and np.isfinite(vel).all()):
            return "positions or velocities became NaN or infinite"
        box = self.box
        outside = ((pos < 0.0) | (pos > box)).any(axis=1)
        if outside.any():
            return f"{int(outside.sum())} particle(s) left the box"
        return ""

    def cost_per_time(self) -> float:
        """Rough wall-clock seconds per unit of simulated time (for estimates)."""
        return 1e-7 * self.settings.gas.particles

    def memory_bytes(self) -> int:
        """Rough memory the engine's state and buffers take."""
        return 64 * self.settings.gas.particles


_REGISTRY: dict[str, type[Engine]] = {}


def register(cls: type[Engine]) -> type[Engine]:
    _REGISTRY[cls.name] = cls
    return cls


def get_engine(model: str) -> type[Engine]:
    _load_all()
    try:
        return _REGISTRY[model]
    except KeyError:
        raise ConfigError("<settings>", "gas.model", f"no engine named {model!r}",
                          f"available: {', '.join(sorted(_REGISTRY))}") from None


def available() -> list[str]:
    _load_all()
    return sorted(_REGISTRY)


def _load_all() -> None:
    # Importing the modules registers them; done lazily so `import mdgas` stays fast.
    from . import ballistic  # noqa: F401
    for optional in ("events", "verlet"):
        try:
            __import__(f"{__name__}.{optional}")
        except ModuleNotFoundError as exc:
            if exc.name != f"{__name__}.{optional}":
                raise
