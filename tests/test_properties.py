"""Property tests: random input reaches only the project's own errors, and good output is finite.

* Quantities: every finite float, in every dimension and in every engineering unit, reads back
  from its 17-digit text (extending the 1e-15..1e15 round trip of test_quantities.py to the
  whole float range, subnormals included).
* Channel headers: random TOML headers built from the key schema (generator/schema.py), each key
  absent, given a plausible value (its example, or a number with a unit of the right kind), or
  a wrong one (wrong types, wrong units, huge and tiny numbers, NaN and infinity, empty and
  unicode strings), written over the minimal fixture tree.  Loading either succeeds or raises
  SpecErrors; when it succeeds, analysis, every registered rule, the text report and the JSON
  report run without raising, and every figure in the JSON is a finite number or null.
"""

from __future__ import annotations

import json
import math
import shutil
import tempfile
import tomllib
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from generator import schema
from generator.analysis import analyze
from generator.errors import SpecError, SpecErrors
from generator.load import load_spec
from generator.quantities import format_in_unit, format_quantity, parse_quantity, parse_unit
from generator.report import to_json, to_text
from generator.rules import run_rules

from .conftest import MINIMAL
from .test_quantities import ROUND_TRIP_DIMS

# ------------------------------------------------------------------ quantity round trips


@settings(max_examples=300, deadline=None)
@given(value=st.floats(allow_nan=False, allow_infinity=False), dim=st.sampled_from(ROUND_TRIP_DIMS))
def test_round_trip_over_the_whole_float_range(value: float, dim: str) -> None:
    # shortest-repr text of a float reads back as the same float (IEEE 754 / Python repr, common practice)
    text = format_quantity(value, dim, digits=17)
    try:
        back = parse_quantity(text, dim)
    except SpecError as err:
        # only a value the display scale pushes past the float range may be refused
        assert "too large" in err.message, (text, err.message)
        return
    assert back.dim == dim
    assert back.value == value or math.isclose(back.value, value, rel_tol=1e-15), text


ENGINEERING_UNITS = ["g", "psi", "bar", "°C", "deg", "rpm", "min", "h", "KiB", "mV/g", "µε", "N·m", "%", "ppm"]


@settings(max_examples=300, deadline=None)
@given(
    value=st.floats(allow_nan=False, allow_infinity=False, min_value=-1e300, max_value=1e300),
    unit_text=st.sampled_from(ENGINEERING_UNITS),
)
def test_round_trip_in_engineering_units(value: float, unit_text: str) -> None:
    unit = parse_unit(unit_text)
    text = format_in_unit(value, unit, digits=17)
    try:
        back = parse_quantity(text, unit.dim)
    except SpecError as err:
        assert "too large" in err.message, (text, err.message)
        return
    # a non-decimal unit (g, psi, °) divides, then multiplies back: a few ulp at most (IEEE 754 rounding)
    assert math.isclose(back.value, value, rel_tol=1e-15, abs_tol=1e-300), (text, back.value, value)


# ------------------------------------------------------------------- random headers

_OMIT = object()
NUMBERS: list[str] = [
    "1", "0", "-1", "2.5", "1e308", "1.7976931348623157e308", "1e309", "1e-308", "5e-324", "1e-400",
    "nan", "inf", "-inf", "Infinity", "99999999999999999999999", "1e-30", "1e30", "\uff15", "\u22121",
    "0x10", "1_000", ".5", "5.", "1e", "--1",
]  # fmt: skip
UNIT_WORDS: list[str] = [
    "Hz", "kHz", "MHz", "GHz", "mHz", "S/s", "kS/s", "V", "mV", "µV", "\u03bcV", "dB", "dBFS", "g", "mg",
    "ps", "ms", "s", "h", "µm", "mm", "cycles/mm", "lp/mm", "Mbit/s", "TB", "%", "°C", "mV/g", "mV/°C",
    "nV/√Hz", "µg/√Hz", "", "kHzz", "V rms", "Hz rms", "\u041dz", "x" * 250,
]  # fmt: skip
WRONG_VALUES = st.one_of(
    st.integers(),
    st.integers(min_value=-(2**70), max_value=2**70),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=30),
    st.sampled_from(["", " ", "\u200b", "nan Hz", "inf V", "-inf dB", "1e400 Hz", "±1e308 V", "0..1e309 V",
                     "\u00b110 V", "10 \u039cV", "\uff12\uff10 kHz", "\u22125 dB", "x" * 300]),
    st.lists(st.integers(min_value=-5, max_value=5), max_size=3),
    st.lists(st.text(max_size=5, alphabet="abc"), max_size=3),
    st.dictionaries(st.sampled_from(["a", "b"]), st.integers(), max_size=2),
)
REFS = {"converters": ["ds", "sar", "dac", "nope"], "groups": ["pair", "nope"], "links": ["net", "nope"]}


