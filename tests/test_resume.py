"""Checkpoints and exact resume: an interrupted and resumed run equals the uninterrupted one.

Every engine in the registry is covered by a small config of its own; a model whose
engine has not landed is skipped with the reason. Interruptions here are real SIGINTs
delivered to this process at a chosen simulated time (the signal is raised from inside
a wrapped ``advance``), so the driver's own signal handling does the stopping.
"""

from __future__ import annotations

import math
import signal
from pathlib import Path

import h5py
import numpy as np
import pytest

import mdgas
from mdgas import config, driver, engines, store
from mdgas.errors import RunInterrupted, UserError

#: A small, quick config per model (reduced units).
MODELS = {
    "ideal": {"gas.model": "ideal", "gas.particles": 300, "gas.density": 0.05,
              "schedule.equilibrate": 2.0, "schedule.produce": 30.0,
              "output.frame_every": 5.0},
    "hard-sphere": {"gas.model": "hard-sphere", "gas.particles": 200, "gas.density": 0.2,
                    "schedule.equilibrate": 1.0, "schedule.produce": 6.0,
                    "output.frame_every": 2.0},
    "lennard-jones": {"gas.model": "lennard-jones", "gas.particles": 200, "gas.density": 0.2,
                      "gas.temperature": 2.0, "schedule.equilibrate": 1.0,
                      "schedule.produce": 4.0, "output.frame_every": 1.0},
}
COMMON = {"output.sample_every": 0.25, "container.walls": "xyz"}


def settings_for(model: str, **extra) -> config.Settings:
    if model not in engines.available():
        pytest.skip(f"the {model!r} engine is not in the registry yet")
    return config.default_settings().replace(**{**COMMON, **MODELS[model], **extra})


@pytest.fixture(autouse=True)
def one_thread():
    """Bit-exact resume is promised with one thread (prange reductions reorder sums)."""
    import numba
    before = numba.get_num_threads()
    numba.set_num_threads(1)
    yield
    numba.set_num_threads(before)


def result_arrays(path: Path) -> dict[str, np.ndarray]:
    """Every array a user reads from a run file: time series, histograms, frames, final state."""
    out: dict[str, np.ndarray] = {}
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                out[name] = obj[()]
        for group in ("observables", "particles", "mdgas/final"):
            f[group].visititems(lambda n, o, g=group: visit(f"{g}/{n}", o))
        out["@production_time"] = np.array(f["mdgas"].attrs["production_time"])
        out["@produce"] = np.array(f["parameters/schedule"].attrs["produce"])
    return out


def assert_identical(reference: Path, other: Path) -> None:
    a, b = result_arrays(reference), result_arrays(other)
    assert sorted(a) == sorted(b)
    differ = [k for k in a if a[k].shape != b[k].shape or not np.array_equal(a[k], b[k])]
    assert not differ, f"arrays that differ after resume: {differ}"


def interrupt_at(monkeypatch, model: str, times: list[float]) -> None:
    """Raise SIGINT in this process inside the first chunk that crosses each time."""
    cls = engines.get_engine(model)
    original = cls.advance
    pending = sorted(times)

    def advance(self, state, duration, acc, producing):
        original(self, state, duration, acc, producing)
        if pending and state["time"][0] >= pending[0]:
            pending.pop(0)
            signal.raise_signal(signal.SIGINT)
    monkeypatch.setattr(cls, "advance", advance)


def run_interrupted(monkeypatch, settings, path: Path, stops: list[float]) -> int:
    """Run with a SIGINT at each stop time, resuming after each; returns the interruptions."""
    interrupt_at(monkeypatch, settings.gas.model, stops)
    count = 0
    try:
        driver.simulate(settings, path, force=True, progress=False)
    except RunInterrupted:
        count += 1
    while True:
        with h5py.File(path, "r") as f:
            if f["mdgas"].attrs["status"] == store.STATUS_COMPLETE:
                break
            assert f["mdgas"].attrs["status"] == store.STATUS_INTERRUPTED
        try:
            driver.resume(path, progress=False)
        except RunInterrupted:
            count += 1
    monkeypatch.undo()
    return count


