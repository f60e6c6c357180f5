"""The bad-input corpus: every user error ends with exit status 2 and one message that
names the problem and the fix, never a traceback.

Cases live in tests/bad_inputs/: each ``*.toml`` file is a bad config (or sweep file)
whose first lines say what its message must contain::

    # expect: gas.density: -0.5 must be greater than zero   (one line per fragment)
    # command: check                                        (default check)
    # args: --set gas.nosuch=1                              (optional)
    # needs: lennard-jones                                  (skipped without that engine)

``_files.toml`` lists the inputs that are not config files (missing paths, damaged
and foreign run files); the test makes each one with the ``make`` recipe named there.
"""

from __future__ import annotations

import shlex
import subprocess
import sys
import tomllib
from pathlib import Path

import h5py
import numpy as np
import pytest

from mdgas import cli, driver, engines, store

CORPUS = Path(__file__).resolve().parent / "bad_inputs"


def header(path: Path) -> dict:
    out = {"expect": [], "command": "check", "args": "", "needs": ""}
    for line in path.read_text().splitlines():
        if not line.startswith("# "):
            break
        key, _, value = line[2:].partition(": ")
        if key == "expect":
            out["expect"].append(value)
        elif key in out:
            out[key] = value
    return out


CONFIG_CASES = sorted(p for p in CORPUS.glob("*.toml") if not p.name.startswith("_"))
FILE_CASES = tomllib.loads((CORPUS / "_files.toml").read_text())["case"]


def test_the_corpus_is_large_enough_and_every_case_says_what_to_expect():
    assert len(CONFIG_CASES) + len(FILE_CASES) >= 40
    for p in CONFIG_CASES:
        assert header(p)["expect"], f"{p.name} has no '# expect:' line"
    for case in FILE_CASES:
        assert case["expect"], case["name"]


def check_one_clean_error(rc: int, out: str, err: str, expect: list[str]) -> None:
    assert rc == 2, f"exit status {rc}\n{err}"
    assert "Traceback" not in err + out
    errors = [line for line in err.splitlines() if line.startswith("mdgas: error:")]
    assert len(errors) == 1, err
    # The message is the error line (a long one may carry on over following lines).
    message = err[err.index("mdgas: error:"):]
    for fragment in expect:
        assert fragment in message, f"{fragment!r} not in {message!r}"


@pytest.mark.parametrize("case", CONFIG_CASES, ids=lambda p: p.stem)
def test_bad_config(case: Path, tmp_path, capsys):
    h = header(case)
    if h["needs"] and h["needs"] not in engines.available():
        pytest.skip(f"the {h['needs']!r} engine is not in the registry yet")
    existing = tmp_path / "existing.h5"
    existing.write_bytes(b"not yours to overwrite")
    (tmp_path / "folder.h5").mkdir()
    args = shlex.split(h["args"].format(existing=existing, folder=tmp_path / "folder.h5",
                                        tmp=tmp_path))
    if h["command"] == "run" and "-o" not in args:
        args += ["-o", str(tmp_path / "out.h5")]
    rc = cli.main([h["command"], str(case), *args])
    out, err = capsys.readouterr()
    check_one_clean_error(rc, out, err, h["expect"])
    assert existing.read_bytes() == b"not yours to overwrite"


# Files that are not config files ----------------------------------------------------

SMALL_RUN = {"gas.particles": 200, "gas.density": 0.05, "schedule.equilibrate": 1.0,
             "schedule.produce": 10.0, "output.frame_every": 5.0}


def _complete_run(path: Path) -> Path:
    from mdgas import config
    s = config.default_settings().replace(**SMALL_RUN)
    driver.simulate(s, path, force=True, progress=False)
    return path


