"""Values of a spec file as the model holds them: each raw TOML value checked against its key in
the schema (kind, units, bounds) and turned into a typed value, every problem located at its key.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

from . import schema
from .errors import SpecError
from .quantities import Unit, parse_quantity, parse_span
from .schema import Key


def _describe(value: object) -> str:
    if isinstance(value, bool):
        return f"the boolean {str(value).lower()}"
    if isinstance(value, str):
        shown = value if len(value) <= 40 else value[:37] + "..."
        return f'the string "{shown}"'
    if isinstance(value, int | float):
        return f"the number {_number(value)}"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, dict):
        return "a table"
    return f"a {type(value).__name__}"


def suggestion(word: str, options: list[str]) -> str:
    close = difflib.get_close_matches(word, options, n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else f"; expected one of: {', '.join(sorted(options))}"


@dataclass
class FileProblems:
    """One file being read: its text, key positions and the problems found so far, each located."""

    path: str
    text: str
    positions: dict[str, tuple[int, int]] = field(default_factory=dict)
    problems: list[SpecError] = field(default_factory=list)

    def where(self, path: str) -> tuple[int, int]:
        parts = path.split(".")
        while parts:
            pos = self.positions.get(".".join(parts))
            if pos:
                return pos
            parts.pop()
        return (1, 0)

    def problem(self, path: str, message: str) -> None:
        line, col = self.where(path)
        self.add(SpecError(message), line, col)

    @cached_property
    def lines(self) -> list[str]:
        # split once: a file with thousands of problems used to split the whole text for each one
        return self.text.split("\n")

    def add(self, err: SpecError, line: int | None = None, col: int | None = None) -> None:
        line = err.line or line
        lines = self.lines
        src = lines[line - 1][:200] if line and 0 < line <= len(lines) else None
        self.problems.append(err.located(self.path, line, col or None, src))


def _dims_for(key: Key, unit: Unit | None) -> tuple[str, ...]:
    eng = unit.dim if unit else "V"
    out: list[str] = []
    for d in key.dims:
        d = d.replace(schema.PER_ENG, f"V/{eng}").replace(schema.ENG_PER_RTHZ, f"{eng}/√Hz")
        out.append(d.replace(schema.ENG, eng))
    return tuple(dict.fromkeys(out))


SI_LIMIT = 1e30
"""Largest magnitude (and inverse of the smallest non-zero one) of a value in SI units.

Nothing a data-acquisition spec describes comes near it (100 GHz is 1e11, 1 fs is 1e-15); past it
the formulas only overflow, so such a value is refused as a typing slip."""


def _check_physical(number: float, label: str) -> None:
    if abs(number) > SI_LIMIT or 0 < abs(number) < 1 / SI_LIMIT:
        raise SpecError(f"{label}: {number:g} in SI units is outside what a spec can mean "
                        f"({1 / SI_LIMIT:g} to {SI_LIMIT:g}); check the number and its prefix")


def _number(value: float, unit: str = "") -> str:
    """A number for a message; a whole number of any size (TOML integers have no limit) is shortened."""
    if isinstance(value, int) and not isinstance(value, bool):
        digits = str(value)
        text = digits if len(digits) <= 24 else f"{digits[:12]}... ({len(digits.lstrip('-'))} digits)"
    else:
        text = f"{value:g}"
    return f"{text} {unit}" if unit else text


def _check_bounds(key: Key, number: float, label: str, unit: str = "") -> None:
    """The schema's bounds on one number (a whole number is compared exactly, never as a float)."""
    if key.positive and not number > 0:
        raise SpecError(f"{label}: must be greater than zero, found {_number(number, unit)}")
    if key.minimum is not None and number < key.minimum:
        raise SpecError(f"{label}: must be at least {_number(key.minimum, unit)}, found {_number(number, unit)}")
    if key.maximum is not None and number > key.maximum:
        raise SpecError(f"{label}: must be at most {_number(key.maximum, unit)}, found {_number(number, unit)}")


