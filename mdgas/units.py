"""Reduced units <-> SI, and quantities with units in config files.

The engine works in reduced units: σ (length), ε (energy), m (particle mass), T as kT/ε,
τ = σ·sqrt(m/ε), pressure ε/σ³, number density Nσ³/V. A :class:`UnitSystem` gives σ, ε
and m in SI, from a preset species (:mod:`mdgas.species`) or the user's own
``gas.sigma``, ``gas.epsilon``, ``gas.mass``. Unit strings ("300 K", "50 bar",
"0.4 mol/L") are parsed by pint; the constants k, N_A are scipy.constants' CODATA values
(exact in the 2019 SI).

:func:`resolve_quantities` is the one place where a config's unit strings become
reduced numbers; :mod:`mdgas.config` calls it before validating anything.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Any, Mapping

from scipy import constants as _C

from .errors import ConfigError

K_B: float = _C.k        # J/K, exact
N_A: float = _C.N_A      # 1/mol, exact

#: What each config key measures. Bare numbers in these keys are reduced; strings are
#: quantities with units and need a unit system (gas.species, or gas.sigma/epsilon/mass).
DIMENSIONAL: dict[str, str] = {
    "gas.temperature": "temperature",
    "gas.density": "density",
    "gas.pressure": "pressure",
    "container.wall_temperature": "temperature",
    "container.wall_epsilon": "energy",
    "container.wall_sigma": "length",
    "container.wall_cutoff": "length",
    "container.pore_width": "length",
    "potential.cutoff": "length",
    "potential.skin": "length",
    "schedule.equilibrate": "time",
    "schedule.produce": "time",
    "schedule.timestep": "time",
    "schedule.thermostat_time": "time",
    "schedule.max_produce": "time",
    "output.sample_every": "time",
    "output.frame_every": "time",
}

_EXAMPLES = {"temperature": "'300 K'", "density": "'12 kg/m^3', '0.4 mol/L' or '2 nm^-3'",
             "pressure": "'50 bar' or '2.5 MPa'", "energy": "'119.8 K' (as ε/k), "
             "'0.996 kJ/mol' or '1.65e-21 J'", "length": "'5 nm' or '3.4 angstrom'",
             "time": "'10 ps'", "mass": "'39.948 g/mol' or '39.948 u'"}

#: SI base unit of each reduced quantity kind, and the unit shown to people beside it.
SI_UNITS: dict[str, str] = {
    "length": "m", "energy": "J", "temperature": "K", "time": "s", "pressure": "Pa",
    "mass": "kg", "velocity": "m/s", "force": "N", "volume": "m^3",
    "number_density": "1/m^3", "mass_density": "kg/m^3", "molar_density": "mol/m^3",
    "molar_volume": "m^3/mol", "molar_energy": "J/mol",
}


@lru_cache(maxsize=1)
def registry():
    """The one pint registry (built on first use: importing pint costs ~0.3 s)."""
    import pint
    return pint.UnitRegistry()


@dataclass(frozen=True)
class UnitSystem:
    """σ (m), ε (J) and the particle mass m (kg): everything else follows."""

    sigma: float
    epsilon: float
    mass: float
    species: str = ""
    source: str = ""

    @property
    def time(self) -> float:
        """τ = σ sqrt(m/ε) in s."""
        return self.sigma * math.sqrt(self.mass / self.epsilon)

    def factor(self, kind: str) -> float:
        """SI value (in :data:`SI_UNITS`) of one reduced unit of ``kind``."""
        s3 = self.sigma ** 3
        table = {
            "length": self.sigma, "energy": self.epsilon, "temperature": self.epsilon / K_B,
            "time": self.time, "pressure": self.epsilon / s3, "mass": self.mass,
            "velocity": self.sigma / self.time, "force": self.epsilon / self.sigma,
            "volume": s3, "number_density": 1.0 / s3, "mass_density": self.mass / s3,
            "molar_density": 1.0 / (N_A * s3), "molar_volume": N_A * s3,
            "molar_energy": N_A * self.epsilon,
        }
        try:
            return table[kind]
        except KeyError:
            raise ValueError(f"unknown quantity kind {kind!r}; kinds: {', '.join(table)}") \
                from None

    def attrs(self) -> dict[str, Any]:
        """The unit system as flat attributes (for the run file's parameters/units)."""
        return {"system": "SI", "species": self.species, "source": self.source,
                "sigma_m": self.sigma, "epsilon_J": self.epsilon, "mass_kg": self.mass,
                "epsilon_over_k_K": self.epsilon / K_B, "molar_mass_kg_mol": self.mass * N_A,
                "time_s": self.time, "pressure_Pa": self.factor("pressure"),
                "k_B_J_K": K_B, "N_A_mol": N_A,
                "constants": "scipy.constants (CODATA); k and N_A exact in the 2019 SI"}


# -- parsing ---------------------------------------------------------------------------

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def parse(text: str, source: str = "<value>", key: str = ""):
    """A pint Quantity from ``"300 K"``; offset units such as ``"25 degC"`` work too."""
    ureg = registry()
    import pint
    m = _NUMBER.match(text)
    try:
        if m and m.group(2):
            q = ureg.Quantity(float(m.group(1)), m.group(2))
        else:
            q = ureg.Quantity(text)
    except pint.UndefinedUnitError as exc:
        raise ConfigError(source, key, f"{text!r}: unknown unit {exc.unit_names!s}",
                          "use SI or common units such as K, bar, Pa, nm, kg/m^3, mol/L") \
            from None
    except Exception as exc:  # pint's parser of free text also fails by assert, IndexError...
        raise ConfigError(source, key, f"{text!r} is not a quantity ({exc.__class__.__name__})",
                          "write a number and a unit, e.g. '300 K'") from None
    if q.dimensionless:
        raise ConfigError(source, key, f"{text!r} has no units",
                          "write bare numbers without quotes (reduced units) "
                          "or add a unit, e.g. '300 K'")
    if not math.isfinite(float(q.magnitude)):
        raise ConfigError(source, key, f"{text!r} is not finite", "give a finite value")
    return q


def _dims(q) -> dict[str, float]:
    return dict(q.dimensionality)


_DIM_TEMPERATURE = {"[temperature]": 1}
_DIM_LENGTH = {"[length]": 1}
_DIM_TIME = {"[time]": 1}
_DIM_MASS = {"[mass]": 1}
_DIM_ENERGY = {"[mass]": 1, "[length]": 2, "[time]": -2}
_DIM_PRESSURE = {"[mass]": 1, "[length]": -1, "[time]": -2}


def _per_mole(d: dict) -> dict:
    return {**d, "[substance]": -1}


def _si(q, unit: str) -> float:
    return float(q.to(unit).magnitude)


def quantity_to_si(q, kind: str, mass: float | None = None, source: str = "<value>",
                   key: str = "") -> float:
    """A pint quantity as the SI value of ``kind`` (:data:`SI_UNITS`).

    ``energy`` also takes a temperature (read as ε/k) or a molar energy; ``mass`` also
    takes a molar mass; ``density`` (a number density, 1/m³) also takes a mass density
    (needs the particle ``mass``) or a molar concentration.
    """
    d = _dims(q)
    if kind == "temperature" and d == _DIM_TEMPERATURE:
        return _si(q, "K")
    if kind == "length" and d == _DIM_LENGTH:
        return _si(q, "m")
    if kind == "time" and d == _DIM_TIME:
        return _si(q, "s")
    if kind == "pressure" and d == _DIM_PRESSURE:
        return _si(q, "Pa")
    if kind == "energy":
        if d == _DIM_ENERGY:
            return _si(q, "J")
        if d == _DIM_TEMPERATURE:
            return _si(q, "K") * K_B
        if d == _per_mole(_DIM_ENERGY):
            return _si(q, "J/mol") / N_A
    if kind == "mass":
        if d == _DIM_MASS:
            return _si(q, "kg")
        if d == _per_mole(_DIM_MASS):
            return _si(q, "kg/mol") / N_A
    if kind == "density":
        if d == {"[length]": -3}:
            return _si(q, "1/m^3")
        if d == {"[substance]": 1, "[length]": -3}:
            return _si(q, "mol/m^3") * N_A
        if d == {"[mass]": 1, "[length]": -3}:
            if mass is None:
                raise ConfigError(source, key, "a mass density needs the particle mass",
                                  "set gas.species or gas.mass")
            return _si(q, "kg/m^3") / mass
    raise ConfigError(source, key, f"'{q:~}' is not a {kind}",
                      f"{key or 'this key'} takes a {kind}, e.g. {_EXAMPLES.get(kind, '')}")


def from_si(units: UnitSystem, kind: str, value: float, unit: str | None = None) -> float:
    """Reduced value of an SI ``value`` in ``unit`` (default the SI base unit of ``kind``)."""
    if unit is not None and unit != SI_UNITS[kind]:
        value = float(registry().Quantity(value, unit).to(SI_UNITS[kind]).magnitude)
    return value / units.factor(kind)


def reduce_string(text: str, kind: str, units: "UnitSystem | None", source: str = "<value>",
                  key: str = "") -> float:
    """The reduced number for a config string such as ``"300 K"`` at key ``key``."""
    q = parse(text, source, key)
    if units is None:
        raise ConfigError(source, key, f"{text!r} has units but the config has no unit system",
                          "set gas.species (e.g. \"argon\") or gas.sigma, gas.epsilon and "
                          "gas.mass; or give a bare number in reduced units")
    si = quantity_to_si(q, kind, units.mass, source, key)
    si_kind = "number_density" if kind == "density" else kind
    return si / units.factor(si_kind)


# -- the unit system of a config -------------------------------------------------------

def _gas_unit_system(gas: Mapping[str, Any], source: str) -> UnitSystem | None:
    """From gas.species and/or gas.sigma / epsilon / mass; None for a reduced config."""
    from . import species as _species
    name = gas.get("species", "") or ""
    given = {k: gas.get(k, "") or "" for k in ("sigma", "epsilon", "mass")}
    for k, v in given.items():
        if not isinstance(v, str):
            raise ConfigError(source, f"gas.{k}", f"{v!r} has no units",
                              f"give gas.{k} with units, e.g. {_EXAMPLES[_KIND[k]]}")
    if not name and not any(given.values()):
        return None
    si: dict[str, float] = {}
    label = ""
    if name:
        sp = _species.get(name, source)
        si = {"sigma": sp.sigma_angstrom * 1e-10, "epsilon": sp.epsilon_k * K_B,
              "mass": sp.molar_mass * 1e-3 / N_A}
        label = sp.name
    for k, v in given.items():
        if v:
            si[k] = quantity_to_si(parse(v, source, f"gas.{k}"), _KIND[k], None, source,
                                   f"gas.{k}")
            if si[k] <= 0:
                raise ConfigError(source, f"gas.{k}", f"{v!r} must be positive",
                                  f"e.g. {_EXAMPLES[_KIND[k]]}")
    if "epsilon" not in si and gas.get("model", "ideal") in ("ideal", "hard-sphere"):
        # Without a force field the energy scale is free: tie it to the stated
        # temperature so that kT/ε = 1 (recorded in gas.epsilon, see resolve_quantities).
        t = gas.get("temperature")
        if isinstance(t, str):
            si["epsilon"] = quantity_to_si(parse(t, source, "gas.temperature"), "temperature",
                                           None, source, "gas.temperature") * K_B
    for k in ("sigma", "epsilon", "mass"):
        if k not in si:
            need = {"epsilon": " (the Lennard-Jones well depth, or give the temperature "
                               "with units for ideal and hard-sphere gases)"}.get(k, "")
            raise ConfigError(source, f"gas.{k}", "missing: a unit system needs σ, ε and m"
                              + need, f"set gas.species or gas.{k}, e.g. {_EXAMPLES[_KIND[k]]}")
    return UnitSystem(si["sigma"], si["epsilon"], si["mass"], species=label,
                      source=_species.get(name).source if name else "user-given")


_KIND = {"sigma": "length", "epsilon": "energy", "mass": "mass"}


def resolve_quantities(raw: Mapping[str, Any], source: str = "<dict>",
                       derive: bool = True) -> Mapping[str, Any]:
    """Turn every unit string of a raw config into a reduced number; return a new dict.

    Bare numbers are left as they are (they are reduced already). A ``gas.pressure``
    sets ``gas.density`` from the equation of state (:mod:`mdgas.statepoint`); a
    density given as well must be that same result (resolved settings carry both),
    except with ``derive`` False (re-reading a run file: the stored density is kept). ``container.pore_width`` makes the container a
    slit (walls "z", 9-3 walls for Lennard-Jones particles) unless those keys are
    given. Raises ConfigError for unknown or mismatched units.
    """
    if not isinstance(raw, Mapping):
        return raw
    out: dict[str, Any] = {k: (dict(v) if isinstance(v, Mapping) else v) for k, v in raw.items()}
    gas = out.get("gas") if isinstance(out.get("gas"), dict) else {}
    units = _gas_unit_system(gas, source)
    if units is not None and gas and not gas.get("epsilon") and not gas.get("species"):
        gas["epsilon"] = f"{units.epsilon / K_B!r} K"  # recorded: see _gas_unit_system
    for dotted, kind in DIMENSIONAL.items():
        name, key = dotted.split(".")
        section = out.get(name)
        if isinstance(section, dict) and isinstance(section.get(key), str):
            section[key] = reduce_string(section[key], kind, units, source, dotted)
    _slit_defaults(out, source)
    _pressure_to_density(out, source, derive)
    return out


def _slit_defaults(out: dict, source: str) -> None:
    cont = out.get("container")
    if not isinstance(cont, dict) or cont.get("pore_width") is None:
        return
    walls = cont.setdefault("walls", "z")
    if walls != "z":
        raise ConfigError(source, "container.walls", f"{walls!r} with a pore_width",
                          'a slit pore has walls = "z" (its width is the box edge along z); '
                          "remove one of the two keys")
    gas = out.get("gas") if isinstance(out.get("gas"), dict) else {}
    if gas.get("model") == "lennard-jones":
        cont.setdefault("wall", "lj93")


def _pressure_to_density(out: dict, source: str, derive: bool = True) -> None:
    from . import config, statepoint
    gas = out.get("gas")
    if not isinstance(gas, dict) or gas.get("pressure") is None:
        return
    p = gas["pressure"]
    if isinstance(p, bool) or not isinstance(p, (int, float)) or not math.isfinite(p) or p <= 0:
        raise ConfigError(source, "gas.pressure", f"{p!r} is not a positive pressure",
                          "e.g. '50 bar' (with gas.species) or a reduced number")
    given = gas.get("density")
    if given is not None and not derive:
        return  # reading a run file: keep the density the run used
    model = gas.get("model", config.Gas.model)
    temp = gas.get("temperature", config.Gas.temperature)
    pot = out.get("potential") if isinstance(out.get("potential"), dict) else {}
    if model not in config.MODELS or isinstance(temp, bool) \
            or not isinstance(temp, (int, float)) or temp <= 0:
        return  # from_dict reports the bad model or temperature itself
    state = statepoint.density_for_pressure(
        model, float(temp), float(p), tail=pot.get("tail", config.Potential.tail),
        cutoff=float(pot.get("cutoff", config.Potential.cutoff)), source=source)
    if given is not None:
        # Resolved settings (a resumed run, a sweep point's TOML) carry both: accept the
        # pair when it is the mapping's own result, refuse a density that contradicts it.
        ok = isinstance(given, (int, float)) and not isinstance(given, bool) \
            and abs(given - state.density) <= 1e-9 * state.density
        if not ok:
            raise ConfigError(source, "gas.density",
                              f"{given!r} contradicts gas.pressure, which gives "
                              f"{state.density:.6g} ({state.eos.name})",
                              "give one of the two: with a pressure the density is derived "
                              "from the equation of state")
        return
    gas["density"] = state.density


def forget_derived(raw: dict[str, Any], overrides: Mapping[str, Any]) -> None:
    """Before re-validating resolved settings with ``overrides``: drop what was derived.

    A density derived from gas.pressure is re-derived unless the overrides set the
    density itself, which then replaces the pressure.
    """
    gas = raw.get("gas")
    if not isinstance(gas, dict):
        return
    if "gas.density" in overrides:
        gas["pressure"] = None
    elif gas.get("pressure") is not None or overrides.get("gas.pressure") is not None:
        gas.pop("density", None)


# -- SI output ------------------------------------------------------------------------

#: parameters/units of a run in reduced units (no species, no gas.sigma).
REDUCED_ATTRS = {"system": "reduced",
                 "note": "lengths σ, energies ε, mass m, T as kT/ε, time σ sqrt(m/ε), "
                         "pressure ε/σ³, density Nσ³/V; no SI scale was given"}


def unit_attrs(settings) -> dict[str, Any]:
    """What the run file stores under parameters/units for these settings."""
    us = system_of(settings)
    return dict(REDUCED_ATTRS) if us is None else us.attrs()


def system_of(settings) -> UnitSystem | None:
    """The unit system of validated settings, or None when the run is in reduced units."""
    g = settings.gas
    raw = {"species": getattr(g, "species", ""), "sigma": getattr(g, "sigma", ""),
           "epsilon": getattr(g, "epsilon", ""), "mass": getattr(g, "mass", ""),
           "model": g.model}
    return _gas_unit_system(raw, settings.source)


def to_si(settings_or_units, kind: str, value: float, unit: str | None = None
          ) -> tuple[float, str]:
    """(SI value, unit) of a reduced ``value`` of ``kind``; ``unit`` picks e.g. "bar".

    Kinds are the keys of :data:`SI_UNITS`; a reduced number density converts to
    ``number_density``, ``mass_density`` or ``molar_density`` alike. Raises ValueError
    when the settings have no unit system.
    """
    units = settings_or_units if isinstance(settings_or_units, UnitSystem) \
        else system_of(settings_or_units)
    if units is None:
        raise ValueError("these settings are in reduced units (no gas.species or gas.sigma)")
    si = value * units.factor(kind)
    base = SI_UNITS[kind]
    if unit is None or unit == base:
        return si, base
    return float(registry().Quantity(si, base).to(unit).magnitude), unit


#: How people want to read each kind: one or two units, first the main one.
DISPLAY: dict[str, tuple[str, ...]] = {
    "pressure": ("bar", "Pa"), "temperature": ("K",), "length": ("nm",),
    "time": ("ps",), "energy": ("zJ",), "mass_density": ("kg/m^3",),
    "molar_density": ("mol/L",), "molar_volume": ("L/mol",), "number_density": ("1/nm^3",),
}


def describe(units: UnitSystem, kind: str, value: float, stderr: float | None = None,
             digits: int = 4) -> str:
    """'100.2 ± 0.3 bar (1.002e+07 Pa)' for a reduced value (and its standard error)."""
    parts = []
    for i, unit in enumerate(DISPLAY.get(kind, (SI_UNITS[kind],))):
        v, _ = to_si(units, kind, value, unit)
        text = f"{v:.{digits}g}"
        if stderr is not None and i == 0:
            e, _ = to_si(units, kind, stderr, unit)  # every DISPLAY unit is linear
            text += f" ± {abs(e):.2g}"
        parts.append(f"{text} {_pretty(unit)}")
    return parts[0] + (f" ({', '.join(parts[1:])})" if len(parts) > 1 else "")


def _pretty(unit: str) -> str:
    return unit.replace("^3", "³").replace("1/nm³", "nm⁻³")
