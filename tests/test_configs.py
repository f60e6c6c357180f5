"""Every shipped example config validates, and each runs (shortened) to a sane answer."""

from __future__ import annotations

from pathlib import Path

import pytest

from mdgas import config
from mdgas.engines import available

CONFIGS = sorted((Path(__file__).resolve().parents[1] / "configs").glob("*.toml"))


def _is_run_config(path: Path) -> bool:
    return "gas" in config.parse_text(path.read_text(), str(path))


@pytest.mark.parametrize("path", [p for p in CONFIGS if _is_run_config(p)], ids=lambda p: p.name)
def test_example_config_validates_and_documents_itself(path):
    text = path.read_text()
    assert text.lstrip().startswith("#"), "each example opens with a comment saying what it is"
    s = config.load(path)
    assert s.gas.model in available() or pytest.skip(f"engine {s.gas.model} not available")


@pytest.mark.parametrize("name", ["closed-box.toml", "slit-thermal.toml", "tall-column.toml"])
def test_ideal_examples_run_and_agree_with_the_ideal_gas_law(run_in, name):
    s = config.load(CONFIGS[0].parent / name).replace(**{"schedule.produce": 100.0})
    run = run_in(s)
    z = run.summary()["Z"]
    assert abs(z["mean"] - 1.0) < 4 * z["stderr"] + 1e-9
