"""Interruption in a real subprocess: SIGINT/SIGTERM, SIGKILL at random moments, a kill in
the middle of a checkpoint, a write failure, and the memory of a million-particle run.

Every run here goes through ``python -m mdgas.cli`` with one numba thread, and every
resumed run is compared array by array with an uninterrupted one.
"""

from __future__ import annotations

import os
import random
import resource
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

import mdgas
from mdgas import driver, engines, store

from test_resume import assert_identical

ENV = {**os.environ, "NUMBA_NUM_THREADS": "1", "PYTHONUNBUFFERED": "1"}
CLI = [sys.executable, "-m", "mdgas.cli"]

#: Per model: a config that computes for about 2 s with one thread, checkpointing
#: every 0.12 s of wall time so that kills land between, and sometimes inside, checkpoints.
CONFIGS = {
    "ideal": """
        [gas]
        model = "ideal"
        particles = 2000
        density = 0.01
        [schedule]
        equilibrate = 5.0
        produce = 2000.0
        [output]
        sample_every = 0.5
        frame_every = 500.0
        checkpoint_every = 0.002
        """,
    "hard-sphere": """
        [gas]
        model = "hard-sphere"
        particles = 500
        density = 0.2
        temperature = 2.0
        [schedule]
        equilibrate = 1.0
        produce = 12.0
        [output]
        sample_every = 0.25
        frame_every = 5.0
        checkpoint_every = 0.002
        """,
    "lennard-jones": """
        [gas]
        model = "lennard-jones"
        particles = 500
        density = 0.2
        temperature = 2.0
        [schedule]
        equilibrate = 1.0
        produce = 8.0
        [output]
        sample_every = 0.25
        frame_every = 2.0
        checkpoint_every = 0.002
        """,
}


def write_config(tmp_path: Path, model: str) -> Path:
    if model not in engines.available():
        pytest.skip(f"the {model!r} engine is not in the registry yet")
    p = tmp_path / f"{model}.toml"
    p.write_text(textwrap.dedent(CONFIGS[model]))
    return p


def cli(*args: str, timeout: float = 120) -> subprocess.CompletedProcess:
    return subprocess.run([*CLI, *args], env=ENV, capture_output=True, text=True,
                          timeout=timeout)


def start(*args: str) -> subprocess.Popen:
    return subprocess.Popen([*CLI, *args], env=ENV, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def wait_for_checkpoint(path: Path, proc: subprocess.Popen, timeout: float = 60) -> None:
    """Block until the run has written its first checkpoint (startup is over)."""
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if proc.poll() is not None:
            return
        try:
            with h5py.File(path, "r", locking=False) as f:
                if f["mdgas"].attrs.get("checkpoints", 0) >= 1:
                    return
        except (OSError, KeyError):
            pass
        time.sleep(0.02)
    raise AssertionError("the run never wrote a checkpoint")


def timed_reference(tmp_path: Path, cfg: Path) -> tuple[Path, float]:
    """The uninterrupted run, and the wall time from its first checkpoint to its end."""
    ref = tmp_path / "reference.h5"
    proc = start("run", str(cfg), "-o", str(ref), "-q")
    wait_for_checkpoint(ref, proc)
    t0 = time.monotonic()
    span = None
    while proc.poll() is None:
        try:
            with h5py.File(ref, "r", locking=False) as f:
                if f["mdgas"].attrs["status"] == store.STATUS_COMPLETE:
                    span = time.monotonic() - t0
                    break
        except (OSError, KeyError):
            pass
        time.sleep(0.02)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, err
    return ref, span if span is not None else time.monotonic() - t0


@pytest.fixture(scope="module")
def ideal(tmp_path_factory) -> tuple[Path, Path, float]:
    """(config, uninterrupted run file, its computing wall time) of the ideal-gas case,
    shared by the tests of this module that only read it."""
    tmp = tmp_path_factory.mktemp("ideal")
    cfg = write_config(tmp, "ideal")
    ref, span = timed_reference(tmp, cfg)
    return cfg, ref, span


def reference_for(model: str, tmp_path: Path, ideal) -> tuple[Path, Path, float]:
    if model == "ideal":
        return ideal
    cfg = write_config(tmp_path, model)
    return (cfg, *timed_reference(tmp_path, cfg))


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_signal_stops_cleanly_with_exit_130_and_resume_completes(sig, tmp_path, ideal):
    cfg, ref, _ = ideal
    out = tmp_path / "stopped.h5"
    proc = start("run", str(cfg), "-o", str(out), "-q")
    wait_for_checkpoint(out, proc)
    time.sleep(0.3)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert "Traceback" not in err
    assert f"mdgas resume {out}" in err
    assert f"stopped by {sig.name}" in err
    run = mdgas.load(out)  # a valid file: loads, and says it was interrupted
    assert run.status == store.STATUS_INTERRUPTED
    assert run.meta["resumable"]
    ck = store.read_checkpoint(out)
    assert ck["counters"]["n_samples"] == len(run.times) > 0
    r = cli("resume", str(out), "-q")
    assert r.returncode == 0, r.stderr
    assert "(complete)" in r.stdout
    assert_identical(ref, out)


@pytest.mark.parametrize("model", list(CONFIGS))
def test_sigkill_at_random_moments_then_resume_is_bit_identical(model, tmp_path, ideal):
    cfg, ref, span = reference_for(model, tmp_path, ideal)
    rng = random.Random(20240 + len(model))  # fixed seed: the same kill moments every time
    killed = 0
    for k in range(3):
        out = tmp_path / f"killed{k}.h5"
        proc = start("run", str(cfg), "-o", str(out), "-q")
        wait_for_checkpoint(out, proc)
        time.sleep(rng.uniform(0.0, 0.8) * span)
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=60)
        run = mdgas.load(out)  # readable up to its last flush after SIGKILL
        if run.status == store.STATUS_COMPLETE:
            assert_identical(ref, out)  # the kill came too late; still a sound file
            continue
        killed += 1
        assert run.status == store.STATUS_RUNNING  # nobody could mark it
        ck = store.read_checkpoint(out)
        assert ck is not None and ck["counters"]["n_samples"] <= len(run.times)
        r = cli("resume", str(out), "-q")
        assert r.returncode == 0, r.stderr
        assert_identical(ref, out)
    assert killed >= 2, "the kills came after the runs had finished; lengthen the configs"


