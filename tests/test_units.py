"""Units in configs: parsing, reduced <-> SI round trips, the unit system, errors."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings as hsettings
from hypothesis import strategies as st

from mdgas import config, units
from mdgas.errors import ConfigError

# Argon preset (species.py): σ = 3.405 Å, ε/k = 119.8 K, M = 39.948 g/mol.
ARGON = units.UnitSystem(3.405e-10, 119.8 * units.K_B, 39.948e-3 / units.N_A, "argon")


def _settings(gas: dict, **sections) -> config.Settings:
    raw = {"gas": {"species": "argon", **gas}, **sections}
    return config.from_dict(raw, check_model=False)


# -- round trips ------------------------------------------------------------------------

KINDS_AND_UNITS = [
    ("length", None), ("length", "nm"), ("energy", None), ("energy", "zJ"),
    ("temperature", None), ("time", None), ("time", "ps"), ("pressure", None),
    ("pressure", "bar"), ("pressure", "MPa"), ("mass", None), ("velocity", None),
    ("number_density", None), ("number_density", "1/nm^3"), ("mass_density", None),
    ("molar_density", None), ("molar_density", "mol/L"), ("molar_volume", None),
    ("molar_volume", "L/mol"), ("molar_energy", "kJ/mol"),
]


@hsettings(max_examples=60, deadline=None)
@given(value=st.floats(min_value=1e-6, max_value=1e6, allow_nan=False),
       which=st.sampled_from(KINDS_AND_UNITS))
def test_reduced_si_reduced_round_trip_is_exact(value, which):
    kind, unit = which
    si, shown = units.to_si(ARGON, kind, value, unit)
    back = units.from_si(ARGON, kind, si, shown)
    assert back == pytest.approx(value, rel=1e-12, abs=0)


@pytest.mark.parametrize("text,kind", [
    ("300 K", "temperature"), ("50 bar", "pressure"), ("2.5 MPa", "pressure"),
    ("5 nm", "length"), ("12 kg/m^3", "density"), ("0.4 mol/L", "density"), ("10 ps", "time"),
])
def test_si_reduced_si_round_trip_is_exact(text, kind):
    reduced = units.reduce_string(text, kind, ARGON)
    q = units.parse(text)
    target = kind
    if kind == "density":
        target = "mass_density" if "[mass]" in dict(q.dimensionality) else "molar_density"
    back, _ = units.to_si(ARGON, target, reduced, str(q.units))
    assert back == pytest.approx(float(q.magnitude), rel=1e-12, abs=0)


# -- published and defined values ---------------------------------------------------------

def test_ideal_gas_molar_volume_at_stp():
    # V_m = RT/p at 273.15 K and 101.325 kPa: 22.413969... L/mol, quoted as 22.414 L/mol
    # (common practice; CODATA 2018 "molar volume of ideal gas (273.15 K, 101.325 kPa)").
    s = _settings({"model": "ideal", "temperature": "273.15 K", "pressure": "1 atm"})
    vm, unit = units.to_si(s, "molar_volume", 1.0 / s.gas.density, "L/mol")
    assert unit == "L/mol"
    assert vm == pytest.approx(22.414, abs=5e-4)
    assert vm == pytest.approx(units.N_A * units.K_B * 273.15 / 101325.0 * 1e3, rel=1e-12)


def test_argon_time_unit():
    # τ = σ sqrt(m/ε) = 2.156 ps for these parameters (common practice: ~2.16 ps for argon).
    assert ARGON.time == pytest.approx(2.1563e-12, rel=1e-4)


# -- config integration -------------------------------------------------------------------

def test_quantities_become_reduced_numbers():
    s = _settings({"temperature": "300 K", "density": "12 kg/m^3"},
                  schedule={"produce": "1 ns", "timestep": "10 fs", "equilibrate": "20 ps"},
                  potential={"cutoff": "1.0 nm"}, output={"sample_every": "2 ps"})
    assert s.gas.temperature == pytest.approx(300.0 / 119.8, rel=1e-12)
    assert s.gas.density == pytest.approx(12.0 / ARGON.mass * ARGON.sigma ** 3, rel=1e-12)
    assert s.schedule.produce == pytest.approx(1e-9 / ARGON.time, rel=1e-12)
    assert s.schedule.timestep == pytest.approx(1e-14 / ARGON.time, rel=1e-12)
    assert s.potential.cutoff == pytest.approx(1e-9 / ARGON.sigma, rel=1e-12)
    assert s.output.sample_every == pytest.approx(2e-12 / ARGON.time, rel=1e-12)


def test_wall_keys_take_units():
    s = _settings({"temperature": "300 K"},
                  container={"wall_epsilon": "119.8 K", "wall_sigma": "0.3405 nm",
                             "wall_cutoff": "1 nm", "wall": "thermal",
                             "wall_temperature": "350 K"})
    c = s.container
    assert c.wall_epsilon == pytest.approx(1.0, rel=1e-12)
    assert c.wall_sigma == pytest.approx(1.0, rel=1e-12)
    assert c.wall_cutoff == pytest.approx(1e-9 / ARGON.sigma, rel=1e-12)
    assert c.wall_temperature == pytest.approx(350.0 / 119.8, rel=1e-12)


def test_molar_concentration_and_celsius_and_molar_energy():
    s = _settings({"temperature": "26.85 degC", "density": "0.4 mol/L", "epsilon": "1 kJ/mol"})
    eps = 1e3 / units.N_A
    assert s.gas.temperature == pytest.approx(300.0 * units.K_B / eps, rel=1e-12)
    assert s.gas.density == pytest.approx(400.0 * units.N_A * ARGON.sigma ** 3, rel=1e-12)


def test_bare_numbers_stay_reduced():
    raw = {"gas": {"temperature": 1.5, "density": 0.05}, "schedule": {"produce": 20.0}}
    assert units.resolve_quantities(raw, "x") == raw
    s = config.from_dict({"gas": {"species": "argon", "temperature": 1.5}}, check_model=False)
    assert s.gas.temperature == 1.5


def test_user_parameters_without_species():
    s = config.from_dict({"gas": {"model": "lennard-jones", "sigma": "0.38 nm",
                                  "epsilon": "150 K", "mass": "16 g/mol",
                                  "temperature": "300 K"}}, check_model=False)
    us = units.system_of(s)
    assert us.sigma == pytest.approx(3.8e-10, rel=1e-12)
    assert us.epsilon == pytest.approx(150 * units.K_B, rel=1e-12)
    assert s.gas.temperature == pytest.approx(2.0, rel=1e-12)


def test_hard_spheres_take_a_diameter_and_the_temperature_as_energy_scale():
    s = config.from_dict({"gas": {"model": "hard-sphere", "sigma": "0.3 nm", "mass": "4 g/mol",
                                  "temperature": "300 K", "density": "100 kg/m^3"}},
                         check_model=False)
    assert s.gas.temperature == pytest.approx(1.0, rel=1e-12)
    assert s.gas.epsilon == "300.0 K"  # recorded, so the run file can rebuild the units
    assert s.gas.density == pytest.approx(100.0 / (4e-3 / units.N_A) * (3e-10) ** 3, rel=1e-12)


def test_species_overridden_by_user_sigma():
    s = _settings({"sigma": "0.34 nm"})
    assert units.system_of(s).sigma == pytest.approx(3.4e-10, rel=1e-12)


def test_pressure_sets_density_and_replace_rederives():
    s = _settings({"model": "ideal", "temperature": "300 K", "pressure": "10 bar"})
    assert s.gas.density == pytest.approx(s.gas.pressure / s.gas.temperature, rel=1e-12)
    s2 = s.replace(**{"gas.pressure": "20 bar"})
    assert s2.gas.density == pytest.approx(2.0 * s.gas.density, rel=1e-12)
    s3 = s.replace(**{"gas.density": "1 mol/L"})
    assert s3.gas.pressure is None
    assert s3.gas.density == pytest.approx(1e3 * units.N_A * ARGON.sigma ** 3, rel=1e-12)


def test_pore_width_in_nm_makes_a_slit():
    s = _settings({"density": 0.02, "particles": 1000}, container={"pore_width": "5 nm"})
    assert s.container.walls == "z"
    assert s.box[2] == pytest.approx(5e-9 / ARGON.sigma, rel=1e-12)
    assert s.box[0] == pytest.approx(s.box[1], rel=1e-12)
    assert math.prod(s.box) == pytest.approx(s.volume, rel=1e-12)


# -- errors ------------------------------------------------------------------------------

@pytest.mark.parametrize("gas,key,words", [
    ({"temperature": "300 kelvinz"}, "gas.temperature", "unknown unit"),
    ({"temperature": "50 bar"}, "gas.temperature", "is not a temperature"),
    ({"pressure": "300 K"}, "gas.pressure", "is not a pressure"),
    ({"density": "5 nm"}, "gas.density", "is not a density"),
    ({"temperature": "300"}, "gas.temperature", "has no units"),
    ({"sigma": 0.34}, "gas.sigma", "has no units"),
    ({"species": "argonne"}, "gas.species", "did you mean 'argon'"),
])
def test_bad_units_name_the_key(gas, key, words):
    with pytest.raises(ConfigError) as err:
        _settings(gas)
    assert err.value.key == key
    assert words in str(err.value)


def test_units_without_a_unit_system_are_an_error():
    with pytest.raises(ConfigError) as err:
        config.from_dict({"gas": {"temperature": "300 K"}}, check_model=False)
    assert err.value.key == "gas.temperature"
    assert "gas.species" in err.value.fix


def test_lennard_jones_needs_an_epsilon():
    with pytest.raises(ConfigError) as err:
        config.from_dict({"gas": {"model": "lennard-jones", "sigma": "0.34 nm",
                                  "mass": "40 g/mol", "temperature": "300 K"}},
                         check_model=False)
    assert err.value.key == "gas.epsilon"


def test_units_on_a_key_without_dimension_are_refused():
    with pytest.raises(ConfigError) as err:
        _settings({"particles": "500 K"})
    assert err.value.key == "gas.particles"


def test_a_density_contradicting_the_pressure_is_refused():
    raw = {"gas": {"species": "argon", "density": 0.01, "pressure": "10 bar",
                   "temperature": "300 K"}}
    with pytest.raises(ConfigError) as err:
        config.from_dict(raw)
    assert err.value.key == "gas.density" and "contradicts" in str(err.value)
    # A run file stores both (the density the run used): re-reading keeps that density.
    assert config.from_dict(raw, check_model=False).gas.density == 0.01


def test_resolved_settings_reload_from_their_own_dict():
    # What resume and sweep points do: both keys present, the pair consistent.
    s = _settings({"model": "ideal", "temperature": "300 K", "pressure": "10 bar"})
    again = config.from_dict(s.as_dict())
    assert again.gas.density == s.gas.density and again.gas.pressure == s.gas.pressure


def test_pore_width_with_other_walls_is_refused():
    with pytest.raises(ConfigError) as err:
        _settings({}, container={"pore_width": "5 nm", "walls": "xyz"})
    assert err.value.key == "container.walls"


def test_to_si_needs_a_unit_system():
    s = config.from_dict({"gas": {"temperature": 1.0}}, check_model=False)
    assert units.system_of(s) is None
    with pytest.raises(ValueError):
        units.to_si(s, "pressure", 1.0)


def test_describe_shows_bar_and_pascal():
    p = units.from_si(ARGON, "pressure", 100.0, "bar")
    text = units.describe(ARGON, "pressure", p, stderr=p * 0.01)
    assert text.startswith("100 ± 1 bar (1e+07 Pa)")