def toml_value(value: Any) -> str:
    """TOML text for a Python value: the subset the property tests draw."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        out = []
        for ch in value:
            if ch in '"\\':
                out.append("\\" + ch)
            elif ord(ch) < 0x20 or ord(ch) == 0x7F:  # TOML 1.0: control characters must be escaped
                out.append(f"\\u{ord(ch):04x}")
            else:
                out.append(ch)
        return '"' + "".join(out) + '"'
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(type(value))


def header_text(values: dict[tuple[str, str], Any], arrays: dict[str, int]) -> str:
    """A channel file from {(table, key): value}; array tables repeated ``arrays[table]`` times."""
    lines = ["+++"]
    for (table, name), value in values.items():
        if table == "" and value is not _OMIT:
            lines.append(f"{name} = {toml_value(value)}")
    for table in schema.CHANNEL_TABLES:
        present = [(n, v) for (t, n), v in values.items() if t == table and v is not _OMIT]
        if table in schema.ARRAY_TABLES:
            for _ in range(arrays.get(table, 0)):
                lines.append(f"[[{table}]]")
                lines.extend(f"{n} = {toml_value(v)}" for n, v in present)
        elif present:
            lines.append(f"[{table}]")
            lines.extend(f"{n} = {toml_value(v)}" for n, v in present)
    lines += ["+++", "Notes."]
    return "\n".join(lines) + "\n"


def example_value(key: schema.Key) -> Any:
    """The schema's own example for a key, as the TOML value it stands for."""
    if key.kind == schema.REF:
        return REFS[key.ref][0]
    return tomllib.loads(f"x = {key.example}")["x"]


@st.composite
def plausible(draw: st.DrawFn, key: schema.Key) -> Any:
    """A value of the right shape: the example, a choice, or a number with a unit word."""
    if key.kind == schema.REF:
        return draw(st.sampled_from(REFS[key.ref]))
    if key.kind == schema.CHOICE:
        return draw(st.sampled_from(key.choices))
    if key.kind == schema.INT:
        lo = int(key.minimum) if key.minimum is not None else -5
        hi = int(key.maximum) if key.maximum is not None else 10**6
        return draw(st.one_of(st.integers(min_value=lo, max_value=hi), st.sampled_from([lo, hi, lo - 1, hi + 1])))
    quantity = st.builds(lambda n, u: f"{n} {u}".strip(), st.sampled_from(NUMBERS), st.sampled_from(UNIT_WORDS))
    if key.kind in (schema.QUANTITY, schema.GAIN):
        return draw(st.one_of(st.just(example_value(key)), quantity))
    if key.kind == schema.PAIR:
        return draw(st.one_of(st.just(example_value(key)), st.lists(quantity, min_size=2, max_size=2)))
    if key.kind == schema.SPAN:
        span = st.builds(lambda s, n, u: f"{s}{n} {u}", st.sampled_from(["±", "+/-", "0..", "-1..", ""]),
                         st.sampled_from(NUMBERS), st.sampled_from(UNIT_WORDS))
        return draw(st.one_of(st.just(example_value(key)), span))
    return example_value(key)


def example_values(kind: str) -> dict[tuple[str, str], Any]:
    """Every key that applies to ``kind`` at its schema example: a header the loader accepts."""
    values: dict[tuple[str, str], Any] = {}
    for key in schema.CHANNEL_KEYS:
        applies = kind in key.kinds and key.table not in ("waiver", "stated") and key.name != "link"
        values[(key.table, key.name)] = example_value(key) if applies else _OMIT
    values[("", "kind")] = kind
    family = values.get(("filter", "family"))
    for key in schema.CHANNEL_KEYS:  # keys the example family has no use for are refused
        if key.families and family not in key.families:
            values[(key.table, key.name)] = _OMIT
    if kind == "output":  # a voltage command: the examples in g do not apply
        values.update({("conversion", "converter"): "dac", ("", "unit"): "V", ("signal", "peak"): "5 V",
                       ("signal", "resolution"): "1 mV"})
    return values


