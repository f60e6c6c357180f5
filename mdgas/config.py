"""TOML config files -> validated, frozen settings.

Every quantity is in reduced units: lengths in σ, energies in ε, masses in m,
temperatures as kT/ε, times in τ = σ·sqrt(m/ε), number densities as Nσ³/V.
Every error names the file, the key, what was wrong and what is allowed.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from .errors import ConfigError

#: The embedded default job (what ``mdgas run`` starts from before a file is read).
MODELS = ("ideal", "hard-sphere", "lennard-jones")
WALL_KINDS = ("specular", "thermal", "lj93")
FACES = ("x-", "x+", "y-", "y+", "z-", "z+")


def _opt(default: Any, doc: str, *, choices: tuple | None = None, minimum: float | None = None,
         positive: bool = False, kind: type | None = None) -> Any:
    """A settings field with the metadata the validator and the docs use."""
    meta = {"doc": doc, "choices": choices, "minimum": minimum, "positive": positive, "kind": kind}
    return field(default=default, metadata=meta)


@dataclass(frozen=True)
class Gas:
    model: str = _opt("ideal", "particle model", choices=MODELS)
    particles: int = _opt(2000, "number of particles N", positive=True, kind=int)
    temperature: float = _opt(1.0, "set temperature kT/ε (initial velocities, thermostat)",
                              positive=True, kind=float)
    density: float = _opt(0.01, "number density Nσ³/V, V the volume between the wall planes",
                          positive=True, kind=float)
    # Real gases (mdgas.units, mdgas.species, mdgas.statepoint): quantities with units are
    # turned into reduced numbers before validation; see units.resolve_quantities.
    species: str = _opt("", 'preset gas ("argon", "methane", ...): sets σ, ε, m; "" = reduced '
                        "units", kind=str)
    sigma: str = _opt("", 'σ with units, e.g. "0.3405 nm" (the diameter for hard spheres); '
                      "overrides the species", kind=str)
    epsilon: str = _opt("", 'ε with units, e.g. "119.8 K" (as ε/k) or "0.996 kJ/mol"; '
                        "overrides the species", kind=str)
    mass: str = _opt("", 'particle mass with units, e.g. "39.948 g/mol"; overrides the species',
                     kind=str)
    pressure: float | None = _opt(None, "requested pressure (ε/σ³ or e.g. \"50 bar\"); when "
                                  "given, the density is derived from the equation of state",
                                  positive=True, kind=float)


@dataclass(frozen=True)
class Container:
    walls: str = _opt("xyz", 'axes closed by walls: "none" (fully periodic) or any of "x", "y", "z"',
                      kind=str)
    wall: str = _opt("specular", "wall model", choices=WALL_KINDS)
    wall_temperature: float | None = _opt(None, "temperature of thermal walls (kT/ε)",
                                          positive=True, kind=float)
    aspect: tuple = _opt((1.0, 1.0, 1.0), "relative box edge lengths [x, y, z]", kind=tuple)
    wall_epsilon: float = _opt(1.0, "9-3 wall strength ε_w (ε)", positive=True, kind=float)
    wall_sigma: float = _opt(1.0, "9-3 wall length scale σ_w (σ)", positive=True, kind=float)
    wall_cutoff: float = _opt(3.0, "9-3 wall potential cut-off distance (σ)", positive=True,
                              kind=float)
    pore_width: float | None = _opt(None, 'slit-pore width H between the wall planes (σ or e.g. '
                                    '"5 nm"); sets walls = "z" and the z edge to H', positive=True,
                                    kind=float)


@dataclass(frozen=True)
class Potential:
    cutoff: float = _opt(3.0, "Lennard-Jones cut-off radius r_c (σ)", positive=True, kind=float)
    tail: str = _opt("corrected", 'tail treatment beyond r_c: "shifted" (truncated and shifted), '
                     '"corrected" (truncated, plus uniform-fluid tail corrections), '
                     '"shifted-force" (force and energy both zero at r_c; best energy '
                     'conservation)', choices=("shifted", "corrected", "shifted-force"))
    skin: float = _opt(0.3, "Verlet neighbour-list skin (σ)", positive=True, kind=float)
    neighbour_list: str = _opt("auto", 'neighbour-list kind: "full" (fast for dense fluids), '
                               '"half" (fast for gases), "auto" (full above ρ = 0.3)',
                               choices=("auto", "full", "half"))


@dataclass(frozen=True)
class Schedule:
    equilibrate: float = _opt(10.0, "simulated time before production (τ)", minimum=0.0,
                              kind=float)
    produce: float = _opt(200.0, "simulated production time (τ)", positive=True, kind=float)
    seed: int = _opt(1, "random seed (placement, velocities, thermal walls, thermostat)",
                     minimum=0, kind=int)
    timestep: float = _opt(0.005, "velocity-Verlet time step (τ), Lennard-Jones only",
                           positive=True, kind=float)
    thermostat: str = _opt("csvr", "thermostat during equilibration", choices=("csvr", "none"))
    produce_thermostat: str = _opt("none", "thermostat during production",
                                   choices=("csvr", "none"))
    thermostat_time: float = _opt(0.5, "CSVR relaxation time (τ)", positive=True, kind=float)
    target_stderr: float | None = _opt(None, "extend production until stderr(Z) reaches this",
                                       positive=True, kind=float)
    max_produce: float | None = _opt(None, "upper limit on production time with target_stderr (τ)",
                                     positive=True, kind=float)


@dataclass(frozen=True)
class Output:
    path: str = _opt("", 'run file; empty means "runs/<config name>.h5"', kind=str)
    sample_every: float = _opt(0.5, "time between observable samples (τ)", positive=True,
                               kind=float)
    frame_every: float = _opt(10.0, "time between stored trajectory frames (τ); 0 = none",
                              minimum=0.0, kind=float)
    checkpoint_every: float = _opt(5.0, "wall-clock minutes between checkpoints", positive=True,
                                   kind=float)
    histogram_bins: int = _opt(60, "bins of the speed, velocity and density histograms",
                               minimum=4, kind=int)


@dataclass(frozen=True)
class Analysis:
    tolerance: float = _opt(1.0, "tolerated deviation from the ideal-gas law (percent)",
                            positive=True, kind=float)


SECTIONS: dict[str, type] = {
    "gas": Gas, "container": Container, "potential": Potential,
    "schedule": Schedule, "output": Output, "analysis": Analysis,
}


@dataclass(frozen=True)
class Settings:
    """A validated config. ``text`` is the TOML that produced it, for the run file."""

    gas: Gas = Gas()
    container: Container = Container()
    potential: Potential = Potential()
    schedule: Schedule = Schedule()
    output: Output = Output()
    analysis: Analysis = Analysis()
    source: str = "<default>"
    text: str = ""

    # Derived geometry -------------------------------------------------------------
    @property
    def walled(self) -> tuple[bool, bool, bool]:
        """Per axis: is it closed by two walls (True) or periodic (False)?"""
        w = self.container.walls
        return tuple(a in w for a in "xyz")  # type: ignore[return-value]

    @property
    def volume(self) -> float:
        return self.gas.particles / self.gas.density

    @property
    def box(self) -> np.ndarray:
        """Box edges (σ): the aspect ratios scaled to the volume N/ρ."""
        a = np.asarray(self.container.aspect, dtype=float)
        h = self.container.pore_width
        if h is not None:  # slit pore: z edge = H, x:y as aspect, area = V/H
            area = self.volume / h
            return np.array([math.sqrt(area * a[0] / a[1]), math.sqrt(area * a[1] / a[0]), h])
        return a * (self.volume / float(np.prod(a))) ** (1.0 / 3.0)

    def as_dict(self) -> dict[str, dict[str, Any]]:
        """Plain nested dict of every key, resolved defaults included."""
        out: dict[str, dict[str, Any]] = {}
        for name in SECTIONS:
            sec = dataclasses.asdict(getattr(self, name))
            out[name] = {k: (list(v) if isinstance(v, tuple) else v) for k, v in sec.items()}
        return out

    def replace(self, **overrides: Any) -> "Settings":
        """A copy with ``{"gas.density": 0.05, ...}``-style overrides, re-validated."""
        raw = self.as_dict()
        from .units import forget_derived
        forget_derived(raw, overrides)
        apply_overrides(raw, overrides, self.source)
        return from_dict(raw, source=self.source, text=self.text)


# Loading ---------------------------------------------------------------------------

def load(path: str | Path, overrides: Mapping[str, Any] | None = None) -> Settings:
    """Read and validate a TOML config file; ``overrides`` maps dotted keys to values."""
    p = Path(path)
    src = str(path)
    try:
        text = p.read_text()
    except FileNotFoundError:
        raise ConfigError(src, "", "no such file", "check the path") from None
    except (IsADirectoryError, PermissionError, UnicodeDecodeError) as exc:
        raise ConfigError(src, "", f"cannot read it ({exc.__class__.__name__})",
                          "give a readable TOML text file") from None
    raw = parse_text(text, src)
    if overrides:
        apply_overrides(raw, overrides, src)
    settings = from_dict(raw, source=src, text=text)
    if not settings.output.path:
        settings = dataclasses.replace(
            settings, output=dataclasses.replace(settings.output, path=f"runs/{p.stem}.h5"))
    return settings


def parse_text(text: str, source: str = "<text>") -> dict[str, Any]:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(source, "", f"not valid TOML: {exc}", "fix the syntax at that line") \
            from None


def parse_override(item: str, source: str = "--set") -> tuple[str, Any]:
    """``"gas.density=0.05"`` -> ``("gas.density", 0.05)``; values are read as TOML."""
    if "=" not in item:
        raise ConfigError(source, item, "expected KEY=VALUE", "for example gas.density=0.05")
    key, _, value = item.partition("=")
    key, value = key.strip(), value.strip()
    try:
        parsed = tomllib.loads(f"v = {value}")["v"]
    except tomllib.TOMLDecodeError:
        parsed = value  # a bare word such as thermal is taken as a string
    return key, parsed


def apply_overrides(raw: dict[str, Any], overrides: Mapping[str, Any], source: str) -> None:
    for dotted, value in overrides.items():
        section, _, key = dotted.partition(".")
        if not key or "." in key:
            raise ConfigError(source, dotted, "override keys look like section.key",
                              "for example gas.density")
        _check_section_name(section, source)
        raw.setdefault(section, {})
        if not isinstance(raw[section], dict):
            raise ConfigError(source, section, "must be a table", f"write [{section}]")
        raw[section][key] = value


def _check_section_name(name: str, source: str) -> None:
    if name not in SECTIONS:
        raise ConfigError(source, name, "unknown section",
                          _suggest(name, SECTIONS) or f"sections are {', '.join(SECTIONS)}")


def _key_outside_section(name: str, source: str) -> None:
    """A ``key = value`` above every [section] header: say which section it belongs to."""
    homes = [sec for sec, cls in SECTIONS.items()
             if name in {f.name for f in dataclasses.fields(cls)}]
    if homes:
        raise ConfigError(source, name, "is a key outside any section",
                          f"put it below a [{homes[0]}] header")


def _suggest(word: str, options) -> str:
    close = difflib.get_close_matches(word, list(options), n=1, cutoff=0.5)
    return f"did you mean '{close[0]}'?" if close else ""


def from_dict(raw: Mapping[str, Any], source: str = "<dict>", text: str = "",
              check_model: bool = True) -> Settings:
    """Validate a nested dict (as read from TOML) into Settings.

    ``check_model`` False skips the engine's own checks (used when reading run files,
    so that analysis never imports an engine).
    """
    if not isinstance(raw, Mapping):
        raise ConfigError(source, "", "the config must be a table of sections")
    from .units import resolve_quantities
    try:
        raw = resolve_quantities(raw, source, derive=check_model)
    except ConfigError:
        raise
    except (TypeError, ValueError, ArithmeticError, AttributeError, KeyError) as exc:
        # A value of the wrong type reached the unit conversion before validation.
        raise ConfigError(source, "", f"the units, species or pressure settings cannot be "
                          f"read ({exc.__class__.__name__}: {exc})",
                          "check the types of gas.pressure, gas.species and the keys they "
                          "use, e.g. potential.cutoff must be a number") from None
    sections: dict[str, Any] = {}
    for name, value in raw.items():
        if name not in SECTIONS and not isinstance(value, Mapping):
            _key_outside_section(name, source)
        _check_section_name(name, source)
        if not isinstance(value, Mapping):
            raise ConfigError(source, name, "must be a table", f"write [{name}] and keys below it")
        sections[name] = _build_section(name, SECTIONS[name], value, source)
    settings = Settings(**sections, source=source, text=text)
    _cross_check(settings, check_model)
    return settings


def _build_section(name: str, cls: type, values: Mapping[str, Any], source: str):
    fields = {f.name: f for f in dataclasses.fields(cls)}
    kwargs = {}
    for key, value in values.items():
        where = f"{name}.{key}"
        if key not in fields:
            hint = _suggest(key, fields) or f"keys of [{name}] are {', '.join(fields)}"
            raise ConfigError(source, where, "unknown key", hint)
        if value is None and fields[key].default is None:
            continue  # an optional key left unset (TOML cannot write None; run files can)
        kwargs[key] = _coerce(where, fields[key], value, source)
    return cls(**kwargs)


_TYPE_WORDS = {int: "a whole number", float: "a number", str: "a string", tuple: "a list"}


def _coerce(where: str, f: dataclasses.Field, value: Any, source: str) -> Any:
    meta = f.metadata
    choices, kind = meta["choices"], meta["kind"] or str
    if choices is not None:
        if not isinstance(value, str) or value not in choices:
            hint = _suggest(str(value), choices) if isinstance(value, str) else ""
            allowed = "one of " + ", ".join(f'"{c}"' for c in choices)
            raise ConfigError(source, where, f"{value!r} is not allowed",
                              f"{hint + ' ' if hint else ''}allowed: {allowed}")
        return value
    if kind is tuple:
        if (not isinstance(value, list) or len(value) != 3
                or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)):
            raise ConfigError(source, where, f"{value!r} is not a list of three numbers",
                              "for example [1, 1, 4]")
        out = tuple(float(v) for v in value)
        if not all(math.isfinite(v) and v > 0 for v in out):
            raise ConfigError(source, where, "every entry must be a positive number",
                              "for example [1, 1, 4]")
        return out
    if kind is int:
        ok = isinstance(value, int) and not isinstance(value, bool)
        if isinstance(value, float) and value.is_integer():
            value, ok = int(value), True
    elif kind is float:
        ok = isinstance(value, (int, float)) and not isinstance(value, bool)
    else:
        ok = isinstance(value, str)
    if not ok:
        hint = ""
        if isinstance(value, str) and kind in (int, float):
            hint = "numbers are written without quotes; quantities with units are not read here"
        raise ConfigError(source, where, f"{value!r} is not {_TYPE_WORDS[kind]}",
                          hint or f"give {_TYPE_WORDS[kind]}")
    if kind is float:
        value = float(value)
        if not math.isfinite(value):
            raise ConfigError(source, where, f"{value!r} is not finite", "give a finite number")
    if meta["positive"] and value <= 0:
        raise ConfigError(source, where, f"{value!r} must be greater than zero",
                          "give a positive value")
    if meta["minimum"] is not None and value < meta["minimum"]:
        raise ConfigError(source, where, f"{value!r} is below the minimum {meta['minimum']}",
                          f"give a value >= {meta['minimum']}")
    return value


def _cross_check(s: Settings, check_model: bool = True) -> None:
    """Rules that involve more than one key."""
    src = s.source
    w = s.container.walls
    if w != "none" and (not w or any(c not in "xyz" for c in w) or len(set(w)) != len(w)):
        raise ConfigError(src, "container.walls", f"{w!r} is not a set of axes",
                          'use "none" or letters from "xyz", e.g. "z" for a slit, "xyz" for a box')
    if s.container.wall == "thermal" and s.container.walls != "none" \
            and s.container.wall_temperature is None:
        raise ConfigError(src, "container.wall_temperature", "thermal walls need a temperature",
                          "set container.wall_temperature, e.g. 1.0")
    if s.container.wall == "lj93" and s.gas.model != "lennard-jones":
        raise ConfigError(src, "container.wall", '"lj93" walls need a force field',
                          'use gas.model = "lennard-jones" or wall = "specular"/"thermal"')
    if s.schedule.max_produce is not None and s.schedule.max_produce < s.schedule.produce:
        raise ConfigError(src, "schedule.max_produce", "is shorter than schedule.produce",
                          "make max_produce >= produce")
    if s.output.sample_every > s.schedule.produce:
        raise ConfigError(src, "output.sample_every", "is longer than the production run",
                          "make sample_every smaller than schedule.produce")
    if check_model:
        from .engines import get_engine  # late import: engines import this module
        get_engine(s.gas.model).validate(s)


def describe_keys() -> list[tuple[str, str, Any]]:
    """(dotted key, description, default) for every config key, for docs and `check`."""
    rows = []
    for name, cls in SECTIONS.items():
        for f in dataclasses.fields(cls):
            rows.append((f"{name}.{f.name}", f.metadata["doc"], f.default))
    return rows


DEFAULT_TEXT = """\
# The embedded default: a dilute ideal gas in a closed cubic box with specular walls.
[gas]
model = "ideal"
particles = 2000
temperature = 1.0
density = 0.01

