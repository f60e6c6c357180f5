"""Config files: validation messages, overrides, defaults, and the `check` command."""

from __future__ import annotations

import json

import pytest

from mdgas import cli, config
from mdgas.errors import ConfigError

GOOD = """
[gas]
model = "ideal"
particles = 500
temperature = 1.0
density = 0.01
[container]
walls = "xyz"
wall = "specular"
[schedule]
equilibrate = 1.0
produce = 20.0
"""

# (config text, message fragment) — each a different mistake a person makes by hand.
BAD = [
    ("[gas]\nmodel = 'idael'\n", "did you mean 'ideal'"),
    ("[gas]\nparticels = 100\n", "did you mean 'particles'"),
    ("[gsa]\nmodel = 'ideal'\n", "did you mean 'gas'"),
    ("[gas]\nparticles = -5\n", "must be greater than zero"),
    ("[gas]\nparticles = 0\n", "must be greater than zero"),
    ("[gas]\nparticles = 10.5\n", "is not a whole number"),
    ("[gas]\ntemperature = 0\n", "gas.temperature"),
    ("[gas]\ntemperature = -1.0\n", "must be greater than zero"),
    ("[gas]\ndensity = 'dense'\n", "unknown unit"),
    ("[gas]\ndensity = nan\n", "is not finite"),
    ("[gas]\ndensity = true\n", "is not a number"),
    ("[container]\nwalls = 'xq'\n", "is not a set of axes"),
    ("[container]\nwalls = 'xx'\n", "is not a set of axes"),
    ("[container]\nwall = 'thermal'\n", "thermal walls need a temperature"),
    ("[container]\nwall = 'sticky'\n", "allowed: one of"),
    ("[container]\naspect = [1, 2]\n", "not a list of three numbers"),
    ("[container]\naspect = [1, 0, 1]\n", "every entry must be a positive number"),
    ("[schedule]\nproduce = 0\n", "schedule.produce"),
    ("[schedule]\nequilibrate = -1\n", "below the minimum"),
    ("[schedule]\nproduce = 10\nmax_produce = 5\n", "shorter than schedule.produce"),
    ("[output]\nsample_every = 500\n", "longer than the production run"),
    ("gas = 3\n", "must be a table"),
    ("[gas\nmodel = 'ideal'\n", "not valid TOML"),
    ("[container]\nwall = 'lj93'\n", "need a force field"),
]


@pytest.mark.parametrize("text,fragment", BAD)
def test_bad_config_exits_2_with_a_specific_message(tmp_path, capsys, text, fragment):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    assert cli.main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert fragment in err
    assert str(path) in err           # names the file
    assert "Traceback" not in err
    assert err.count("\n") == 1       # one message


def test_error_names_file_key_problem_and_fix(tmp_path):
    path = tmp_path / "c.toml"
    path.write_text("[gas]\ndensity = -2\n")
    with pytest.raises(ConfigError) as info:
        config.load(path)
    e = info.value
    assert (e.source, e.key) == (str(path), "gas.density")
    assert e.problem and e.fix


def test_missing_file_is_a_user_error(capsys):
    assert cli.main(["check", "/nonexistent/x.toml"]) == 2
    assert "no such file" in capsys.readouterr().err


def test_defaults_fill_unset_keys_and_output_path_follows_file_name(tmp_path):
    path = tmp_path / "my-box.toml"
    path.write_text(GOOD)
    s = config.load(path)
    assert s.gas.particles == 500
    assert s.container.aspect == (1.0, 1.0, 1.0)
    assert s.output.path == "runs/my-box.h5"
    assert s.text == GOOD


def test_overrides_parse_as_toml_values(tmp_path):
    path = tmp_path / "c.toml"
    path.write_text(GOOD)
    ov = dict(config.parse_override(x) for x in
              ["gas.density=0.05", "container.wall=thermal", "container.wall_temperature=2",
               "container.aspect=[1, 1, 4]"])
    s = config.load(path, ov)
    assert s.gas.density == 0.05
    assert s.container.wall == "thermal" and s.container.wall_temperature == 2.0
    assert s.container.aspect == (1.0, 1.0, 4.0)
    with pytest.raises(ConfigError, match="did you mean 'density'"):
        config.load(path, {"gas.densty": 0.1})


def test_box_follows_density_and_aspect():
    s = config.default_settings().replace(**{"container.aspect": [1, 1, 4],
                                             "gas.density": 0.5, "gas.particles": 1000})
    assert abs(s.box.prod() - 2000.0) < 1e-9
    assert abs(s.box[2] / s.box[0] - 4.0) < 1e-12


def test_check_prints_derived_figures(tmp_path, capsys):
    path = tmp_path / "c.toml"
    path.write_text(GOOD)
    assert cli.main(["check", str(path), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    d = out["derived"]
    s = config.load(path)
    assert d["box_edges"] == pytest.approx(list(s.box))
    # Mean free path 1/(√2 π σ² n) and wall hits n<v>/4 · area (kinetic theory).
    assert d["mean_free_path"] == pytest.approx(1 / (2 ** 0.5 * 3.141592653589793 * 0.01))
    assert d["knudsen_number"] == pytest.approx(d["mean_free_path"] / min(s.box))
    area = 6 * s.box[0] ** 2
    assert d["wall_hits_per_time"] == pytest.approx(0.01 * (8 / 3.141592653589793) ** 0.5 / 4
                                                    * area)
    assert d["estimated_seconds"] > 0
    assert cli.main(["check", str(path)]) == 0
    assert "Knudsen number" in capsys.readouterr().out


def test_every_key_is_documented_in_the_readme():
    from pathlib import Path
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    missing = [key for key, _, _ in config.describe_keys() if f"`{key.split('.')[1]}`" not in readme]
    assert not missing, f"README lacks {missing}"