@st.composite
def channel_headers(draw: st.DrawFn) -> str:
    """The example header of a random kind, some keys dropped, and up to four keys changed.

    A changed key gets a plausible value (right shape, random number and unit) or a wrong one
    (any type), and may be a key that does not apply to the kind; so about half the headers
    load and the rest fail in one to four places.
    """
    kind = draw(st.sampled_from(schema.CHANNEL_KINDS))
    values = example_values(kind)
    for key in schema.CHANNEL_KEYS:
        if not key.required and draw(st.integers(0, 3)) == 0:
            values[(key.table, key.name)] = _OMIT
    changed = draw(st.lists(st.sampled_from(schema.CHANNEL_KEYS), max_size=4, unique=True))
    for key in changed:
        if (key.table, key.name) == ("", "unit"):
            value = draw(st.sampled_from(["g", "V", "Pa", "°C", "µε", "N·m", "A", "m/s²", "", "Hz", "dB", "kg",
                                          "\u03bcε", "x" * 300]))
        elif draw(st.booleans()):
            value = draw(plausible(key))
        else:
            value = draw(WRONG_VALUES)
        values[(key.table, key.name)] = value
    arrays = {"interference": draw(st.integers(0, 2)) if kind == "input" else 0,
              "waiver": draw(st.integers(0, 1))}
    paths = {(k.table, k.name) for k in changed}
    if arrays["waiver"]:
        for path, default in ((("waiver", "rule"), "below-nyquist"), (("waiver", "reason"), "accepted")):
            if path not in paths:
                values[path] = default
    return header_text(values, arrays)


@pytest.fixture(scope="module")
def scratch_tree() -> Iterator[Path]:
    """One copy of the minimal tree for all examples; each example rewrites channels/ACC-1.md."""
    with tempfile.TemporaryDirectory() as tmp:
        tree = Path(tmp) / "specs"
        shutil.copytree(MINIMAL, tree)
        yield tree


def load_and_report(tree: Path) -> dict[str, Any] | None:
    """Load, analyse, run the rules and write both reports; None when the loader refused the tree."""
    try:
        spec = load_spec(tree)
    except SpecErrors as errs:
        assert errs.errors, "SpecErrors without any error"
        for err in errs.errors:
            assert isinstance(err, SpecError) and err.message and err.file, err
            err.format()  # every error can be shown
        return None
    analysis = analyze(spec)
    findings = run_rules(analysis)
    assert "checked" in to_text(analysis, findings)
    doc: dict[str, Any] = json.loads(to_json(analysis, findings), parse_constant=_no_constant)
    for channel in doc["channels"]:
        for key, value in channel["figures"].items():
            assert value is None or not isinstance(value, float) or math.isfinite(value), (key, value)
    return doc


def _no_constant(name: str) -> object:
    raise AssertionError(f"{name} in the JSON report")


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                 HealthCheck.too_slow])
@given(header=channel_headers())
def test_random_header_loads_or_fails_with_spec_errors(header: str, scratch_tree: Path) -> None:
    (scratch_tree / "channels" / "ACC-1.md").write_text(header, encoding="utf-8")
    load_and_report(scratch_tree)


@pytest.mark.parametrize("kind", schema.CHANNEL_KINDS)
def test_header_of_examples_loads(kind: str, tmp_path: Path) -> None:
    # the strategy above starts from headers the loader accepts: every applicable key at its example
    tree = tmp_path / "specs"
    shutil.copytree(MINIMAL, tree)
    text = header_text(example_values(kind), {"interference": 1 if kind == "input" else 0})
    (tree / "channels" / "ACC-1.md").write_text(text, encoding="utf-8")
    doc = load_and_report(tree)
    assert doc is not None, text
    assert any(c["id"] == "ACC-1" and c["kind"] == kind for c in doc["channels"])