KILL_IN_CHECKPOINT = """
import os, signal, sys
from mdgas import config, driver, store
calls = {"n": 0}
original = store._write_arrays
def dying(group, arrays):
    # Die half-way through the third checkpoint's state arrays, after the slot was
    # marked invalid and some of its data overwritten.
    if group.name.endswith("/state"):
        calls["n"] += 1
        if calls["n"] == 3:
            first = dict(list(arrays.items())[:1])
            original(group, {k: v * 0 + 7 for k, v in first.items()})
            group.file.flush()
            os.kill(os.getpid(), signal.SIGKILL)
    original(group, arrays)
store._write_arrays = dying
s = config.load(sys.argv[1])
driver.simulate(s, sys.argv[2], progress=False)
"""


def test_sigkill_inside_a_checkpoint_write_falls_back_to_the_other_slot(tmp_path, ideal):
    cfg, ref, _ = ideal
    out = tmp_path / "dead.h5"
    r = subprocess.run([sys.executable, "-c", KILL_IN_CHECKPOINT, str(cfg), str(out)],
                       env=ENV, capture_output=True, text=True, timeout=120)
    assert r.returncode == -signal.SIGKILL, r.stderr
    with h5py.File(out, "r") as f:
        seqs = sorted(int(f[store.CHECKPOINT][k].attrs["seq"]) for k in store.SLOTS)
    assert seqs == [-1, 2]  # the slot being written is invalid, the other one intact
    r = cli("resume", str(out), "-q")
    assert r.returncode == 0, r.stderr
    assert_identical(ref, out)


def _limit_file_size(limit: int):
    def set_limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return set_limit


def test_a_write_failure_stops_cleanly_keeps_the_data_and_resumes(tmp_path, ideal):
    # A file-size limit makes writes fail with EFBIG part-way, as a full disk would
    # (Python ignores SIGXFSZ, so the write call itself fails).
    cfg, ref, _ = ideal
    full = ref.stat().st_size
    out = tmp_path / "limited.h5"
    r = subprocess.run([*CLI, "run", str(cfg), "-o", str(out), "-q"], env=ENV,
                       capture_output=True, text=True, timeout=120,
                       preexec_fn=_limit_file_size(int(0.6 * full)))
    assert r.returncode == 2, r.stderr
    assert "Traceback" not in r.stderr
    assert "writing the run file failed" in r.stderr and "mdgas resume" in r.stderr
    with pytest.warns(store.RunFileWarning, match="truncated"):
        run = mdgas.load(out)  # the failed write left the file short: salvaged on reading
    assert run.status == store.STATUS_RUNNING  # left unmarked, like a killed run
    assert len(run.times) > 100  # the data flushed before the failure is intact
    ref_run = mdgas.load(ref)
    n = len(run.times)
    assert np.array_equal(run.observables["pressure_wall"], ref_run.observables["pressure_wall"][:n])
    r = cli("resume", str(out), "-q")
    assert r.returncode == 0, r.stderr
    assert_identical(ref, out)


