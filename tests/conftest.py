"""Shared test helpers: small runs written to a temporary folder."""

from __future__ import annotations

import os

import pytest

# Tests must not fight over the two cores with numba's default thread pool per process.
os.environ.setdefault("NUMBA_NUM_THREADS", "2")


@pytest.fixture
def run_in(tmp_path):
    """``run_in(settings_or_path, **overrides)`` -> Run written under tmp_path."""
    import mdgas
    counter = {"n": 0}

    def _run(config=None, **overrides):
        counter["n"] += 1
        return mdgas.simulate(config, path=tmp_path / f"run{counter['n']}.h5", force=True,
                              **overrides)
    return _run
