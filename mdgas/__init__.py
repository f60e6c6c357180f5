"""mdgas: where does PV = NkT stop being good enough for a confined gas, and by how much?

Python API (the command line is a thin layer over it)::

    import mdgas
    run = mdgas.simulate("configs/closed-box.toml", **{"gas.density": 0.05})
    print(run.summary()["Z"])
    run = mdgas.load("runs/closed-box.h5")
"""

from __future__ import annotations

__version__ = "0.1.0"

from pathlib import Path
from typing import Any

from .config import Settings


def simulate(config: "str | Path | Settings | None" = None, *, path: "str | Path | None" = None,
             force: bool = False, progress: bool | None = False, **overrides: Any):
    """Run a simulation and return the loaded :class:`mdgas.run.Run`.

    ``config`` is a TOML path, a :class:`Settings`, or None for the embedded default;
    ``overrides`` use dotted keys, e.g. ``simulate(cfg, **{"gas.density": 0.05})``.
    """
    from . import config as _config
    from .driver import simulate as _simulate
    from .run import load as _load
    if config is None:
        settings = _config.default_settings()
    elif isinstance(config, Settings):
        settings = config
    else:
        settings = _config.load(config)
    if overrides:
        settings = settings.replace(**overrides)
    out = _simulate(settings, path, force=force, progress=progress)
    return _load(out)


def load(path: "str | Path"):
    """Open a run file: ``mdgas.load("runs/closed-box.h5").summary()``."""
    from .run import load as _load
    return _load(path)