MILLION = """
[gas]
model = "ideal"
particles = 1000000
density = 0.01
[schedule]
equilibrate = 0.5
produce = 4.0
[output]
sample_every = 0.5
frame_every = 4.0
"""


def test_million_particle_ideal_run_fits_in_2_gb(tmp_path):
    cfg = tmp_path / "million.toml"
    cfg.write_text(MILLION)
    out = tmp_path / "million.h5"
    log = tmp_path / "stderr.txt"
    # The peak is read from /proc/self/status (VmHWM) inside the child when the run ends:
    # the child's rusage would also count the pages of the forked test process before
    # exec (Linux keeps that high-water mark across exec), i.e. the size of pytest.
    probe = ("import sys\nfrom mdgas.cli import main\nrc = main(sys.argv[1:])\n"
             "hwm = [l for l in open('/proc/self/status') if l.startswith('VmHWM')][0]\n"
             "sys.stderr.write('PEAK ' + hwm.split()[1] + '\\n')\nsys.exit(rc)\n")
    with open(log, "w") as err:
        proc = subprocess.run([sys.executable, "-c", probe, "run", str(cfg), "-o", str(out),
                               "-q"], env=ENV, stdout=subprocess.DEVNULL, stderr=err)
    text = log.read_text()
    assert proc.returncode == 0, text
    peak = int(text.split("PEAK ")[1].split()[0]) * 1024  # kB
    assert mdgas.load(out).complete
    assert peak < 2 * 2 ** 30, f"peak RSS {peak / 2**20:.0f} MB"
    # `mdgas check` states memory_estimate: it must not promise less than was used,
    # nor be so loose that it says nothing.
    settings = mdgas.config.load(cfg)
    estimate = driver.memory_estimate(settings)
    assert peak <= estimate <= 2 * peak, (peak / 2**20, estimate / 2**20)


def test_a_nearly_full_disk_stops_the_run_before_hdf5_fails(tmp_path, monkeypatch):
    import shutil
    from collections import namedtuple

    from test_resume import settings_for
    s = settings_for("ideal")
    ref = tmp_path / "ref.h5"
    driver.simulate(s, ref, progress=False)
    real = shutil.disk_usage
    usage = namedtuple("usage", "total used free")
    calls = {"n": 0}

    def disk_usage(path):
        # The pre-flight check and the first checkpoint see a roomy disk, then it fills.
        calls["n"] += 1
        return real(path) if calls["n"] <= 2 else usage(10 * 2**30, 10 * 2**30 - 2**20, 2**20)
    monkeypatch.setattr(driver.shutil, "disk_usage", disk_usage)
    out = tmp_path / "full-disk.h5"
    with pytest.raises(mdgas.errors.UserError, match="disk is nearly full.*mdgas resume"):
        driver.simulate(s, out, progress=False)
    run = mdgas.load(out)
    assert run.status == store.STATUS_INTERRUPTED and run.meta["resumable"]
    monkeypatch.undo()
    driver.resume(out, progress=False)
    assert_identical(ref, out)


def test_preflight_refuses_a_run_that_cannot_fit_on_the_disk(tmp_path):
    from mdgas import config
    s = config.default_settings().replace(**{"gas.particles": 1_000_000,
                                             "schedule.produce": 1e6,
                                             "output.frame_every": 0.5})
    with pytest.raises(mdgas.errors.UserError, match="MB are free.*frame_every = 0"):
        driver.simulate(s, tmp_path / "huge.h5", progress=False)
    assert not (tmp_path / "huge.h5").exists()  # refused before anything was written


def test_resume_and_force_refuse_a_run_that_is_still_going(tmp_path, ideal):
    cfg, _, _ = ideal
    out = tmp_path / "busy.h5"
    # Long enough to outlast the two attempts; it is stopped by SIGINT below anyway.
    proc = start("run", str(cfg), "-o", str(out), "-q", "--set", "schedule.produce=50000.0")
    try:
        wait_for_checkpoint(out, proc)
        resumed = cli("resume", str(out), "-q")
        # HDF5 truncates before it checks the lock: --force must not get that far.
        forced = cli("run", str(cfg), "-o", str(out), "-q", "--force")
        still_going = proc.poll() is None
    finally:
        proc.send_signal(signal.SIGINT)
        proc.communicate(timeout=60)
    if not still_going:
        pytest.skip("the run finished before the attempts (machine too fast)")
    for r in (resumed, forced):
        assert r.returncode == 2, r.stderr
        assert "Traceback" not in r.stderr
        assert "still going" in r.stderr or "another process is writing" in r.stderr
    run = mdgas.load(out)  # the first run's file survived both attempts
    assert run.status in (store.STATUS_INTERRUPTED, store.STATUS_COMPLETE)
    assert len(run.times) > 0
