"""Preset species: Lennard-Jones σ, ε/k and molar mass for gases treated as spheres.

Every row names its sources. The σ and ε/k values are the Lennard-Jones parameters
fitted to second virial coefficients B2(T) tabulated by Hirschfelder, Curtiss & Bird,
"Molecular Theory of Gases and Liquids" (Wiley 1954), Table I-A, the "from B2"
columns — quoted from memory (no copy of the book at hand). They were chosen over the
viscosity-fitted set of the same table (also in Bird, Stewart & Lightfoot, "Transport
Phenomena", Table B-1) because mdgas is about the pressure-volume-temperature relation,
which B2 governs at gas densities. As a consistency check on those recollections (not a
source), every row's B2 at 300 K computed from the preset was compared with the B2 of
the fluid's reference equation in CoolProp: within 1.5 cm³/mol for all rows
(tests/test_species.py repeats the check for the fluids where it is tight).

Molar masses are the values the CoolProp reference equations use, which are the IUPAC
standard atomic weights (CIAAW) summed over the formula.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

from .errors import ConfigError

_HCB = ("Hirschfelder, Curtiss & Bird, Molecular Theory of Gases and Liquids (1954), "
        "Table I-A, LJ parameters from second virial coefficients (from memory)")
_MASS = "IUPAC standard atomic weights, as used by CoolProp's reference equation"

#: The caution every spherical-molecule model carries.
_NONSPHERICAL = ("a single Lennard-Jones sphere ignores the molecule's shape and its "
                 "quadrupole; expect the largest errors at high density and near condensation")
_QUANTUM = ("quantum effects (de Boer parameter) are not small: the classical LJ model "
            "is poor below about 50 K and only fair at room temperature")


@dataclass(frozen=True)
class Species:
    """One preset. σ in ångström, ε/k in kelvin, molar mass in g/mol."""

    name: str
    formula: str
    sigma_angstrom: float
    epsilon_k: float
    molar_mass: float
    source: str
    mass_source: str = _MASS
    coolprop: str = ""        # CoolProp fluid name of the real fluid's reference equation
    limits: str = ""          # where this spherical LJ model is known to be poor
    aliases: tuple[str, ...] = ()


_ROWS = (
    Species("argon", "Ar", 3.405, 119.8, 39.948, _HCB, coolprop="Argon",
            limits="the LJ model is at its best for argon; three-body forces shift the "
                   "dense liquid by a few percent", aliases=("ar",)),
    Species("neon", "Ne", 2.749, 35.60, 20.179, _HCB, coolprop="Neon",
            limits="quantum corrections matter below about 100 K", aliases=("ne",)),
    Species("helium", "He", 2.556, 10.22, 4.002602, _HCB, coolprop="Helium",
            limits=_QUANTUM, aliases=("he", "helium-4")),
    Species("krypton", "Kr", 3.60, 171.0, 83.798, _HCB, coolprop="Krypton",
            aliases=("kr",)),
    Species("xenon", "Xe", 4.10, 221.0, 131.293, _HCB, coolprop="Xenon", aliases=("xe",)),
    Species("hydrogen", "H2", 2.928, 37.00, 2.01588, _HCB, coolprop="Hydrogen",
            limits=_QUANTUM, aliases=("h2",)),
    Species("nitrogen", "N2", 3.698, 95.05, 28.01348, _HCB, coolprop="Nitrogen",
            limits=_NONSPHERICAL, aliases=("n2",)),
    Species("oxygen", "O2", 3.58, 117.5, 31.9988, _HCB, coolprop="Oxygen",
            limits=_NONSPHERICAL, aliases=("o2",)),
    Species("carbon monoxide", "CO", 3.763, 100.2, 28.0101, _HCB, coolprop="CarbonMonoxide",
            limits=_NONSPHERICAL + "; CO also has a small dipole",
            aliases=("co", "carbon-monoxide")),
    Species("methane", "CH4", 3.817, 148.2, 16.0428, _HCB, coolprop="Methane",
            limits="methane is nearly spherical; the LJ model is fair for its gas and "
                   "supercritical fluid", aliases=("ch4",)),
    Species("carbon dioxide", "CO2", 4.486, 189.0, 44.0098, _HCB, coolprop="CarbonDioxide",
            limits=_NONSPHERICAL + "; CO2 is linear with a strong quadrupole, so the "
                   "spherical model is only qualitative above a few bar",
            aliases=("co2", "carbon-dioxide")),
)

PRESETS: dict[str, Species] = {s.name: s for s in _ROWS}
_LOOKUP: dict[str, Species] = {}
for _s in _ROWS:
    for _key in (_s.name, _s.formula, *_s.aliases):
        _LOOKUP[_key.lower().replace("_", " ")] = _s


def names() -> list[str]:
    """Preset names, in table order."""
    return [s.name for s in _ROWS]


def get(name: str, source: str = "<settings>", key: str = "gas.species") -> Species:
    """The preset called ``name`` (case-insensitive; formula and aliases accepted)."""
    if not isinstance(name, str):
        raise ConfigError(source, key, f"{name!r} is not a species name",
                          f"give one of {', '.join(names())}")
    found = _LOOKUP.get(name.strip().lower().replace("_", " "))
    if found is None:
        close = difflib.get_close_matches(name.lower(), list(_LOOKUP), n=1, cutoff=0.6)
        hint = f"did you mean '{_LOOKUP[close[0]].name}'? " if close else ""
        raise ConfigError(source, key, f"no preset species {name!r}",
                          f"{hint}presets: {', '.join(names())}; or give gas.sigma, "
                          "gas.epsilon and gas.mass yourself")
    return found


def table() -> list[dict]:
    """The preset table as plain rows (for docs and `mdgas check`)."""
    return [{"name": s.name, "formula": s.formula, "sigma_angstrom": s.sigma_angstrom,
             "epsilon_k": s.epsilon_k, "molar_mass": s.molar_mass, "source": s.source,
             "coolprop": s.coolprop, "limits": s.limits} for s in _ROWS]
