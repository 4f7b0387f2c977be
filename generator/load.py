"""Read a spec tree from disk into the model, reporting every problem at once.

A spec tree is ``system.toml`` (shared hardware) plus ``channels/**/<ID>.md``: a TOML
header between two lines of ``+++``, then Markdown notes.  This module is the only
one that reads spec files.  Every problem becomes a located :class:`SpecError`; all
of them, from all files, are raised together as :class:`SpecErrors`.
"""

from __future__ import annotations

import difflib
import errno
import math
import os
import re
import stat
import sys
import tomllib
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from types import MappingProxyType
from typing import Any

from . import schema
from .errors import SpecError, SpecErrors
from .files import walk
from .model import (
    Channel,
    Clock,
    Conversion,
    Converter,
    Filter,
    Group,
    Link,
    Noise,
    Safety,
    Sensor,
    Signal,
    SourceRef,
    Spec,
    Stated,
    Store,
    System,
    Tone,
    Waiver,
    id_key,
)
from .quantities import Span, Unit, parse_quantity, parse_span, parse_unit
from .schema import Key

MAX_FILE_BYTES = 1_000_000
MAX_CHANNELS = 50_000
CHANNEL_ID = re.compile(r"^[A-Za-z0-9._-]{1,100}$")
SYSTEM_FILE = "system.toml"
CHANNEL_DIR = "channels"
FENCE = "+++"


# --------------------------------------------------------------------------- text


def split_header(text: str) -> tuple[int, str, str]:
    """Split a channel file into (first header line number, TOML header, Markdown body).

    Raises a located :class:`SpecError` when the ``+++`` fences are missing.
    """
    lines = text.split("\n")
    start = 0
    while start < len(lines) and not lines[start].strip():
        start += 1
    if start == len(lines):
        raise SpecError("the file is empty; a channel file starts with a line of +++, "
                        "a TOML header, and another line of +++", line=1)
    if lines[start].strip() != FENCE:
        raise SpecError(
            "a channel file starts with a line of +++, then its TOML header, then another +++ line",
            line=start + 1, column=1, source_line=lines[start][:200],
        )
    for end in range(start + 1, len(lines)):
        if lines[end].strip() == FENCE:
            header = "\n".join(lines[start + 1 : end])
            body = "\n".join(lines[end + 1 :]).strip("\n")
            return start + 2, header, body
    raise SpecError("the header opened here is never closed by a line of +++",
                    line=start + 1, column=1, source_line=lines[start])


_TABLE_LINE = re.compile(r"^\s*(\[\[?)\s*([^\[\]]+?)\s*\]\]?\s*(?:#.*)?$")
_BARE_OR_QUOTED = r'(?:[A-Za-z0-9_-]+|"[^"\n]*"|\'[^\'\n]*\')'
_KEY_LINE = re.compile(rf"^(\s*)({_BARE_OR_QUOTED}(?:\s*\.\s*{_BARE_OR_QUOTED})*)\s*=")


def _dotted(path: str) -> list[str]:
    parts = re.findall(_BARE_OR_QUOTED, path)
    return [p[1:-1] if p[:1] in "\"'" else p for p in parts]