@pytest.mark.parametrize("model", list(MODELS))
def test_interrupted_and_resumed_run_is_bit_identical(model, tmp_path, monkeypatch):
    s = settings_for(model)
    ref = tmp_path / "reference.h5"
    driver.simulate(s, ref, progress=False)
    t_eq, t_end = s.schedule.equilibrate, s.schedule.equilibrate + s.schedule.produce
    # One stop in equilibration, two in production (one right at a frame boundary).
    stops = [0.5 * t_eq, t_eq + 0.3 * (t_end - t_eq), t_eq + s.output.frame_every]
    other = tmp_path / "resumed.h5"
    assert run_interrupted(monkeypatch, s, other, stops) == 3
    assert_identical(ref, other)
    with h5py.File(other, "r") as f:
        assert f["mdgas"].attrs["resumes"] == 3


def test_checkpoint_holds_the_whole_state_and_the_driver_counters(tmp_path, monkeypatch):
    s = settings_for("ideal")
    path = tmp_path / "stopped.h5"
    interrupt_at(monkeypatch, "ideal", [10.0])
    with pytest.raises(RunInterrupted, match="mdgas resume"):
        driver.simulate(s, path, progress=False)
    ck = store.read_checkpoint(path)
    engine = engines.get_engine("ideal")(s)
    fresh = engine.initial_state()
    assert set(ck["state"]) == set(fresh)
    for k, v in fresh.items():
        assert ck["state"][k].shape == v.shape and ck["state"][k].dtype == v.dtype, k
    assert ck["state"]["time"][0] == pytest.approx(10.0)
    c = ck["counters"]
    for key in ("t_end", "next_frame", "n_samples", "n_frames", "extensions", "phase"):
        assert key in c, key
    assert c["n_samples"] == 40 and c["n_frames"] == 2  # samples every 0.25 τ, frames at 2, 7
    assert c["next_frame"] == 12.0
    run = mdgas.load(path)
    assert run.status == store.STATUS_INTERRUPTED
    assert len(run.times) == c["n_samples"]
    assert set(ck["histograms"]) >= {"speed_counts", "samples"}
    assert int(ck["histograms"]["samples"]) == 32  # production samples from t = 2 to 10


def test_the_newer_valid_slot_wins_and_an_invalid_one_is_ignored(tmp_path, monkeypatch):
    s = settings_for("ideal")
    path = tmp_path / "slots.h5"
    interrupt_at(monkeypatch, "ideal", [10.0])
    with pytest.raises(RunInterrupted):
        driver.simulate(s, path, progress=False)
    with h5py.File(path, "r+") as f:
        root = f[store.CHECKPOINT]
        seqs = {k: int(root[k].attrs["seq"]) for k in store.SLOTS}
        newest = max(seqs, key=seqs.get)
        older = min(seqs, key=seqs.get)
        assert seqs[newest] > seqs[older] >= 1
        # A crash while rewriting the newest slot leaves it marked invalid.
        root[newest].attrs["seq"] = -1
        older_time = float(root[older]["state/time"][0])
    ck = store.read_checkpoint(path)
    assert ck["slot"] == older and ck["state"]["time"][0] == older_time
    # Resuming from the older checkpoint still reproduces the uninterrupted run.
    monkeypatch.undo()
    driver.resume(path, progress=False)
    ref = tmp_path / "ref.h5"
    driver.simulate(s, ref, progress=False)
    assert_identical(ref, path)


def test_resume_refuses_a_complete_run_and_a_failed_one(tmp_path):
    s = settings_for("ideal")
    path = tmp_path / "done.h5"
    driver.simulate(s, path, progress=False)
    with pytest.raises(UserError, match="already complete"):
        driver.resume(path)
    with h5py.File(path, "r+") as f:
        f["mdgas"].attrs["status"] = store.STATUS_FAILED
        f["mdgas"].attrs["message"] = "the run became unstable"
    with pytest.raises(UserError, match="cannot be resumed"):
        driver.resume(path)