def make(recipe: str, tmp_path: Path) -> Path:
    p = tmp_path / "input.h5"
    if recipe == "missing":
        return tmp_path / "no-such-file.h5"
    if recipe == "folder":
        p.mkdir()
    elif recipe == "binary":
        p.write_bytes(bytes(range(128, 256)) * 4)
    elif recipe == "empty":
        p.write_bytes(b"")
    elif recipe == "text":
        p.write_text("time,pressure\n0.5,0.01\n")
    elif recipe == "config":
        p.write_text("[gas]\nparticles = 300\n")
    elif recipe == "foreign_hdf5":
        with h5py.File(p, "w") as f:
            f.create_dataset("data", data=np.arange(10.0))
    elif recipe == "truncated_header":
        _complete_run(p)
        data = p.read_bytes()
        p.write_bytes(data[:800])
    elif recipe == "zeroed_superblock":
        _complete_run(p)
        data = bytearray(p.read_bytes())
        data[:512] = bytes(512)
        p.write_bytes(bytes(data))
    elif recipe == "no_parameters":
        _complete_run(p)
        with h5py.File(p, "r+") as f:
            del f["parameters"]
    elif recipe == "complete_run":
        _complete_run(p)
    elif recipe == "failed_run":
        _complete_run(p)
        with h5py.File(p, "r+") as f:
            f["mdgas"].attrs["status"] = store.STATUS_FAILED
            f["mdgas"].attrs["message"] = "the run became unstable at t = 3 τ"
    elif recipe == "no_checkpoint":
        _complete_run(p)
        with h5py.File(p, "r+") as f:
            f["mdgas"].attrs["status"] = store.STATUS_INTERRUPTED
            del f[store.CHECKPOINT]
    else:
        raise AssertionError(f"unknown recipe {recipe!r}")
    return p


@pytest.mark.parametrize("case", FILE_CASES, ids=lambda c: c["name"])
def test_bad_file(case: dict, tmp_path, capsys):
    target = make(case["make"], tmp_path)
    before = target.read_bytes() if target.is_file() else None
    rc = cli.main([case["command"], str(target)])
    out, err = capsys.readouterr()
    check_one_clean_error(rc, out, err, case["expect"])
    if before is not None:
        assert target.read_bytes() == before  # a refused command leaves the file alone


def test_the_real_entry_point_also_gives_one_line_and_status_2(tmp_path):
    # A few cases through a fresh interpreter, as a user's shell would run them.
    for name in ("temperature_negative", "unknown_key", "toml_unclosed_header"):
        case = CORPUS / f"{name}.toml"
        r = subprocess.run([sys.executable, "-m", "mdgas.cli", "check", str(case)],
                           capture_output=True, text=True, timeout=120)
        check_one_clean_error(r.returncode, r.stdout, r.stderr, header(case)["expect"])


def test_an_internal_error_prints_a_short_message_and_where_the_traceback_is(
        tmp_path, capsys, monkeypatch):
    def broken(args):
        raise ZeroDivisionError("a bug")
    monkeypatch.setitem(cli.COMMANDS, "check", broken)
    rc = cli.main(["check", "whatever.toml"])
    err = capsys.readouterr().err
    assert rc == 1
    assert "internal error: ZeroDivisionError: a bug" in err
    assert "Traceback" not in err
    log = Path(err.split("written to ", 1)[1].split(";")[0])
    assert "ZeroDivisionError" in log.read_text() and "Traceback" in log.read_text()


def test_warnings_are_printed_once_on_stderr_by_check_and_run(tmp_path, capsys):
    cfg = tmp_path / "tiny.toml"
    cfg.write_text("[gas]\nparticles = 40\n[schedule]\nequilibrate = 1.0\nproduce = 10.0\n")
    assert cli.main(["check", str(cfg)]) == 0
    err = capsys.readouterr().err
    assert err.count("only 40 particles") == 1
    assert cli.main(["run", str(cfg), "-o", str(tmp_path / "tiny.h5"), "-q"]) == 0
    err = capsys.readouterr().err
    assert err.count("only 40 particles") == 1
    assert err.count("too short for the requested precision") == 1
