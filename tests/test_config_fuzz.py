"""Property-based fuzzing of the config loader: whatever TOML a user writes, loading it
either succeeds or raises the tool's own ConfigError/UserError, never anything else.

Three kinds of documents: arbitrary text (mostly not TOML at all), well-formed TOML
built from the real section and key names with values of every TOML type, and the
embedded default config with random edits. Runs are derandomized so CI is repeatable.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import math
import tomllib
import warnings

from hypothesis import HealthCheck, given, settings, strategies as st

from mdgas import config
from mdgas.errors import UserError

FUZZ = settings(max_examples=250, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])

SECTION_NAMES = list(config.SECTIONS)
KEYS = {name: [f.name for f in dataclasses.fields(cls)] for name, cls in config.SECTIONS.items()}
ALL_KEYS = sorted({k for keys in KEYS.values() for k in keys})
WORDS = ["ideal", "hard-sphere", "lennard-jones", "xyz", "z", "none", "thermal", "specular",
         "lj93", "csvr", "shifted", "corrected", "argon", "300 K", "0.1 nm", "1 bar",
         "2 g/mol", "-1 K", "nan", ""]

# TOML strings cannot hold surrogates or raw control characters.
text_chars = st.characters(blacklist_categories=("Cs", "Cc"))
toml_strings = st.one_of(st.sampled_from(WORDS), st.text(text_chars, max_size=12))
# Particle counts stay where an engine's own checks run in milliseconds (a check that
# places 10^12 lattice sites is a resource question, not an exception question).
numbers = st.one_of(st.integers(-10, 10), st.integers(-10**5, 10**5),
                    st.floats(allow_nan=True, allow_infinity=True),
                    st.floats(min_value=1e-6, max_value=1e3))
scalars = st.one_of(numbers, st.booleans(), toml_strings,
                    st.datetimes(min_value=dt.datetime(1900, 1, 1),
                                 max_value=dt.datetime(2100, 1, 1)),
                    st.dates(), st.times())
values = st.recursive(scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=4),
    st.dictionaries(st.sampled_from(ALL_KEYS + ["x"]), inner, max_size=3)), max_leaves=8)


def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(v, dt.datetime):
        return v.isoformat()
    if isinstance(v, (dt.date, dt.time)):
        return v.isoformat()
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


@st.composite
def documents(draw) -> str:
    """A well-formed TOML document over (mostly) real section and key names."""
    lines = []
    for name in draw(st.lists(st.one_of(st.sampled_from(SECTION_NAMES),
                                        st.sampled_from(["gass", "Gas", "schedule.x"])),
                              unique=True, max_size=4)):
        lines.append(f"[{json.dumps(name)}]" if "." in name else f"[{name}]")
        pool = KEYS.get(name, ALL_KEYS)
        for key in draw(st.lists(st.one_of(st.sampled_from(pool), st.sampled_from(ALL_KEYS)),
                                 unique=True, max_size=5)):
            value = draw(st.one_of(values, numbers, st.sampled_from(WORDS)))
            if key == "particles" and isinstance(value, (int, float)) and \
                    not isinstance(value, bool) and abs(value) > 10**5:
                value = 10**5
            lines.append(f"{key} = {toml_value(value)}")
    return "\n".join(lines) + "\n"


def load_text(text: str) -> None:
    """What `mdgas check` does with a file's text: parse, validate, engine checks."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # legal-but-unwise warnings are not failures
        raw = config.parse_text(text, "<fuzz>")
        config.from_dict(raw, source="<fuzz>", text=text)


def only_our_errors(text: str) -> None:
    try:
        load_text(text)
    except UserError as exc:
        assert str(exc).startswith("<fuzz>"), f"a message that does not name the file: {exc}"


@FUZZ
@given(st.text(max_size=200))
def test_arbitrary_text(text):
    only_our_errors(text)


@FUZZ
@given(documents())
def test_well_formed_documents_over_real_keys(text):
    tomllib.loads(text)  # the generator itself must write valid TOML
    only_our_errors(text)


@FUZZ
@given(st.data())
def test_edited_default_config(data):
    base = config.DEFAULT_TEXT
    lines = base.splitlines()
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.integers(0, len(lines) - 1))
        action = data.draw(st.sampled_from(["drop", "value", "insert", "garble"]))
        if action == "drop":
            lines.pop(i)
        elif action == "value" and "=" in lines[i]:
            key = lines[i].split("=")[0].strip()
            lines[i] = f"{key} = {toml_value(data.draw(values))}"
        elif action == "insert":
            key = data.draw(st.sampled_from(ALL_KEYS))
            lines.insert(i, f"{key} = {toml_value(data.draw(values))}")
        else:
            pos = data.draw(st.integers(0, len(lines[i])))
            junk = data.draw(st.text(max_size=3))
            lines[i] = lines[i][:pos] + junk + lines[i][pos:]
        if not lines:
            break
    only_our_errors("\n".join(lines) + "\n")


@FUZZ
@given(st.dictionaries(st.sampled_from([f"{s}.{k}" for s, ks in KEYS.items() for k in ks]
                                       + ["gas", "gas.", ".x", "a.b.c", "nosuch.key"]),
                       st.one_of(values, st.text(text_chars, max_size=10)), max_size=3))
def test_overrides(overrides):
    # `--set KEY=VALUE` goes through the same validation as the file.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            config.default_settings().replace(**overrides)
        except UserError:
            pass
        for key, value in overrides.items():
            try:
                config.parse_override(f"{key}={value}")
            except UserError:
                pass