# Precision target -------------------------------------------------------------------

def test_target_stderr_extends_production_until_reached(tmp_path):
    # Ideal gas, 300 particles: stderr(Z) after 30 τ is about 0.033 (predicted from the
    # wall-hit count, driver.predicted_z_stderr); asking for 0.02 needs about 80 τ.
    s = settings_for("ideal", **{"schedule.target_stderr": 0.02,
                                 "schedule.max_produce": 400.0})
    path = tmp_path / "target.h5"
    driver.simulate(s, path, progress=False)
    run = mdgas.load(path)
    produced = run.meta["production_time"]
    assert s.schedule.produce < produced < 400.0
    assert run.settings.schedule.produce == produced  # parameters/schedule produce updated
    assert run.meta["extensions"] >= 1
    assert run.times[-1] == pytest.approx(s.schedule.equilibrate + produced)
    z = run.summary()["Z"]
    assert z["stderr"] <= 0.02
    # Z of an ideal gas is 1 (PV = NkT): the extended run still agrees within 4 stderr.
    assert abs(z["mean"] - 1.0) < 4 * z["stderr"] + 1e-3
    # The stopping rule saw the same stderr the driver computes from the file.
    _, pw = run.series("pressure_wall")
    _, pv = run.series("pressure_virial")
    _, temp = run.series("temperature")
    assert driver.z_stderr(run.settings, pw, pv, temp) <= 0.02
    # ... while at the requested produce (30 τ = 120 samples) it had not been reached.
    k = int(round(s.schedule.produce / s.output.sample_every))
    assert driver.z_stderr(run.settings, pw[:k], pv[:k], temp[:k]) > 0.02


def test_target_stderr_stops_at_max_produce(tmp_path):
    s = settings_for("ideal", **{"schedule.target_stderr": 1e-5, "schedule.max_produce": 60.0})
    path = tmp_path / "capped.h5"
    driver.simulate(s, path, progress=False)
    run = mdgas.load(path)
    assert run.meta["production_time"] == pytest.approx(60.0)
    assert run.times[-1] == pytest.approx(62.0)
    assert run.summary()["Z"]["stderr"] > 1e-5


def test_target_stderr_run_resumes_bit_identically(tmp_path, monkeypatch):
    extra = {"schedule.target_stderr": 0.02, "schedule.max_produce": 400.0}
    s = settings_for("ideal", **extra)
    ref = tmp_path / "ref.h5"
    driver.simulate(s, ref, progress=False)
    other = tmp_path / "other.h5"
    # Stop inside the first extension, after the decision to extend was taken.
    assert run_interrupted(monkeypatch, s, other, [40.0]) == 1
    assert_identical(ref, other)


def test_warnings_name_the_unwise_setting_and_the_fix():
    s = config.default_settings().replace(**{"gas.particles": 50, "schedule.produce": 10.0,
                                             "output.sample_every": 0.5})
    text = " | ".join(driver.warnings_for(s))
    assert "only 50 particles" in text and "gas.particles >=" in text
    assert "only 20 production samples" in text
    assert "too short for the requested precision" in text
    target = config.default_settings().replace(**{"schedule.target_stderr": 1e-4,
                                                  "schedule.max_produce": 400.0})
    assert any("schedule.max_produce to about" in w for w in driver.warnings_for(target))
    fine = config.default_settings().replace(**{"gas.particles": 20000,
                                                "schedule.produce": 2000.0})
    assert driver.warnings_for(fine) == []


def test_predicted_z_stderr_matches_a_measured_one(tmp_path):
    # The warning's prediction is an uncorrelated estimate for an ideal gas between
    # specular walls; on a real run it agrees with the block-averaged stderr to 30 %.
    s = settings_for("ideal", **{"schedule.produce": 100.0})
    run = mdgas.load(driver.simulate(s, tmp_path / "p.h5", progress=False))
    measured = run.summary()["Z"]["stderr"]
    predicted = driver.predicted_z_stderr(s, s.schedule.produce)
    assert math.isclose(measured, predicted, rel_tol=0.3), (measured, predicted)
