"""Run files: the documented HDF5 layout read with plain h5py, and the CLI around them."""

from __future__ import annotations

import json
import re
from pathlib import Path

import h5py
import numpy as np
import pytest

from mdgas import cli

README = Path(__file__).resolve().parents[1] / "README.md"

SMALL = {"gas.particles": 300, "gas.density": 0.05, "schedule.equilibrate": 2.0,
         "schedule.produce": 20.0, "output.sample_every": 0.5, "output.frame_every": 5.0}


def documented_paths() -> list[str]:
    """Paths in the README's run-file table (first column, in backticks)."""
    text = README.read_text()
    section = text.split("## Run files", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"^\| `([^`]+)` \|", section, flags=re.M)


def test_every_documented_path_exists_in_a_run_file(run_in):
    run = run_in(None, **SMALL)
    paths = documented_paths()
    assert len(paths) > 20
    with h5py.File(run.path, "r") as f:
        for p in paths:
            p = p.replace("<slot>", "slot0")
            if "<name>" in p:
                for name in ("pressure_wall", "temperature", "kinetic_energy"):
                    assert p.replace("<name>", name) in f, p
            elif p.startswith("@"):
                group, _, attr = p[1:].rpartition("/")
                assert attr in f[group or "/"].attrs, p
            else:
                assert p in f, p
        # H5MD essentials and the observable shapes
        assert list(f["h5md"].attrs["version"]) == [1, 1]
        n = f["observables/temperature/value"].shape[0]
        assert f["observables/pressure_wall/value"].shape == (n, 6)
        assert f["observables/temperature/time"].shape == (n,)
        assert f["particles/gas/position/value"].shape[1:] == (300, 3)
        assert f["mdgas"].attrs["status"] == "complete"
        assert f["parameters/gas"].attrs["particles"] == 300


def test_frames_are_stored_at_the_frame_interval(run_in):
    run = run_in(None, **SMALL)
    t, pos, vel = run.frames()
    assert np.allclose(t, [2.0, 7.0, 12.0, 17.0, 22.0])
    assert pos.shape == vel.shape == (5, 300, 3)
    assert (pos >= 0).all() and (pos <= run.settings.box).all()


def test_run_refuses_to_overwrite_and_summary_json_has_the_contract_keys(tmp_path, capsys):
    cfg = tmp_path / "box.toml"
    cfg.write_text("[gas]\nparticles = 300\ndensity = 0.05\n[schedule]\nequilibrate = 1.0\n"
                   "produce = 20.0\n")
    out = tmp_path / "box.h5"
    assert cli.main(["run", str(cfg), "-o", str(out), "-q"]) == 0
    assert cli.main(["run", str(cfg), "-o", str(out), "-q"]) == 2
    assert "--force" in capsys.readouterr().err
    assert cli.main(["run", str(cfg), "-o", str(out), "-q", "--force",
                     "--set", "gas.density=0.02"]) == 0
    capsys.readouterr()
    assert cli.main(["summary", str(out), "--json"]) == 0
    s = json.loads(capsys.readouterr().out)
    for key in ("model", "particles", "density", "temperature_set", "temperature",
                "pressure_wall", "pressure_walls", "Z", "wall_hits", "speed_distribution"):
        assert key in s, key
    assert s["density"] == 0.02
    assert set(s["pressure_walls"]) == {"x-", "x+", "y-", "y+", "z-", "z+"}
    for e in [s["temperature"], s["pressure_wall"], s["Z"], *s["pressure_walls"].values()]:
        assert set(e) == {"mean", "stderr"}
    assert set(s["speed_distribution"]) >= {"ks_statistic", "p_value"}


def test_summary_of_a_non_run_file_is_a_user_error(tmp_path, capsys):
    junk = tmp_path / "junk.h5"
    junk.write_bytes(b"not hdf5 at all")
    assert cli.main(["summary", str(junk)]) == 2
    assert "not an HDF5 file" in capsys.readouterr().err
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f["x"] = 1
    assert cli.main(["summary", str(other)]) == 2
    assert "not an mdgas run file" in capsys.readouterr().err


def test_python_api_round_trip(tmp_path):
    import mdgas
    run = mdgas.simulate(None, path=tmp_path / "a.h5", **SMALL)
    again = mdgas.load(tmp_path / "a.h5")
    assert again.settings == run.settings
    t, v = again.series("temperature")
    assert len(t) == len(v) == 40
    assert again.summary()["Z"]["mean"] == pytest.approx(run.summary()["Z"]["mean"])