[container]
walls = "xyz"
wall = "specular"

[schedule]
equilibrate = 10.0
produce = 200.0
seed = 1

[output]
path = "runs/default.h5"
sample_every = 0.5
frame_every = 10.0
"""


def default_settings() -> Settings:
    """The embedded default job (also what ``mdgas demo`` runs first)."""
    return from_dict(parse_text(DEFAULT_TEXT, "<embedded default>"),
                     source="<embedded default>", text=DEFAULT_TEXT)


def keys_markdown() -> str:
    """The README's table of config keys, generated from the dataclasses' docs."""
    out = []
    for name, cls in SECTIONS.items():
        out.append(f"\n**[{name}]**\n\n| key | default | meaning (reduced units unless said) |\n"
                   "|---|---|---|")
        for f in dataclasses.fields(cls):
            d, choices = f.default, f.metadata["choices"]
            extra = (" — one of " + ", ".join(f'`"{c}"`' for c in choices)) if choices else ""
            if d is None:
                shown = "unset"
            elif isinstance(d, str):
                shown = f'`"{d}"`'
            else:
                shown = f"`{list(d) if isinstance(d, tuple) else d}`"
            out.append(f"| `{f.name}` | {shown} | {f.metadata['doc']}{extra} |")
    return "\n".join(out) + "\n"
