"""File primitives: no policy, no pages.

``write`` never lands outside the folder it is given; ``carry`` hard-links a regular file (never a
symbolic link) and falls back to a copy; ``read_whole`` reads a file without buffered-IO objects;
``walk`` lists a tree with one ``scandir`` per folder, never following a link; ``write_files`` is
the one writer of spec files (``propose --write``, ``import --write``, ``new``): a temporary file
in the same folder, flushed and synced, renamed over the original.  The policy of the site folder
(which folders may be replaced, the swap, leftovers of killed builds) is in site.py.

``halt_point`` is a fault-injection hook for the tests: with ``SPECFOLD_HALT_AT=WRITER:STEP`` in the
environment, the process ends (``os._exit``) when that writer reaches that step, so a test can stop
a writer at every step in turn instead of killing it at a moment chosen by a clock.
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import secrets
import shutil
import stat
from collections.abc import Iterator, Sequence
from pathlib import Path

from .errors import SpecError, os_reason

HALT_ENV = "SPECFOLD_HALT_AT"
HALT_EXIT = 86
"""Exit status of a process ended by :func:`halt_point` (none of the command's own codes)."""
_steps: dict[str, int] = {}


def halt_point(writer: str) -> None:
    """One step of ``writer`` (``propose``, ``import``, ``new``, ``site``); ends the process here
    when ``SPECFOLD_HALT_AT`` names this writer and this step (counted from 1 in each process)."""
    wanted = os.environ.get(HALT_ENV)
    if not wanted:
        return
    _steps[writer] = _steps.get(writer, 0) + 1
    if wanted == f"{writer}:{_steps[writer]}":
        os._exit(HALT_EXIT)


def inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def regular_file(path: Path) -> bool:
    """A plain file, not a symbolic link to one: links in an old site are never followed."""
    return path.is_file() and not path.is_symlink()


def write(root: Path, rel: str, data: str | bytes) -> None:
    target = (root / rel).resolve()
    if not inside(target, root) or target == root:
        raise SpecError(f"refusing to write {rel!r}: it would land outside the site folder")
    # folders are made below ``root`` only: a writer whose build folder was removed (a killed build
    # cleared by the next one) fails instead of making it again
    base, folder, missing = root.resolve(), target.parent, []
    while folder != base and not folder.is_dir():
        missing.append(folder)
        folder = folder.parent
    for made in reversed(missing):
        made.mkdir(exist_ok=True)
    if isinstance(data, str):
        target.write_text(data, encoding="utf-8", newline="\n")
    else:
        target.write_bytes(data)


def walk(root: str | Path, strict: bool = False) -> Iterator[tuple[tuple[str, ...], os.DirEntry[str]]]:
    """Every entry below ``root`` except the real folders, with its path below ``root`` as parts,
    in no set order.  One ``scandir`` per folder, whose entries already know their type (no
    ``stat`` per file); real folders are descended into, and a symbolic link, to a file or a
    folder, is yielded and never followed.  A folder that cannot be read is skipped, or with
    ``strict`` raises its OSError."""
    stack: list[tuple[str, tuple[str, ...]]] = [(os.fspath(root), ())]
    while stack:
        folder, parts = stack.pop()
        try:
            with os.scandir(folder) as listing:
                entries = list(listing)
        except OSError:
            if strict:
                raise
            continue
        for entry in entries:
            here = (*parts, entry.name)
            if entry.is_dir(follow_symlinks=False):
                stack.append((entry.path, here))
            else:
                yield here, entry


def read_whole(path: str | Path) -> bytes:
    """A whole file, read without buffered-IO objects (10,000 of them cost a tenth of a second);
    a symbolic link is not followed (OSError), as the loader refuses links in a spec tree, and a
    named pipe is read without waiting for a writer (the loader refuses it too)."""
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_BINARY", 0) | getattr(os, "O_NOFOLLOW", 0)
                 | getattr(os, "O_NONBLOCK", 0))
    try:
        chunks = []
        while chunk := os.read(fd, 1 << 20):
            chunks.append(chunk)
        return b"".join(chunks)
    finally:
        os.close(fd)


def carry(source: str | Path, target: str | Path) -> bool:
    """Hard-link (or else copy) a regular file of the current site into the new one; False when
    ``source`` is not a regular file (a link is never carried) or neither works."""
    try:
        if not stat.S_ISREG(os.lstat(source).st_mode):
            return False
    except OSError:
        return False
    for attempt in (1, 2):
        try:
            os.link(source, target, follow_symlinks=False)
            return True
        except FileNotFoundError:
            if attempt == 2:
                break
            Path(target).parent.mkdir(parents=True, exist_ok=True)  # the first file into its folder
        except OSError:  # another file system, or no hard links there
            break
    try:
        shutil.copyfile(source, target, follow_symlinks=False)
    except OSError:
        return False
    return True


