"""Channel files from a CSV table (``specfold import``).

One row per channel, one column per key.  A header names its key in any of the spellings of
:data:`SPELLINGS` (or the key's own name, or its dotted path such as ``conversion.rate``), in any
case, with spaces, dots, dashes or underscores between the words, and optionally a unit in
brackets: ``Rate (Hz)``, ``sample rate [kS/s]``.  A bare number in a column whose header names a
unit gets that unit (``51200`` under ``Rate (Hz)`` is written ``"51200 Hz"``); a cell that has its
own unit keeps it.  Decibel keys (``snr``, ``flatness``...) take a bare number as dB even without
a header unit.  A mapping file (TOML, ``"header text" = "key path"``; ``""`` ignores the column)
overrides all of this.  Columns named ``status`` or starting ``figure.`` are what ``export`` adds,
and are ignored.

Every cell is checked as the loader would check it, then each generated file is loaded against
the tree's ``system.toml``; every problem is reported with the CSV line and the column's header.
"""

from __future__ import annotations

import csv
import difflib
import io
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import schema
from .errors import SpecError, SpecErrors
from .files import clean_parts, write_files
from .quantities import Unit, parse_quantity, parse_unit
from .scaffold import check_id, check_texts, existing_channel, render_channel
from .schema import Key
from .source import CHANNEL_DIR, parse_toml
from .table import (
    ALIASES,
    ARRAY_WORDS,
    BITS_UNITS,
    CHOICE_WORDS,
    FIGURE_PREFIX,
    IGNORED,
    PAIR_PARTS,
    Field,
    field_for_path,
    normalised_header,
    split_header,
    unguard_cell,
)
from .values import convert


@dataclass(frozen=True)
class Column:
    index: int
    header: str
    field: Field | None  # None: ignored
    unit: str | None