def locate_keys(header: str, first_line: int = 1) -> dict[str, tuple[int, int]]:
    """Map each table and key path (``"conversion.rate"``, ``"interference.0.level"``) to
    its (line, column) in the file, by a light scan of the TOML text.

    tomllib gives no positions, so this scan supplies them for messages; a key it cannot
    place falls back to its table's line in :meth:`_Source.where`.
    """
    found: dict[str, tuple[int, int]] = {}
    counters: dict[str, int] = {}
    table: list[str] = []
    in_multiline: str | None = None
    for i, raw in enumerate(header.split("\n")):
        line_no = first_line + i
        if in_multiline:
            if raw.count(in_multiline) % 2 == 1:
                in_multiline = None
            continue
        m = _TABLE_LINE.match(raw)
        if m:
            names = _dotted(m.group(2))
            col = raw.index("[") + 1
            if m.group(1) == "[[":
                base = ".".join(names)
                index = counters.get(base, 0)
                counters[base] = index + 1
                table = [*names, str(index)]
            else:
                table = names
            for depth in range(1, len(table) + 1):  # [a.b] also places table a
                found.setdefault(".".join(table[:depth]), (line_no, col))
            continue
        k = _KEY_LINE.match(raw)
        if k:
            path = ".".join([*table, *_dotted(k.group(2))])
            found.setdefault(path, (line_no, len(k.group(1)) + 1))
            rest = raw[k.end():]
            for quote in ('"""', "'''"):
                if rest.count(quote) % 2 == 1:
                    in_multiline = quote
    return found


_TOML_AT = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")
_TOML_END = re.compile(r"\s*\(at end of document\)\s*$")


MAX_NESTING = 32
"""Deepest nesting of arrays and tables, and most parts in one dotted key, a spec may use.

Real spec files need three or four.  The limit is checked before tomllib sees the text: tomllib
recurses once per level (thousands of ``[`` raise RecursionError) and joins dotted keys in
quadratic time (a 100 kB key ``a.a.a...`` took minutes, found by the fuzz corpus).
"""

# Strings and comments are skipped whole, so brackets and dots inside them do not count.
_NEST_TOKEN = re.compile(
    r'"""(?:\\[\s\S]|[^\\])*?"""'  # multi-line basic string
    r"|'''[\s\S]*?'''"  # multi-line literal string
    r'|"(?:\\.|[^"\\\n])*"'  # basic string
    r"|'[^'\n]*'"  # literal string
    r"|#[^\n]*"  # comment
    r"|[\[\]{}.=,\n]"  # what nests, dots, assigns or separates
)


def _check_nesting(text: str, first_line: int) -> None:
    """Raise a located :class:`SpecError` where nesting or a dotted key goes past :data:`MAX_NESTING`."""
    depth = dots = 0
    line = first_line
    for m in _NEST_TOKEN.finditer(text):
        tok = m.group(0)
        if tok in "[{":
            depth += 1
            dots = 0
            if depth > MAX_NESTING:
                break
        elif tok in "]}":
            depth = max(depth - 1, 0)
            dots = 0
        elif tok == ".":
            dots += 1  # a float's point counts too; the limit leaves room for it
            if dots >= MAX_NESTING:
                break
        elif tok in "=,\n":
            dots = 0
        line += tok.count("\n")
    else:
        return
    lines = text.split("\n")
    index = line - first_line
    src = lines[index][:200] if 0 <= index < len(lines) else None
    what = (f"arrays or tables nested more than {MAX_NESTING} deep" if depth > MAX_NESTING
            else f"a dotted key of more than {MAX_NESTING} parts")
    raise SpecError(f"{what}; a spec file needs only a few levels", line=line, source_line=src)


def parse_toml(text: str, first_line: int = 1) -> dict[str, Any]:
    """tomllib.loads, with its error turned into a located :class:`SpecError`."""
    _check_nesting(text, first_line)
    try:
        return tomllib.loads(text)
    except RecursionError:
        # a fallback only: _check_nesting stops deep nesting long before Python's stack limit
        raise SpecError(f"arrays or tables nested too deeply (the limit is {MAX_NESTING})",
                        line=first_line) from None
    except tomllib.TOMLDecodeError as exc:
        raise _toml_error(exc, text, first_line) from None
    except ValueError:
        # tomllib's int() refuses more digits than sys.get_int_max_str_digits() (4,300 by default)
        # with a plain ValueError and no position
        limit = sys.get_int_max_str_digits() or 4300
        digits = re.search(rf"[0-9][0-9_]{{{limit - 1},}}", text)
        line = text.count("\n", 0, digits.start()) + 1 if digits else 1
        src = text.split("\n")[line - 1][:200] if digits else None
        raise SpecError(f"a number of more than {limit:,} digits; a spec needs far fewer",
                        line=line + first_line - 1, source_line=src) from None


