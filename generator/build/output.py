"""The output folder: which folders a build may replace, its lock, the swap, leftovers of killed builds.

The site is written into a sibling temporary folder; only when every file is written is the old
folder renamed aside, the new one renamed in, and the old one deleted.  Any failure before the swap
deletes the temporary folder and leaves the previous site as it was.  The builder refuses a folder
that is not empty unless it holds the marker (a folder holding only a ``.gitignore`` counts as
empty, and that ``.gitignore`` is carried into the new site), refuses the specs folder and any
folder that contains it, a repository or project root, the home folder and the file-system root,
and never deletes anything else.  Symbolic links in an old site are removed as links and never
followed (a linked marker or ``.gitignore`` does not count).

A build killed outright cannot clean up: its temporary folder carries ``.specfold-building`` with the
builder's process id, and the next build removes such folders once that process is gone; an
``.old-`` folder (the old site is deleted marker last) is removed too, or put back when the kill fell
between the two renames of the swap.  Two builds into one output are serialised by
:func:`output_lock`.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager, suppress
from pathlib import Path

from ..errors import SpecError, os_error_text
from ..files import alive, halt_point, inside, regular_file

MARKER = ".specfold-site"
MARKER_TEXT = "This folder is a site built by specfold; the next build replaces all of it.\n"
BUILDING_MARKER = ".specfold-building"
"""Written first into a temporary build folder, holding the builder's process id: a folder left by a
killed build carries it, so a later build may remove that folder and nothing else."""
KEPT = (".gitignore",)
"""Files carried from the old output folder into the new one (and allowed in an unmarked one)."""


def check_output(output: Path, specs: Path) -> None:
    """Refuse an output folder the builder must not replace (a SpecError saying why)."""
    out = output.resolve()
    spec_root = specs.resolve()
    if out == Path(out.anchor):
        raise SpecError(f"refusing to build into {output}: it is the root of the file system; "
                        "choose a folder of its own, e.g. -o output")
    if out == Path.home().resolve():
        raise SpecError(f"refusing to build into {output}: it is your home folder; "
                        "choose a folder of its own, e.g. -o output")
    if inside(spec_root, out):
        raise SpecError(f"refusing to build into {output}: it is (or contains) the specs folder {specs}; "
                        "choose another output folder, e.g. -o output")
    if (out / ".git").exists() or (out / "pyproject.toml").exists():
        raise SpecError(f"refusing to build into {output}: it is the root of a repository or project "
                        "(it holds .git or pyproject.toml); choose a folder inside it, e.g. -o output")
    if output.is_symlink():
        raise SpecError(f"refusing to build into {output}: it is a symbolic link; name the real folder")
    if out.exists() and not out.is_dir():
        raise SpecError(f"refusing to build into {output}: it is a file, not a folder")
    if out.is_dir() and not regular_file(out / MARKER):
        foreign = sorted(p.name for p in out.iterdir() if p.name not in KEPT)
        if foreign:
            shown = ", ".join(foreign[:3]) + (" ..." if len(foreign) > 3 else "")
            raise SpecError(f"refusing to build into {output}: it holds files specfold did not make ({shown}) "
                            f"and no {MARKER} marker; empty it or choose another folder")
    if not out.parent.is_dir():
        raise SpecError(f"cannot build into {output}: its parent folder {out.parent} does not exist")


def _remove_tree(folder: Path) -> None:
    """Delete a folder this tool made, its site marker last, so a half-deleted one is still
    recognised (and removed) by the next build.

    ``shutil.rmtree`` removes symbolic links inside as links and never descends through them.
    """
    for entry in sorted(folder.iterdir()):
        if entry.name == MARKER:
            continue
        if entry.is_dir() and not entry.is_symlink():
            shutil.rmtree(entry)
        else:
            entry.unlink()
    halt_point("site")  # the old site emptied but for its marker
    (folder / MARKER).unlink(missing_ok=True)
    folder.rmdir()


def sibling_prefix(out: Path) -> str:
    """``.NAME.``: how the temporary siblings of the output folder ``out`` begin.

    A name near the file system's 255-byte limit leaves no room for ``.NAME.building-XXXXXXXX``; it
    is then shortened to its first 100 bytes and a digest of the whole name, still unique to it.
    """
    name = out.name
    if len(name.encode("utf-8")) <= 200:
        return f".{name}."
    head = name.encode("utf-8")[:100].decode("utf-8", "ignore")
    return f".{head}~{hashlib.sha256(name.encode('utf-8')).hexdigest()[:16]}."


def clean_leftovers(out: Path) -> None:
    """Remove temporary siblings of ``out`` that a killed build left behind, and only those.

    A ``.NAME.building-*`` folder counts when it is empty (killed before its marker was written),
    when it carries the building marker and the process named in it is gone, or when it carries the
    site marker alone (complete, killed just before its swap);
    a ``.NAME.old-*`` folder when it carries the site marker (the old site is deleted marker last),
    and it is put back when ``out`` itself is missing (killed between the two renames of a swap).
    Anything else with a similar name is left as it is.  Runs under :func:`output_lock`, so no other
    build of this output is running.
    """
    prefix = sibling_prefix(out)
    for entry in sorted(out.parent.iterdir()):
        if not entry.name.startswith(prefix) or entry.is_symlink() or not entry.is_dir():
            continue
        kind = entry.name[len(prefix):].split("-", 1)[0]
        if kind == "building" and not any(entry.iterdir()):
            entry.rmdir()  # made, and killed before its marker: empty, so nothing of anyone's is lost
        elif kind == "building" and regular_file(entry / BUILDING_MARKER):
            text = (entry / BUILDING_MARKER).read_text(encoding="utf-8", errors="replace").strip()
            if text.isdigit() and alive(int(text)):
                continue
            shutil.rmtree(entry, ignore_errors=True)
        elif kind in ("building", "old") and regular_file(entry / MARKER):
            if kind == "old" and not out.exists() and not out.is_symlink():
                os.replace(entry, out)  # killed between the two renames of a swap: the old site comes back
                continue
            shutil.rmtree(entry, ignore_errors=True)


@contextmanager
def output_lock(out: Path) -> Iterator[None]:
    """Hold the build lock of the output folder ``out`` (resolved), or refuse with a SpecError.

    The lock is an advisory ``flock`` on the folder that holds ``out``: two builds into one output
    (a ``serve`` and a ``build``, two CI jobs) are serialised, and the second says so instead of
    racing the first for the swap.  Nothing is written for it, so a killed build leaves no lock
    behind: the kernel releases it with the process.  Where ``flock`` is missing it is a no-op.
    """
    try:
        import fcntl
    except ImportError:  # not POSIX: no lock, as before
        yield
        return
    fd = os.open(out.parent, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise SpecError(f"another specfold build is writing into {out.parent} right now; run this one "
                            "again when it has finished") from None
        yield
    finally:
        os.close(fd)  # releases the lock


def swap(tmp: Path, out: Path) -> None:
    """Old site aside, new site in, old site gone; on a failed rename the old site comes back."""
    if not out.exists():
        os.replace(tmp, out)
        return
    for name in KEPT:
        if regular_file(out / name) and not (tmp / name).exists():
            shutil.copy2(out / name, tmp / name)
    aside = Path(tempfile.mkdtemp(prefix=f"{sibling_prefix(out)}old-", dir=out.parent))
    aside.rmdir()
    os.replace(out, aside)
    halt_point("site")  # the old site aside, no site at the output's name
    try:
        os.replace(tmp, out)
    except BaseException:
        os.replace(aside, out)
        raise
    halt_point("site")  # the new site in place, the old one aside
    with suppress(OSError):  # the new site is in place; the next build removes what is left (it keeps the marker)
        _remove_tree(aside)


@contextmanager
def located(output: Path) -> Iterator[None]:
    """A file-system error while building (a full disk, a read-only or immutable folder, a name too
    long) as one sentence about the output folder: every such failure comes before the swap, so
    the previous site is still there."""
    try:
        yield
    except OSError as exc:
        raise SpecError(f"cannot build into {output}: {os_error_text(exc)}; the previous site, if any, "
                        "is as it was") from None


@contextmanager
def replacing(out: Path) -> Iterator[Path]:
    """A new, empty temporary sibling of the output folder ``out`` (resolved) to write the site
    into; once the block ends, the site marker is added, the new folder swapped in and the old site
    deleted.  On any failure the temporary folder goes and the previous site stays as it was."""
    clean_leftovers(out)
    tmp = Path(tempfile.mkdtemp(prefix=f"{sibling_prefix(out)}building-", dir=out.parent))
    try:
        halt_point("site")  # the temporary folder made, still empty
        (tmp / BUILDING_MARKER).write_text(f"{os.getpid()}\n", encoding="utf-8")
        halt_point("site")  # marked as this process's
        yield tmp
        halt_point("site")  # every page written
        (tmp / MARKER).write_text(MARKER_TEXT, encoding="utf-8")
        # the published site never carries the building marker: it goes before the swap, and a
        # complete folder killed right here is known by its site marker alone (clean_leftovers)
        (tmp / BUILDING_MARKER).unlink()
        halt_point("site")
        swap(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
