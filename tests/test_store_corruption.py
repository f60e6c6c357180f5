"""Damaged run files: cutting or overwriting a file's last bytes leaves the earlier data
readable, never returns garbage as data, and the tool says what is missing."""

from __future__ import annotations

import random
import shutil
import warnings
from pathlib import Path

import numpy as np
import pytest

import mdgas
from mdgas import cli, config, driver, store

SMALL = {"gas.particles": 300, "gas.density": 0.05, "schedule.equilibrate": 2.0,
         "schedule.produce": 40.0, "output.sample_every": 0.1, "output.frame_every": 10.0}


@pytest.fixture(scope="module")
def intact(tmp_path_factory) -> Path:
    """A finished run written as a long one is: flushed after every sample (a run this
    short would otherwise write everything in one flush at its very end)."""
    path = tmp_path_factory.mktemp("intact") / "run.h5"
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(driver, "FLUSH_SECONDS", 0.0)
        driver.simulate(config.default_settings().replace(**SMALL), path, progress=False)
    return path


def load_quietly(path: Path):
    """(Run, damage notes from the RunFileWarning or [])."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        run = mdgas.load(path)
    notes = [str(w.message) for w in caught if issubclass(w.category, store.RunFileWarning)]
    return run, notes


def assert_prefix_of(damaged, original) -> None:
    """Whatever a damaged file returns is the intact file's data, cut short: never garbage."""
    n = len(damaged.times)
    assert np.array_equal(damaged.times, original.times[:n])
    for name, value in damaged.observables.items():
        assert np.array_equal(value, original.observables[name][:n]), name
    for name, value in damaged.histograms.items():
        assert np.array_equal(value, original.histograms[name]), name
    for name, value in damaged.final_state.items():
        assert np.array_equal(value, original.final_state[name]), name


@pytest.mark.parametrize("cut", [0.01, 0.1, 0.3, 0.6])
def test_cutting_the_last_bytes_keeps_the_earlier_data_and_says_so(cut, intact, tmp_path):
    original, _ = load_quietly(intact)
    damaged_path = tmp_path / "cut.h5"
    data = intact.read_bytes()
    damaged_path.write_bytes(data[:int(len(data) * (1 - cut))])
    try:
        damaged, notes = load_quietly(damaged_path)
    except mdgas.errors.RunFileError as exc:
        # Only when what was cut away held the time series' own index: one clear message.
        assert cut > 0.1, f"a {cut:.0%} cut lost every sample: {exc}"
        assert "no time series can be read" in str(exc) and str(damaged_path) in str(exc)
        return
    assert notes and "truncated" in notes[0]
    assert_prefix_of(damaged, original)
    # What is missing is named: the final state lives at the end of a finished file.
    if not damaged.final_state:
        assert "final state" in notes[0] or "mdgas/final" in notes[0]
    if len(damaged.times) < len(original.times):
        assert "damaged from row" in notes[0] or "unreadable" in notes[0] \
            or "lost" in notes[0]
    if cut <= 0.1:
        assert len(damaged.times) > 0.5 * len(original.times)


@pytest.mark.parametrize("nbytes", [16, 4096, 65536, 400000])
def test_overwriting_the_last_bytes_never_passes_garbage_off_as_data(nbytes, intact, tmp_path):
    original, _ = load_quietly(intact)
    damaged_path = tmp_path / "garbled.h5"
    shutil.copyfile(intact, damaged_path)
    rng = random.Random(nbytes)  # fixed seed: the same damage every run
    with open(damaged_path, "r+b") as fh:
        fh.seek(-nbytes, 2)
        fh.write(bytes(rng.randrange(256) for _ in range(nbytes)))
    try:
        damaged, notes = load_quietly(damaged_path)
    except mdgas.errors.RunFileError as exc:
        # Acceptable only as one clear message naming the file.
        assert str(damaged_path) in str(exc)
        return
    assert_prefix_of(damaged, original)
    complete = (len(damaged.times) == len(original.times)
                and damaged.final_state.keys() == original.final_state.keys()
                and damaged.histograms.keys() == original.histograms.keys())
    assert complete or notes, "data went missing without a word"


def test_a_damaged_chunk_in_the_middle_keeps_everything_before_it(intact, tmp_path):
    import h5py
    original, _ = load_quietly(intact)
    damaged_path = tmp_path / "chunk.h5"
    shutil.copyfile(intact, damaged_path)
    with h5py.File(damaged_path, "r") as f:
        ds = f["observables/temperature/value"]
        info = ds.id.get_chunk_info(0)  # the first chunk of the temperature series
        start = ds.chunks[0]
        second = ds.id.get_chunk_info(1) if ds.id.get_num_chunks() > 1 else None
    assert second is not None, "the test run needs at least two chunks of samples"
    with open(damaged_path, "r+b") as fh:
        fh.seek(second.byte_offset + 8)
        fh.write(b"\xff" * 16)
    damaged, notes = load_quietly(damaged_path)
    assert info.size > 0
    assert len(damaged.times) == start  # the first chunk's samples, exactly
    assert_prefix_of(damaged, original)
    assert any("observables/temperature: damaged from row" in n for n in notes)


def test_summary_of_a_cut_file_works_and_warns_on_one_line(intact, tmp_path, capsys):
    damaged_path = tmp_path / "cut.h5"
    data = intact.read_bytes()
    damaged_path.write_bytes(data[:int(0.9 * len(data))])
    rc = cli.main(["summary", str(damaged_path)])
    out, err = capsys.readouterr()
    assert "Traceback" not in err
    assert rc == 0, err
    assert "mdgas: warning:" in err and "truncated" in err
    assert "Z " in out


def test_a_damaged_checkpoint_slot_is_skipped_for_the_other(intact, tmp_path):
    import h5py
    path = tmp_path / "slots.h5"
    shutil.copyfile(intact, path)
    ck = store.read_checkpoint(path)
    with h5py.File(path, "r+") as f:
        # Flip bytes of the newest slot's positions without touching its checksum.
        ds = f[f"{store.CHECKPOINT}/{ck['slot']}/state/positions"]
        data = ds[()]
        data[0, 0] += 1.0
        ds[...] = data
    other = store.read_checkpoint(path)
    assert other is not None and other["slot"] != ck["slot"]
    assert other["seq"] < ck["seq"]