def _toml_error(exc: tomllib.TOMLDecodeError, text: str, first_line: int) -> SpecError:
    """tomllib's message as a located :class:`SpecError`."""
    msg = str(exc)
    line = col = None
    m = _TOML_AT.search(msg)
    if m:
        line, col = int(m.group(1)), int(m.group(2))
        msg = msg[: m.start()]
    elif _TOML_END.search(msg):
        line = max(1, text.count("\n") + 1)
        msg = _TOML_END.sub("", msg)
    msg = msg[:1].lower() + msg[1:]
    lines = text.split("\n")
    src = lines[line - 1][:200] if line and 0 < line <= len(lines) else None
    return SpecError(f"not valid TOML: {msg}", line=(line or 1) + first_line - 1, column=col, source_line=src)


# ----------------------------------------------------------------------- checking


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


def _suggest(word: str, options: list[str]) -> str:
    close = difflib.get_close_matches(word, options, n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else f"; expected one of: {', '.join(sorted(options))}"


@dataclass
class _Source:
    """One file being read: its text, key positions and the problems found so far."""

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
            hint = _suggest(value, list(key.choices)) if isinstance(value, str) else (
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


def _read_table(
    src: _Source,
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
            src.problem(path, f"unknown key '{name}' in {title}{_suggest(name, list(keys))}")
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


def _value(q: Any) -> float | None:
    return None if q is None else float(q.value)


# ------------------------------------------------------------------------ system


LINK_REFUSED = ("{rel} is a symbolic link; specfold reads only regular files inside the spec folder and refuses "
                "every link in it, so that a spec cannot pull in a file from elsewhere: put the file itself here")
"""The link policy, said wherever a link is met (system.toml, channel files, folders below channels/)."""

_OPEN_FLAGS = os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0)
"""A spec file is opened without following a link (the check and the open are one step) and without
waiting on a named pipe, which would otherwise block the read for ever."""


def _read_bytes(path: Path, rel: str) -> bytes:
    """The bytes of a regular file inside the tree; a :class:`SpecError` for a link, a folder, a pipe
    or a device, a file past :data:`MAX_FILE_BYTES`, or one that cannot be read."""
    if path.is_symlink():
        raise SpecError(LINK_REFUSED.format(rel=rel), rel)
    try:
        fd = os.open(path, _OPEN_FLAGS)
    except OSError as exc:
        if exc.errno == errno.ELOOP:  # made a link after the check above
            raise SpecError(LINK_REFUSED.format(rel=rel), rel) from None
        raise SpecError(f"cannot read the file: {exc.strerror or exc}", rel) from None
    try:
        info = os.fstat(fd)
        if not stat.S_ISREG(info.st_mode):
            raise SpecError("not a regular file (a folder, a pipe or a device); a spec file is plain text", rel)
        if info.st_size > MAX_FILE_BYTES:
            raise SpecError(f"the file is {info.st_size:,} bytes; spec files are limited to {MAX_FILE_BYTES:,} bytes",
                            rel)
        chunks: list[bytes] = []
        size = 0
        while size <= MAX_FILE_BYTES and (chunk := os.read(fd, 1 << 20)):
            chunks.append(chunk)
            size += len(chunk)
    except OSError as exc:
        raise SpecError(f"cannot read the file: {exc.strerror or exc}", rel) from None
    finally:
        os.close(fd)
    if size > MAX_FILE_BYTES:  # grew while it was read
        raise SpecError(f"the file is over {MAX_FILE_BYTES:,} bytes; spec files are limited to "
                        f"{MAX_FILE_BYTES:,} bytes", rel)
    return b"".join(chunks)


def _read_file(path: Path, rel: str, problems: list[SpecError]) -> str | None:
    try:
        data = _read_bytes(path, rel)
    except SpecError as err:
        problems.append(err)
        return None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        problems.append(SpecError(f"the file is not UTF-8 text (byte 0x{data[exc.start]:02x})", rel, line))
        return None
    # Windows (CR LF) and old Mac (CR alone) line endings read as LF: TOML allows no bare CR, so a
    # CR-only file would otherwise be a single line that "does not start with +++"
    return text.removeprefix("\ufeff").replace("\r\n", "\n").replace("\r", "\n")


def _load_system(root: Path, problems: list[SpecError]) -> System | None:
    path = root / SYSTEM_FILE
    if path.is_symlink():
        problems.append(SpecError(LINK_REFUSED.format(rel=SYSTEM_FILE), SYSTEM_FILE))
        return None
    if not path.exists():
        problems.append(SpecError(f"no {SYSTEM_FILE} in {root}; it holds what the channels share "
                                  "(see 'specfold new' and the README)", SYSTEM_FILE))
        return None
    text = _read_file(path, SYSTEM_FILE, problems)
    if text is None:
        return None
    src = _Source(SYSTEM_FILE, text)
    try:
        raw = parse_toml(text)
    except SpecError as err:
        src.add(err)
        problems.extend(src.problems)
        return None
    # located after parsing, so the key scan only sees text within the nesting limit
    src.positions = locate_keys(text)
    for name in raw:
        if name not in schema.SYSTEM_TABLES:
            src.problem(name, f"unknown table [{name}] in {SYSTEM_FILE}"
                              f"{_suggest(name, list(schema.SYSTEM_TABLES))}")
    head = _read_table(src, raw.get("system", {}), schema.keys_of("system", schema.SYSTEM_KEYS),
                       "system", "[system]", None)
    if "system" not in raw:
        src.problem("", "[system] table is missing; it needs at least name = \"...\"")

    def named(table: str) -> Iterator[tuple[str, dict[str, Any], SourceRef]]:
        section = raw.get(table, {})
        if not isinstance(section, dict):
            src.problem(table, f"[{table}] must hold tables such as [{table}.example]")
            return
        keys = schema.keys_of(f"{table}.*", schema.SYSTEM_KEYS)
        for item_id, body in section.items():
            prefix = f"{table}.{item_id}"
            if not CHANNEL_ID.match(item_id):
                src.problem(prefix, f"'{item_id}' is not a usable id: use letters, digits, '.', '_' and '-'")
                continue
            values = _read_table(src, body, keys, prefix, f"[{prefix}]", None)
            yield item_id, values, SourceRef(SYSTEM_FILE, src.where(prefix)[0])

    clocks = {}
    for cid, v, ref in named("clocks"):
        if "frequency" in v:
            clocks[cid] = Clock(cid, v["frequency"].value, v.get("dividers", ()), v.get("divider_range"),
                                _value(v.get("jitter")), ref)
    stores = {sid: Store(sid, v["capacity"].value, ref) for sid, v, ref in named("stores") if "capacity" in v}
    links = {}
    for lid, v, ref in named("links"):
        if "capacity" in v:
            links[lid] = Link(lid, v["capacity"].value, _value(v.get("overhead")) or 0.0,
                              _value(v.get("headroom")) or 0.0, v.get("store"), ref)
    groups = {gid: Group(gid, _value(v.get("skew")), _value(v.get("phase")), v.get("description", ""), ref)
              for gid, v, ref in named("groups")}
    converters = {}
    for cid, v, ref in named("converters"):
        if not {"type", "architecture", "bits", "full_scale", "max_rate"} <= v.keys():
            continue
        conv = Converter(
            cid, v["type"], v["architecture"], v["bits"], v["full_scale"], v["max_rate"].value,
            v.get("sampling", "simultaneous"), _value(v.get("rate")), v.get("channels"), v.get("clock"),
            _value(v.get("jitter")), v.get("link"), v.get("container_bits"), _value(v.get("modulator_rate")),
            v.get("oversampling_ratios", ()), v.get("passband"), v.get("stopband"),
            _value(v.get("stopband_rejection")), ref,
        )
        converters[cid] = conv
        prefix = f"converters.{cid}"
        for attr, table in (("clock", "clocks"), ("link", "links")):
            target = getattr(conv, attr)
            if target and target not in raw.get(table, {}):
                src.problem(f"{prefix}.{attr}", _unknown_ref(attr, target, list(raw.get(table, {}))))
        if conv.passband and conv.stopband and conv.stopband <= conv.passband:
            src.problem(f"{prefix}.stopband", f"[{prefix}] stopband ({conv.stopband:g}) must lie above "
                                              f"passband ({conv.passband:g})")
        if conv.rate is not None and conv.rate > conv.max_rate and conv.sampling == "simultaneous":
            src.problem(f"{prefix}.rate", f"[{prefix}] rate is above its max_rate")
    for lid, link in links.items():
        if link.store and link.store not in raw.get("stores", {}):
            src.problem(f"links.{lid}.store", _unknown_ref("store", link.store, list(raw.get("stores", {}))))
    problems.extend(src.problems)
    if "name" not in head:
        return None
    return System(
        name=head["name"], revision=head.get("revision", ""), description=head.get("description", ""),
        record_duration_s=_value(head.get("record_duration")), format=head.get("format", 1),
        converters=MappingProxyType(dict(sorted(converters.items()))),
        clocks=MappingProxyType(dict(sorted(clocks.items()))),
        links=MappingProxyType(dict(sorted(links.items()))),
        stores=MappingProxyType(dict(sorted(stores.items()))),
        groups=MappingProxyType(dict(sorted(groups.items()))),
        source=SourceRef(SYSTEM_FILE, 1),
    )


def _unknown_ref(noun: str, target: str, known: list[str]) -> str:
    hint = _suggest(target, known) if known else f"; system.toml defines no {noun}s"
    return f"{noun} '{target}' is not defined in system.toml{hint}"


# ----------------------------------------------------------------------- channel


def _sections(src: _Source, raw: dict[str, Any], kind: str | None, unit: Unit | None) -> dict[str, Any]:
    """Validate every table of a channel header; returns {table: {key: value}} (arrays: lists)."""
    top = schema.keys_of("")
    out: dict[str, Any] = {}
    for name, value in raw.items():
        if name in schema.CHANNEL_TABLES:
            keys = schema.keys_of(name)
            if name in schema.ARRAY_TABLES:
                if not isinstance(value, list):
                    src.problem(name, f"[[{name}]] must be written as an array of tables: [[{name}]]")
                    continue
                out[name] = [_read_table(src, item, keys, f"{name}.{i}", f"[[{name}]]", unit, kind)
                             for i, item in enumerate(value)]
            else:
                if kind is not None and all(kind not in k.kinds for k in keys.values()):
                    src.problem(name, f"[{name}] does not apply to {kind} channels")
                    continue
                out[name] = _read_table(src, value, keys, name, f"[{name}]", unit, kind)
        elif name not in top:
            options = list(top) + list(schema.CHANNEL_TABLES)
            src.problem(name, f"unknown key '{name}'{_suggest(name, options)}")
    for key in schema.CHANNEL_KEYS:
        # a table that is present reports its own gaps; here only wholly missing tables
        if key.required and key.table and key.table not in schema.ARRAY_TABLES and kind in key.kinds \
                and key.table not in raw:
            src.problem(key.table, f"[{key.table}] {key.name} is required for {kind} channels "
                                   f"(e.g. {key.name} = {key.example})")
    return out


def _load_channel(path: Path, rel: str, system: System | None, problems: list[SpecError]) -> Channel | None:
    text = _read_file(path, rel, problems)
    if text is None:
        return None
    src = _Source(rel, text)
    try:
        first, header, body = split_header(text)
        raw = parse_toml(header, first)
        # located after parsing, so the key scan only sees text within the nesting limit
        src.positions = locate_keys(header, first)
    except SpecError as err:
        src.add(err)
        problems.extend(src.problems)
        return None

    top = _read_table(src, {k: v for k, v in raw.items() if k not in schema.CHANNEL_TABLES},
                      schema.keys_of(""), "", "the channel", None)
    kind: str | None = top.get("kind")
    unit: Unit | None = None
    unit_text = top.get("unit", "V")
    try:
        unit = parse_unit(unit_text, "unit")
    except SpecError as err:
        src.add(err, *src.where("unit"))
    sec = _sections(src, {k: v for k, v in raw.items() if k in schema.CHANNEL_TABLES}, kind, unit)
    if src.problems or kind is None or unit is None:
        problems.extend(src.problems)
        return None

    channel_id = path.stem
    sig_raw = sec.get("signal", {})
    sen_raw = sec.get("sensor", {})
    conv_raw = sec.get("conversion", {})
    lines = {p: lc[0] for p, lc in src.positions.items()}

    band = sig_raw.get("band")
    if band is not None and band[0] >= band[1]:
        src.problem("signal.band", f"[signal] band: the low edge ({band[0]:g} Hz) must be below the high "
                                   f"edge ({band[1]:g} Hz)")
    signal = Signal(
        band=band, peak=_value(sig_raw.get("peak")), resolution=_value(sig_raw.get("resolution")),
        snr_db=_value(sig_raw.get("snr")), flatness_db=_value(sig_raw.get("flatness")) or 0.5,
        out_of_band_dbfs=_value(sig_raw.get("out_of_band")) or 0.0,
        filtered_to_band=sig_raw.get("filtered_to_band", False),
        image_rejection_db=_value(sig_raw.get("image_rejection")), limit=_value(sig_raw.get("limit")),
        detail_cycles_per_m=_value(sig_raw.get("detail")), square_pixels=sig_raw.get("square_pixels", False),
    )
    noise = None
    if "noise" in sen_raw:
        q = sen_raw["noise"]
        noise = Noise(q.value, q.dim.endswith("/√Hz"), q.dim.split("/")[0] == "V")
    sensor = Sensor(_value(sen_raw.get("sensitivity")), noise, sen_raw.get("pixels"),
                    tuple(sen_raw["active_area"]) if "active_area" in sen_raw else None)

    conversion = _resolve_conversion(src, conv_raw, kind, system)
    filt = None
    if "filter" in sec:
        f = sec["filter"]
        if "family" not in f:
            src.problem("filter", "[filter] needs a family: " + ", ".join(schema.FAMILIES))
        else:
            family = f["family"]
            # a key that shapes no filter of this family would be silently ignored: refuse it
            for key in schema.CHANNEL_KEYS:
                if key.table == "filter" and key.families and key.name in f and family not in key.families:
                    src.problem(key.path, f"{key.name} does not shape a {family} filter (it applies to "
                                          f"{' and '.join(key.families)} filters): remove it")
            ripple = _value(f.get("ripple")) or 0.1
            stopband = _value(f.get("stopband_attenuation")) or 80.0
            if family == "elliptic" and ripple >= stopband:
                # the two values swapped is the usual slip; an elliptic prototype needs ripple < attenuation
                src.problem("filter.ripple" if "ripple" in f else "filter.stopband_attenuation",
                            f"[filter] an elliptic filter's ripple ({ripple:g} dB"
                            f"{'' if 'ripple' in f else ', the default'}) must be below its stopband_attenuation "
                            f"({stopband:g} dB{'' if 'stopband_attenuation' in f else ', the default'}); "
                            "are the two values swapped?")
            filt = Filter(family, f.get("order"), _value(f.get("corner")), ripple, stopband)
    if kind == "output" and conv_raw.get("sinc_compensation") and conv_raw.get("hold") == "none":
        src.problem("conversion.sinc_compensation", "sinc_compensation corrects the droop of a zero-order hold, "
                                                    'and this output has hold = "none": remove one of the two')
    tones = tuple(
        Tone(t["frequency"].value, t["level"].value, t["level"].dim, t.get("source", ""),
             src.where(f"interference.{i}")[0])
        for i, t in enumerate(sec.get("interference", [])) if "frequency" in t and "level" in t
    )
    waivers = tuple(Waiver(w["rule"], w["reason"], w.get("until", ""), src.where(f"waiver.{i}")[0])
                    for i, w in enumerate(sec.get("waiver", [])) if "rule" in w and "reason" in w)
    saf = sec.get("safety", {})
    st = sec.get("stated", {})
    match = top.get("match")
    if match and system is not None and match not in system.groups:
        src.problem("match", _unknown_ref("group", match, list(system.groups)))
    if not CHANNEL_ID.match(channel_id):
        src.add(SpecError(f"'{channel_id}' is not a usable channel id (the file name): use letters, "
                          "digits, '.', '_' and '-', at most 100 characters"), 1)
    problems.extend(src.problems)
    if src.problems:
        return None
    return Channel(
        id=channel_id, kind=kind, title=top["title"], source=SourceRef(rel, 1), unit=unit,
        measurand=top.get("measurand", ""), tags=top.get("tags", ()), match=match, signal=signal,
        sensor=sensor, conversion=conversion, filter=filt, interference=tones, waivers=waivers,
        safety=Safety(_value(saf.get("working_voltage")), saf.get("powered_actuator", False),
                      saf.get("note", "")),
        stated=Stated(_value(st.get("data_rate")), _value(st.get("lsb"))),
        notes=body, header=header, lines=MappingProxyType(lines),
    )


def _resolve_conversion(src: _Source, raw: dict[str, Any], kind: str, system: System | None) -> Conversion:
    """Fill in what the channel inherits from its converter (and the converter's clock)."""
    conv: Converter | None = None
    conv_id = raw.get("converter")
    if conv_id and system is not None:
        conv = system.converters.get(conv_id)
        if conv is None:
            src.problem("conversion.converter", _unknown_ref("converter", conv_id, list(system.converters)))
        elif (kind == "input" and conv.type != "adc") or (kind == "output" and conv.type != "dac"):
            want = "an adc" if kind == "input" else "a dac"
            src.problem("conversion.converter", f"{kind} channel on converter '{conv_id}', which is "
                                                f"{'a dac' if conv.type == 'dac' else 'an adc'}; expected {want}")
    link = raw.get("link")
    if link and system is not None and link not in system.links:
        src.problem("conversion.link", _unknown_ref("link", link, list(system.links)))

    def pick(name: str, inherited: Any) -> Any:
        return raw.get(name, inherited)

    rate = _value(raw.get("rate"))
    if rate is None and conv is not None:
        rate = conv.rate
    jitter = _value(raw.get("jitter"))
    aperture = conv.jitter if conv is not None else None
    clock = conv.clock if conv is not None else None
    clock_jitter = system.clocks[clock].jitter if clock and system is not None and clock in system.clocks else None
    bits = pick("bits", conv.bits if conv else None)
    container = pick("container_bits", conv.container_bits if conv else None)
    if container is None and bits is not None:
        container = -(-bits // 8) * 8  # whole bytes, the usual packing
    if bits is not None and container is not None and container < bits:
        src.problem("conversion.container_bits", f"[conversion] container_bits ({container}) is smaller "
                                                 f"than bits ({bits})")
    full_scale: Span | None = pick("full_scale", conv.full_scale if conv else None)
    missing = []
    if rate is None:
        missing.append("rate")
    if bits is None:
        missing.append("bits")
    if full_scale is None and kind != "image":
        missing.append("full_scale")
    if missing and (conv_id is None or conv is not None):  # a bad reference is reported once, above
        src.problem("conversion", f"no {', '.join(missing)} for this {kind} channel: set them under "
                                  "[conversion] or name a converter that has them")
    return Conversion(
        converter=conv_id, link=link or (conv.link if conv else None), rate=rate, bits=bits,
        full_scale=full_scale, gain=raw.get("gain", 1.0), jitter=jitter, container_bits=container,
        hold=raw.get("hold", "zero-order"), sinc_compensation=raw.get("sinc_compensation", False),
        stated=frozenset(raw), aperture_jitter=aperture, clock_jitter=clock_jitter,
    )


# -------------------------------------------------------------------------- tree


def channel_files(root: Path) -> list[Path]:
    """Every channel file under ``root/channels``, in a stable order.

    Everything named ``*.md`` that is not a folder, and every symbolic link to a folder: links are
    never followed, and a link, a pipe or a device is listed so that the loader refuses it by name
    (:func:`_read_bytes`) instead of skipping it unseen (:func:`generator.files.walk`: 10,000 files
    are listed without a ``stat`` each).
    """
    found = [(parts, entry.path) for parts, entry in walk(root / CHANNEL_DIR)
             if entry.name.endswith(".md") or (entry.is_symlink() and entry.is_dir())]
    found.sort(key=lambda item: item[0])  # the order of sorted() on the paths, without Path comparisons
    return [Path(path) for _, path in found]


def load_system(root: Path | str) -> System:
    """Load only ``root/system.toml``; raise :class:`SpecErrors` listing its problems."""
    problems: list[SpecError] = []
    system = _load_system(Path(root), problems)
    if problems or system is None:
        raise SpecErrors(problems)
    return system


def load_spec(root: Path | str, on_file: Callable[[], None] | None = None,
              known: Mapping[str, Channel] | None = None, known_system: System | None = None) -> Spec:
    """Load a whole spec tree; raise :class:`SpecErrors` listing every problem found.

    ``known`` maps a channel file's path (relative to ``root``) to the channel already loaded from
    that very text under the same system.toml (the build cache); those files are not parsed again.
    ``known_system`` is the system already loaded from that very system.toml (the build cache).
    """
    root = Path(root)
    problems: list[SpecError] = []
    if not root.is_dir():
        raise SpecErrors([SpecError(f"'{root}' is not a folder of specs (expected system.toml and channels/)")])
    system = known_system if known_system is not None else _load_system(root, problems)
    if (root / CHANNEL_DIR).is_symlink():
        raise SpecErrors([*problems, SpecError(LINK_REFUSED.format(rel=CHANNEL_DIR), CHANNEL_DIR)])
    files = channel_files(root)
    if len(files) > MAX_CHANNELS:
        raise SpecErrors([SpecError(f"{len(files):,} channel files; a spec tree is limited to "
                                    f"{MAX_CHANNELS:,} channels", CHANNEL_DIR)])
    if not files:
        problems.append(SpecError(f"no channel files: add {CHANNEL_DIR}/<ID>.md (see 'specfold new')",
                                  CHANNEL_DIR))
    channels: dict[str, Channel] = {}
    seen: dict[str, str] = {}
    for path in files:
        rel = path.relative_to(root).as_posix()
        ch = known[rel] if known is not None and rel in known else _load_channel(path, rel, system, problems)
        folded = id_key(path.stem)
        if folded in seen:
            problems.append(SpecError(f"duplicate channel id '{path.stem}': {seen[folded]} has the same id "
                                      "(ids are file names and must be unique, ignoring case)", rel, 1))
        else:
            seen[folded] = rel
            if ch is not None:
                channels[ch.id] = ch
        if on_file:
            on_file()
    if problems or system is None:
        raise SpecErrors(problems)
    return Spec(str(root), system, tuple(channels[k] for k in sorted(channels, key=id_key)))
