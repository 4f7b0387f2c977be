"""The spec files as text: the one reader of the files in a spec tree.

It lists the channel files, reads each file's bytes (a regular file inside the tree, never through
a link, never past :data:`MAX_FILE_BYTES`), gives each file its key (a digest of what it holds),
splits a channel file into its TOML header and its Markdown notes, parses TOML with located errors,
and finds the line and column of every key.  It knows nothing of what the keys mean (:mod:`.values`)
or of the model built from them (:mod:`.load`).
"""

from __future__ import annotations

import errno
import hashlib
import os
import re
import stat
import sys
import tomllib
from pathlib import Path
from typing import Any

from .errors import SpecError
from .files import walk

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


LINK_REFUSED = ("{rel} is a symbolic link; specfold reads only regular files inside the spec folder and refuses "
                "every link in it, so that a spec cannot pull in a file from elsewhere: put the file itself here")
"""The link policy, said wherever a link is met (system.toml, channel files, folders below channels/)."""

_OPEN_FLAGS = os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0)
"""A spec file is opened without following a link (the check and the open are one step) and without
waiting on a named pipe, which would otherwise block the read for ever."""


def read_bytes(path: Path, rel: str) -> bytes:
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


def digest(*parts: str | bytes) -> str:
    """SHA-256 over the parts, each preceded by its length (so no two lists of parts collide), hex."""
    h = hashlib.sha256()
    for part in parts:
        data = part.encode("utf-8") if isinstance(part, str) else part
        h.update(len(data).to_bytes(8, "little"))
        h.update(data)
    return h.hexdigest()


def read_text(path: Path, rel: str, problems: list[SpecError], keys: dict[str, str] | None = None,
               under: str = "") -> str | None:
    """The text of a spec file, line endings made LF; with ``keys``, its key (a digest of ``under``,
    the path and the bytes) goes there under ``rel``."""
    try:
        data = read_bytes(path, rel)
    except SpecError as err:
        problems.append(err)
        return None
    if keys is not None:
        keys[rel] = digest(under, rel, data)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        problems.append(SpecError(f"the file is not UTF-8 text (byte 0x{data[exc.start]:02x})", rel, line))
        return None
    # Windows (CR LF) and old Mac (CR alone) line endings read as LF: TOML allows no bare CR, so a
    # CR-only file would otherwise be a single line that "does not start with +++"
    return text.removeprefix("\ufeff").replace("\r\n", "\n").replace("\r", "\n")


def channel_files(root: Path) -> list[Path]:
    """Every channel file under ``root/channels``, in a stable order.

    Everything named ``*.md`` that is not a folder, and every symbolic link to a folder: links are
    never followed, and a link, a pipe or a device is listed so that the loader refuses it by name
    (:func:`read_bytes`) instead of skipping it unseen (:func:`generator.files.walk`: 10,000 files
    are listed without a ``stat`` each).
    """
    found = [(parts, entry.path) for parts, entry in walk(root / CHANNEL_DIR)
             if entry.name.endswith(".md") or (entry.is_symlink() and entry.is_dir())]
    found.sort(key=lambda item: item[0])  # the order of sorted() on the paths, without Path comparisons
    return [Path(path) for _, path in found]


def tree_keys(root: Path) -> dict[str, str] | None:
    """The key of every file of the tree at ``root``, as :func:`generator.load.load_spec` gives them
    (:attr:`generator.model.Spec.keys`), read and hashed but not parsed; None when a file cannot be
    read as a spec file (loading says why)."""
    keys: dict[str, str] = {}
    try:
        system = read_bytes(root / SYSTEM_FILE, SYSTEM_FILE)
        keys[SYSTEM_FILE] = digest("", SYSTEM_FILE, system)
        for path in channel_files(root):
            rel = path.relative_to(root).as_posix()
            keys[rel] = digest(keys[SYSTEM_FILE], rel, read_bytes(path, rel))
    except (SpecError, OSError, ValueError):
        return None
    return keys