def _int(key: Key, value: object, label: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise SpecError(f"{label}: expected a whole number such as {key.example or '1'}, "
                        f"found {_describe(value)}")
    _check_bounds(key, value, label)
    return value


def _finite_float(value: int | float, label: str, example: str) -> float:
    """A TOML number as a float; an integer past the float range is refused, not an OverflowError."""
    try:
        number = float(value)
    except OverflowError:
        number = math.inf
    if not math.isfinite(number):
        raise SpecError(f"{label}: expected a finite number such as {example}, found {_number(value)}")
    return number


def convert(key: Key, value: object, unit: Unit | None, label: str) -> Any:
    """Turn one raw TOML value into its typed model value, or raise SpecError."""
    kind = key.kind
    if kind == schema.TEXT:
        if not isinstance(value, str):
            raise SpecError(f"{label}: expected text in quotes, found {_describe(value)}")
        if key.required and not value.strip():
            raise SpecError(f"{label}: must not be empty")
        return value
    if kind == schema.REF:
        if not isinstance(value, str) or not value:
            raise SpecError(f"{label}: expected the id of a {schema.NAMED_TABLES[key.ref]} in quotes, "
                            f"found {_describe(value)}")
        return value
    if kind == schema.TEXT_LIST:
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise SpecError(f"{label}: expected a list of strings such as {key.example}, "
                            f"found {_describe(value)}")
        return tuple(value)
    if kind == schema.BOOL:
        if not isinstance(value, bool):
            raise SpecError(f"{label}: expected true or false, found {_describe(value)}")
        return value
    if kind == schema.CHOICE:
        if not isinstance(value, str) or value not in key.choices:
            shown = _describe(value)
            hint = suggestion(value, list(key.choices)) if isinstance(value, str) else (
                f"; expected one of: {', '.join(key.choices)}")
            raise SpecError(f"{label}: {shown} is not a known choice{hint}")
        return value
    if kind == schema.INT:
        return _int(key, value, label)
    if kind == schema.INT_PAIR or kind == schema.INT_LIST:
        if not isinstance(value, list) or (kind == schema.INT_PAIR and len(value) != 2) or not value:
            what = "two whole numbers" if kind == schema.INT_PAIR else "a list of whole numbers"
            raise SpecError(f"{label}: expected {what} such as {key.example}, found {_describe(value)}")
        items = tuple(_int(key, v, label) for v in value)
        if kind == schema.INT_PAIR and key.table == "clocks.*" and items[0] > items[1]:
            raise SpecError(f"{label}: the first number must not exceed the second")
        return items
    if kind == schema.FLOAT:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise SpecError(f"{label}: expected a plain number such as {key.example}, found {_describe(value)}")
        number = _finite_float(value, label, key.example)
        _check_bounds(key, number, label)
        return number
    if kind == schema.GAIN:
        if isinstance(value, int | float) and not isinstance(value, bool):
            number = _finite_float(value, label, key.example)
        elif isinstance(value, str):
            q = parse_quantity(value, ("dB", "1"), label)
            if q.dim == "dB":
                if abs(q.value) > schema.GAIN_LIMIT_DB:
                    raise SpecError(f"{label}: \"{value}\" is beyond any real gain; expected a gain between "
                                    f"-{schema.GAIN_LIMIT_DB:g} dB and {schema.GAIN_LIMIT_DB:g} dB")
                number = 10 ** (q.value / 20)
            else:
                number = q.value
        else:
            raise SpecError(f"{label}: expected a number (V/V) or a gain in dB such as \"20 dB\", "
                            f"found {_describe(value)}")
        low, high = key.minimum or 0.0, key.maximum or math.inf
        if not (low <= number <= high and number > 0):
            raise SpecError(f"{label}: {_number(number)} V/V is beyond any real gain; expected "
                            f"{_number(key.minimum or 0)} to {_number(key.maximum or 0)} V/V "
                            f"(-{schema.GAIN_LIMIT_DB:g} dB to {schema.GAIN_LIMIT_DB:g} dB)")
        return number
    dims = _dims_for(key, unit)
    if kind == schema.QUANTITY:
        if not isinstance(value, str):
            raise SpecError(f"{label}: expected a value with its unit in quotes, such as {key.example}, "
                            f"found {_describe(value)}")
        q = parse_quantity(value, dims, label)
        if q.dim in ("dB", "dBFS"):
            # a level or a ratio: the key's bounds are in dB, and the SI limit means nothing to a logarithm
            _check_bounds(key, q.value, label, q.dim)
        else:
            _check_physical(q.value, label)
            if not any(d in ("dB", "dBFS") for d in key.dims):  # a tone in volts: its bounds are in dBFS
                _check_bounds(key, q.value, label)
        return q
    if kind == schema.SPAN:
        if not isinstance(value, str):
            raise SpecError(f"{label}: expected a range in quotes such as {key.example}, found {_describe(value)}")
        span = parse_span(value, dims, label)
        _check_physical(span.low, label)
        _check_physical(span.high, label)
        return span
    if kind == schema.PAIR:
        if not isinstance(value, list) or len(value) != 2 or not all(isinstance(v, str) for v in value):
            raise SpecError(f"{label}: expected two values with units such as {key.example}, "
                            f"found {_describe(value)}")
        pair = tuple(parse_quantity(v, dims, label).value for v in value)
        for number in pair:
            _check_physical(number, label)
        if key.positive and min(pair) <= 0:
            raise SpecError(f"{label}: both values must be greater than zero")
        if min(pair) < 0:
            raise SpecError(f"{label}: values must not be negative")
        return pair
    raise AssertionError(f"unknown key kind {kind}")  # a schema bug, not bad input


def read_table(
    src: FileProblems,
    raw: object,
    keys: Mapping[str, Key],
    prefix: str,
    title: str,
    unit: Unit | None,
    kind: str | None = None,
) -> dict[str, Any]:
    """Check one table's keys against the schema; return {name: typed value} for the good ones."""
    out: dict[str, Any] = {}
    if not isinstance(raw, dict):
        src.problem(prefix, f"{title} must be a table, found {_describe(raw)}")
        return out
    for name, value in raw.items():
        path = f"{prefix}.{name}" if prefix else name
        key = keys.get(name)
        if key is None:
            src.problem(path, f"unknown key '{name}' in {title}{suggestion(name, list(keys))}")
            continue
        if kind is not None and kind not in key.kinds:
            src.problem(path, f"'{name}' in {title} does not apply to {kind} channels "
                              f"(only to {', '.join(key.kinds)})")
            continue
        try:
            out[name] = convert(key, value, unit, f"{title} {name}" if title else name)
        except SpecError as err:
            src.add(err, *src.where(path))
    for key in keys.values():
        if key.required and key.name not in raw and (kind is None or kind in key.kinds):
            scope = f" for {kind} channels" if kind is not None else ""
            src.problem(prefix, f"{title} {key.name} is required{scope} (e.g. {key.name} = {key.example})")
    return out


def si_value(q: Any) -> float | None:
    """The SI value of a converted quantity, or None."""
    return None if q is None else float(q.value)


