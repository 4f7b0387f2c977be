"""File primitives: no policy, no pages.

``write`` never lands outside the folder it is given; ``carry`` hard-links a regular file (never a
symbolic link) and falls back to a copy; ``read_whole`` reads a file without buffered-IO objects;
``walk`` lists a tree with one ``scandir`` per folder, never following a link.  The policy (which
folders may be replaced, the swap, leftovers of killed builds) is in site.py.
"""

from __future__ import annotations

import os
import shutil
import stat
from collections.abc import Iterator
from pathlib import Path

from .errors import SpecError


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
