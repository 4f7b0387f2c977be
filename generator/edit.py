"""Edits of a channel file's text: set, insert or remove single values in its TOML header, keeping
every other byte (comments, order, notes).  ``propose --write`` writes what these return."""

from __future__ import annotations

import re
from collections.abc import Sequence

from .propose import Proposal
from .source import locate_keys, split_header

_FILTER_KEY_ORDER = ("family", "order", "corner", "ripple", "stopband_attenuation")
_VALUE = re.compile(r'^(\s*[A-Za-z0-9_\-"\'.]+\s*=\s*)("(?:[^"\\]|\\.)*"|\'[^\']*\'|[^\s#]+)(.*)$')


def edit_header(text: str, edits: Sequence[tuple[str, str | None]]) -> str:
    """The channel file ``text`` with each (key path, TOML value) of ``edits`` set in place.

    An existing key keeps its line, indentation and trailing comment, with only its value
    replaced; a missing key is inserted after the last key of its table; a missing table is
    added at the end of the header; a value of None removes the key's line.  Every other byte is
    kept.  Raises SpecError (from :func:`generator.load.split_header`) when the file has no header.
    """
    first, header, _ = split_header(text)
    lines = text.split("\n")
    places = locate_keys(header, first)
    header_last = first - 1 + len(header.split("\n"))  # 1-based line of the header's last line
    inserts: dict[int, list[str]] = {}  # after 1-based line -> new lines
    new_tables: dict[str, list[str]] = {}
    removed: set[int] = set()
    for path, value in edits:
        table, key = path.rsplit(".", 1)
        if value is None:
            if path in places:
                removed.add(places[path][0] - 1)
            continue
        if path in places:
            i = places[path][0] - 1
            m = _VALUE.match(lines[i])
            if m is None:
                raise ValueError(f"cannot edit line {i + 1}: {lines[i]!r}")
            lines[i] = m.group(1) + value + m.group(3)
        elif table in places:
            last = max(ln for p, (ln, _c) in places.items() if p == table or p.startswith(table + "."))
            inserts.setdefault(last, []).append(f"{key} = {value}")
        else:
            new_tables.setdefault(table, []).append(f"{key} = {value}")
    for table, body in new_tables.items():
        inserts.setdefault(header_last, []).extend(["", f"[{table}]", *body])
    out: list[str] = []
    for i, line in enumerate(lines):
        if i not in removed:
            out.append(line)
        out.extend(inserts.get(i + 1, ()))
    return "\n".join(out)


def file_edits(proposal: Proposal) -> tuple[tuple[str, str | None], ...]:
    """The proposal's edits, filter keys in their usual order."""
    def rank(item: tuple[str, str | None]) -> tuple[int, int]:
        table, key = item[0].rsplit(".", 1)
        return (0 if table == "conversion" else 1,
                _FILTER_KEY_ORDER.index(key) if key in _FILTER_KEY_ORDER else 99)
    return tuple(sorted(proposal.edits, key=rank))