# ---------------------------------------------------------------------------------------------
# Spec files
# ---------------------------------------------------------------------------------------------

PART_SUFFIX = ".specfold-part"
_PART = re.compile(r"^\..+\.(\d+)-[0-9a-f]{8}" + re.escape(PART_SUFFIX) + r"$")
_LEGACY_PART = re.compile(r"^\..+\.md\.importing$")
"""The fixed temporary name of earlier imports, left behind when one was killed."""


def _part_name(target: Path) -> Path:
    """A temporary sibling of ``target`` naming this process; it fits the 255-byte name limit."""
    stem = target.name
    while len(f".{stem}.".encode()) > 200:
        stem = stem[: len(stem) // 2]
    return target.with_name(f".{stem}.{os.getpid()}-{secrets.token_hex(4)}{PART_SUFFIX}")


def alive(pid: int) -> bool:
    """Whether process ``pid`` may still be running (one of another user's counts as running)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True  # someone else's process: leave its file alone
    return True


def clean_parts(folder: Path) -> list[Path]:
    """Remove the temporary files a killed writer left in ``folder`` (its process gone), and only
    those; returns what was removed."""
    removed: list[Path] = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        m = _PART.match(entry.name)
        ours = (m is not None and not alive(int(m.group(1)))) or _LEGACY_PART.match(entry.name) is not None
        if ours and (entry.is_file(follow_symlinks=False) or entry.is_symlink()):
            with contextlib.suppress(OSError):
                os.unlink(entry.path)
                removed.append(Path(entry.path))
    return removed


def _write_bytes(fd: int, data: bytes) -> None:
    """All of ``data`` to ``fd`` (a full disk raises OSError ENOSPC here; the tests patch it)."""
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]


def _sync_folder(folder: Path) -> None:
    """Make the renames in ``folder`` durable (POSIX: fsync on the folder); best effort elsewhere."""
    with contextlib.suppress(OSError, AttributeError):
        fd = os.open(folder, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _stage(target: Path, text: str, writer: str) -> Path:
    """``text`` in a synced temporary sibling of ``target`` (with ``target``'s permissions if it
    exists); removed again if anything fails."""
    part = _part_name(target)
    try:
        mode: int | None = stat.S_IMODE(os.stat(target).st_mode)
    except OSError:
        mode = None
    fd = os.open(part, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
                 | getattr(os, "O_BINARY", 0), 0o666)
    try:
        halt_point(writer)  # the temporary file exists, empty
        if mode is not None:
            os.fchmod(fd, mode)  # a replaced file keeps its permissions
        data = text.encode("utf-8")
        _write_bytes(fd, data[: len(data) // 2])
        halt_point(writer)  # half written
        _write_bytes(fd, data[len(data) // 2:])
        os.fsync(fd)
        halt_point(writer)  # written and synced, not yet in place
    except BaseException:
        os.close(fd)
        with contextlib.suppress(OSError):
            os.unlink(part)
        raise
    os.close(fd)
    return part


def _place_new(part: Path, target: Path) -> None:
    """Move ``part`` to ``target``, which must not exist: a hard link fails if it appeared since it
    was checked; where the file system has no hard links, a rename after one more look."""
    try:
        os.link(part, target)
    except OSError as exc:
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV) or target.exists():
            raise
        os.replace(part, target)
        return
    os.unlink(part)


def write_files(changes: Sequence[tuple[Path, str, bool]], writer: str) -> None:
    """Write each ``(path, text, may_replace)`` so that every path holds its old content or its new
    one, whatever happens (a kill, a full disk).

    Each text goes to a temporary file in its target's folder (:func:`_part_name`), written, flushed
    and synced; only when all are written are they renamed over their targets (a file that may not
    be replaced is linked into place, which fails if it appeared meanwhile), and the folders synced.
    A failure before the renames removes every temporary file and leaves every target as it was; it
    is raised as one :class:`SpecError` naming the file.  Temporary files that killed writers left in
    those folders are removed first (:func:`clean_parts`).
    """
    for folder in dict.fromkeys(path.parent for path, _, _ in changes):
        clean_parts(folder)
    staged: list[tuple[Path, Path, bool]] = []
    placed = 0
    target = Path()
    try:
        for target, text, may_replace in changes:
            staged.append((_stage(target, text, writer), target, may_replace))
        for part, target, may_replace in staged:
            if may_replace:
                os.replace(part, target)
            else:
                _place_new(part, target)
            placed += 1
            halt_point(writer)  # in place
    except OSError as exc:
        done = "no file was changed" if placed == 0 else f"{placed} of {len(changes)} files were written before it"
        raise SpecError(f"cannot write the file: {os_reason(exc)}; {done}", str(target)) from None
    finally:
        for part, _, _ in staged[placed:]:
            with contextlib.suppress(OSError):
                os.unlink(part)
    for folder in dict.fromkeys(path.parent for path, _, _ in changes):
        _sync_folder(folder)