def read_mapping(path: Path) -> dict[str, str]:
    """A mapping file: TOML pairs ``"header" = "key path"`` (top level or under ``[columns]``)."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"cannot read the mapping file: {exc}", str(path)) from None
    try:
        raw = parse_toml(text)
    except SpecError as err:
        raise err.located(str(path)) from None
    raw = raw.get("columns", raw) if isinstance(raw.get("columns"), dict) else raw
    out: dict[str, str] = {}
    problems = []
    for header, target in raw.items():
        if not isinstance(target, str) or (target and field_for_path(target) is None and target not in PAIR_PARTS):
            problems.append(SpecError(f'"{header}" maps to {target!r}, which is no column; use a key path '
                                      'such as "conversion.rate", "signal.band.low", "interference.1.level", '
                                      '"id", "notes", or "" to ignore the column', str(path)))
            continue
        out[header.strip()] = target
    if problems:
        raise SpecErrors(problems)
    return out


def _array_field(norm: str) -> Field | None:
    m = re.match(r"^(interference|tone|waiver)_(?:(\d+)_)?([a-z_]+)$", norm)
    if not m:
        return None
    table = ARRAY_WORDS[m.group(1)]
    number = int(m.group(2) or 1)
    if number < 1 or number > 100:
        return None
    return field_for_path(f"{table}.{number}.{m.group(3)}")


def resolve_header(header: str, mapping: Mapping[str, str]) -> tuple[Field | None, str | None]:
    """The field a header names and the unit it gives; ``(None, None)`` for an ignored column.

    Raises :class:`SpecError` (without a location) for a header it cannot place.
    """
    name, unit = split_header(header)
    lowered = {normalised_header(h): t for h, t in mapping.items()}
    target = mapping.get(header.strip())
    if target is None:
        target = lowered.get(normalised_header(header), lowered.get(normalised_header(name)))
    if target is not None:
        if target == "":
            return None, None
        return _path_field(target), unit
    norm = normalised_header(name)
    if not norm or norm in IGNORED or header.strip().lower().startswith(FIGURE_PREFIX):
        return None, None
    if norm == "resolution" and unit and unit.lower() in BITS_UNITS:
        return field_for_path("conversion.bits"), None
    path = ALIASES.get(norm)
    if path is not None:
        return _path_field(path), unit
    field = _array_field(norm)
    if field is not None:
        return field, unit
    close = difflib.get_close_matches(norm, list(ALIASES), n=1, cutoff=0.75)
    hint = f"; did you mean '{ALIASES[close[0]]}'?" if close else ""
    raise SpecError(f'no key is called "{name}"{hint} (the README lists the accepted header spellings; '
                    'a mapping file can name any column, or ignore it with "")')


def _path_field(path: str) -> Field:
    if path in PAIR_PARTS:
        table, name = path.split(".")
        return Field(path, schema.keys_of(table)[name])
    field = field_for_path(path)
    assert field is not None, path
    return field


# --------------------------------------------------------------------------- cells

_NUMBER = re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$")
_ENDS_IN_NUMBER = re.compile(r"[0-9.]$")
_PAIR_SPLIT = re.compile(r"\s*(?:\.\.|…|;|\bto\b)\s*")
_INT_PAIR_SPLIT = re.compile(r"\s*(?:[x×*,;])\s*")


def _with_unit(text: str, key: Key, unit: str | None, eng: str | None = None) -> str:
    if unit and _ENDS_IN_NUMBER.search(text):
        return f"{text} {unit}"
    if unit is None and eng and _NUMBER.match(text) and key.dims == (schema.ENG,):
        return f"{text} {eng}"  # a bare peak or resolution is in the channel's own unit
    if unit is None and _NUMBER.match(text) and len(key.dims) == 1 and key.dims[0] in ("dB", "dBFS"):
        return f"{text} {key.dims[0]}"
    return text


def _int(text: str) -> int:
    cleaned = re.sub(r"\s*bits?$", "", text.strip(), flags=re.IGNORECASE)
    if not _NUMBER.match(cleaned):
        raise SpecError(f'expected a whole number, found "{text}"')
    number = float(cleaned)
    if not number.is_integer() or abs(number) > 2**53:
        raise SpecError(f'expected a whole number, found "{text}"')
    return int(number)


def cell_value(key: Key, text: str, unit: str | None, eng: str | None = None) -> Any:
    """One non-empty cell as the TOML value it becomes (still to be checked by the loader's rules)."""
    kind = key.kind
    if kind in (schema.TEXT, schema.REF):
        return text
    if kind == schema.TEXT_LIST:
        sep = ";" if ";" in text else ","
        return [t.strip() for t in text.split(sep) if t.strip()]
    if kind == schema.BOOL:
        word = text.lower()
        if word in ("true", "yes", "y", "1", "x", "on"):
            return True
        if word in ("false", "no", "n", "0", "-", "off"):
            return False
        raise SpecError(f'expected true or false (yes/no), found "{text}"')
    if kind == schema.CHOICE:
        squeezed = re.sub(r"[^a-z0-9]", "", text.lower())
        squeezed = CHOICE_WORDS.get(squeezed, squeezed)
        for choice in key.choices:
            if re.sub(r"[^a-z0-9]", "", choice) == squeezed:
                return choice
        return text  # the loader's message names the choices
    if kind == schema.INT:
        return _int(text)
    if kind == schema.INT_PAIR:
        halves = _INT_PAIR_SPLIT.split(text)
        if len(halves) != 2:
            raise SpecError(f'expected two whole numbers such as "2048 x 1536", found "{text}"')
        return [_int(h) for h in halves]
    if kind == schema.GAIN:
        if _NUMBER.match(text) and (unit or "").lower() == "db":
            return f"{text} dB"
        if _NUMBER.match(text):
            number = float(text)
            return int(number) if re.fullmatch(r"[+-]?\d+", text) else number
        return text
    if kind == schema.PAIR:
        halves = _PAIR_SPLIT.split(text)
        if len(halves) != 2:
            raise SpecError(f'expected two values such as "2 Hz .. 20 kHz", found "{text}"')
        return [_with_unit(h, key, unit) for h in halves]
    return _with_unit(text, key, unit, eng)  # QUANTITY, SPAN


def _half(key: Key, text: str, unit: str | None) -> Any:
    return _int(text) if key.kind == schema.INT_PAIR else _with_unit(text, key, unit)


# --------------------------------------------------------------------------- import


@dataclass(frozen=True)
class Planned:
    """One channel file an import would write."""

    channel_id: str
    rel: str  # path inside the specs folder
    text: str
    row: int  # CSV line of the row
    state: str  # "new", "replace" (exists, differs), "unchanged" (exists, identical)


def read_csv(path: Path) -> tuple[list[str], list[tuple[int, list[str]]]]:
    """Header and rows (with the CSV line each row starts on); comma, semicolon or tab separated."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"cannot read the table: {exc}", str(path)) from None
    first = text.split("\n", 1)[0]
    delimiter = max((",", ";", "\t"), key=first.count)
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    try:
        header = [unguard_cell(cell) for cell in next(reader)]
    except StopIteration:
        raise SpecError("the table is empty; its first row names the columns", str(path), 1) from None
    rows: list[tuple[int, list[str]]] = []
    try:
        while True:
            start = reader.line_num + 1
            try:
                row = next(reader)
            except StopIteration:
                break
            if any(cell.strip() for cell in row):
                rows.append((start, [unguard_cell(cell) for cell in row]))
    except csv.Error as exc:
        raise SpecError(f"not a readable CSV table: {exc}", str(path), reader.line_num) from None
    return header, rows


def _columns(header: list[str], mapping: Mapping[str, str], file: str, problems: list[SpecError]) -> list[Column]:
    cols: list[Column] = []
    seen: dict[str, str] = {}
    for i, h in enumerate(header):
        try:
            field, unit = resolve_header(h, mapping)
        except SpecError as err:
            problems.append(SpecError(f'column "{h}": {err.message}', file, 1, i + 1))
            continue
        if field is not None and field.path in seen:
            problems.append(SpecError(f'column "{h}" names the same key ({field.path}) as column '
                                      f'"{seen[field.path]}"', file, 1, i + 1))
            continue
        if field is not None and unit and field.key is not None and field.key.dims and \
                not any(d.startswith("<") or "<" in d for d in field.key.dims):
            try:
                parse_quantity(f"1 {unit}", field.key.dims, "")
            except SpecError as err:
                problems.append(SpecError(f'column "{h}": the unit in the header does not fit: {err.message}',
                                          file, 1, i + 1))
                continue
        if field is not None:
            seen[field.path] = h
        cols.append(Column(i, h, field, unit))
    if not any(c.field is not None and c.field.path == "id" for c in cols) and not problems:
        problems.append(SpecError('no column for the channel id: name one "id" (or "channel")', file, 1))
    return cols


def _row_doc(row: list[str], cols: list[Column], file: str, line: int,
             problems: list[SpecError]) -> tuple[str, dict[str, Any], str, dict[str, Column]]:
    """One row -> (id, channel document, notes, {key path: column}); cell problems appended."""
    cells = {c.field.path: (c, row[c.index].strip() if c.index < len(row) else "")
             for c in cols if c.field is not None}
    where: dict[str, Column] = {}

    def bad(col: Column, err: SpecError) -> None:
        problems.append(SpecError(f'column "{col.header}": {err.message}', file, line, col.index + 1))

    channel_id = ""
    if "id" in cells:
        col, channel_id = cells["id"]
        if not channel_id:
            bad(col, SpecError("the channel id is empty"))
        else:
            try:
                check_id(channel_id)
            except SpecError as err:
                bad(col, err)
    unit: Unit | None = parse_unit("V")
    if cells.get("unit", (None, ""))[1]:
        col, text = cells["unit"]
        try:
            unit = parse_unit(text, "unit")
        except SpecError as err:
            bad(col, err)
            unit = None
    doc: dict[str, Any] = {}
    halves: dict[str, dict[int, tuple[Column, Any]]] = {}
    for col, text in cells.values():
        field = col.field
        if not text or field is None or field.key is None:
            continue
        key = field.key
        try:
            value = (_half(key, text, col.unit) if field.part is not None
                     else cell_value(key, text, col.unit, unit.symbol if unit else None))
        except SpecError as err:
            bad(col, err)
            continue
        if field.part is not None:
            halves.setdefault(key.path, {})[field.part] = (col, value)
            continue
        if not _check_cell(key, value, unit, col, bad):
            continue
        _put(doc, key, field.index, value)
        where[_located(key, field.index)] = col
    for kpath, got in halves.items():
        pair_key = _path_field(kpath).key
        assert pair_key is not None
        first = got[min(got)][0]
        if len(got) != 2:
            names = PAIR_PARTS[kpath]
            missing = names[1 - next(iter(got))]
            bad(first, SpecError(f"{kpath} needs both {names[0]} and {names[1]}; the {missing} cell is empty"))
            continue
        value = [got[0][1], got[1][1]]
        if _check_cell(pair_key, value, unit, first, bad):
            _put(doc, pair_key, 0, value)
            where[_located(pair_key, 0)] = first
    notes = cells.get("notes", (None, ""))[1]
    return channel_id, doc, notes, where


def _check_cell(key: Key, value: Any, unit: Unit | None, col: Column, bad: Any) -> bool:
    if unit is None and any("<" in d for d in key.dims):
        return True  # the unit cell is already reported; its values cannot be judged
    try:
        convert(key, value, unit, f"[{key.table}] {key.name}" if key.table else key.name)
    except SpecError as err:
        bad(col, err)
        return False
    return True


def _put(doc: dict[str, Any], key: Key, index: int, value: Any) -> None:
    if not key.table:
        doc[key.name] = value
    elif key.table in schema.ARRAY_TABLES:
        items = doc.setdefault(key.table, [])
        while len(items) <= index:
            items.append({})
        items[index][key.name] = value
    else:
        doc.setdefault(key.table, {})[key.name] = value


def _located(key: Key, index: int) -> str:
    if key.table in schema.ARRAY_TABLES:
        return f"{key.table}.{index}.{key.name}"
    return key.path


def plan_import(specs: Path | str, table: Path | str, mapping: Mapping[str, str] | None = None) -> list[Planned]:
    """The channel files a CSV table becomes, each checked by the loader; writes nothing.

    Raises :class:`SpecErrors` listing every problem (file = the table, line = its CSV line,
    column = the column's position, the message naming the header).
    """
    root, path = Path(specs), Path(table)
    file = str(table)
    problems: list[SpecError] = []
    header, rows = read_csv(path)
    cols = _columns(header, mapping or {}, file, problems)
    if problems:
        raise SpecErrors(problems)
    texts: dict[str, str] = {}
    meta: dict[str, tuple[str, int, dict[int, str], dict[str, Column]]] = {}
    seen: dict[str, int] = {}
    id_col = next(c for c in cols if c.field is not None and c.field.path == "id")
    for line, row in rows:
        channel_id, doc, notes, where = _row_doc(row, cols, file, line, problems)
        if not channel_id:
            continue
        folded = channel_id.lower()
        if folded in seen:
            problems.append(SpecError(f'column "{id_col.header}": channel id "{channel_id}" is also on line '
                                      f"{seen[folded]} (ids are file names and must be unique, ignoring case)",
                                      file, line, id_col.index + 1))
            continue
        seen[folded] = line
        # empty tables vanish, and arrays keep only items that have a value
        for name in schema.ARRAY_TABLES:
            if name in doc:
                doc[name] = [item for item in doc[name] if item]
        text, lines = render_channel(doc, notes)
        taken = existing_channel(root, channel_id)
        rel = taken.relative_to(root).as_posix() if taken else f"{CHANNEL_DIR}/{channel_id}.md"
        texts[rel] = text
        meta[rel] = (channel_id, line, lines, where)
    # every row goes through the loader, even when other rows (or other cells of the row) are bad,
    # so one run reports every problem; a bad cell was left out, and what follows from that is not
    # reported twice
    bad_rows = {p.line for p in problems}
    for err in check_texts(root, texts):
        if err.file not in meta:  # system.toml itself: report as the loader said it
            problems.append(err)
            continue
        channel_id, line, lines, where = meta[err.file]
        col = where.get(lines.get(err.line or 0, ""))
        if col is not None:
            problems.append(SpecError(f'column "{col.header}": {err.message}', file, line, col.index + 1))
        elif line not in bad_rows:
            problems.append(SpecError(f"channel {channel_id}: {err.message}", file, line))
    if problems:
        raise SpecErrors(problems)
    planned = []
    for rel, text in texts.items():
        channel_id, line, _, _ = meta[rel]
        target = root / rel
        state = "new"
        if target.exists():
            state = "unchanged" if target.read_text(encoding="utf-8") == text else "replace"
        planned.append(Planned(channel_id, rel, text, line, state))
    return planned


def write_planned(specs: Path | str, planned: Iterable[Planned], force: bool = False) -> list[Planned]:
    """Write the planned files (each atomically); returns those written.

    Raises :class:`SpecErrors` without writing anything when a file would be replaced and
    ``force`` is false.
    """
    root = Path(specs)
    items = list(planned)
    refused = [p for p in items if p.state == "replace" and not force]
    if refused:
        raise SpecErrors(SpecError(f"{p.rel} exists and differs from row {p.row}; --force replaces it",
                                   p.rel) for p in refused)
    written = [p for p in items if p.state != "unchanged"]
    clean_parts(root / CHANNEL_DIR)  # what a killed import left, even when nothing is left to write
    for p in written:
        (root / p.rel).parent.mkdir(parents=True, exist_ok=True)
    # all or nothing: every file is staged (written and synced) before the first is put in place,
    # and a file planned as new is never put over one that appeared since
    write_files([(root / p.rel, p.text, p.state == "replace") for p in written], "import")
    return written


