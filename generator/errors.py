"""The one error type for bad input.

Every problem a user can cause with a spec file or a command-line argument is a
:class:`SpecError`: a plain sentence plus, where known, the file, line and
column it came from and the offending source line.  The loader collects many of
them and raises :class:`SpecErrors` once, so the CLI can report every problem in
every file before it exits with status 2.
"""

from __future__ import annotations

import errno
from collections.abc import Iterable
from dataclasses import dataclass


@dataclass
class SpecError(Exception):
    """Bad input, located as precisely as the loader could manage."""

    message: str
    file: str | None = None
    line: int | None = None
    column: int | None = None
    source_line: str | None = None

    def __post_init__(self) -> None:
        super().__init__(self.message)

    def __str__(self) -> str:
        return self.format()

    def located(
        self,
        file: str | None,
        line: int | None = None,
        column: int | None = None,
        source_line: str | None = None,
    ) -> SpecError:
        """Return a copy carrying a location, keeping any location already known."""
        return SpecError(
            self.message,
            self.file or file,
            self.line or line,
            self.column or column,
            self.source_line if self.source_line is not None else source_line,
        )

    def format(self) -> str:
        """``file:line:col: message`` then the source line and a caret, like a compiler."""
        where = ""
        if self.file:
            where = self.file
            if self.line:
                where += f":{self.line}"
                if self.column:
                    where += f":{self.column}"
            where += ": "
        text = f"{where}{self.message}"
        if self.source_line is not None and self.line:
            text += f"\n    {self.source_line.rstrip()}"
            if self.column:
                # keep the caret under the right character even when the line has tabs
                pad = "".join("\t" if c == "\t" else " " for c in self.source_line[: self.column - 1])
                text += f"\n    {pad}^"
        return text

    def sort_key(self) -> tuple[str, int, int, str]:
        return (self.file or "", self.line or 0, self.column or 0, self.message)


class SpecErrors(Exception):
    """Several input errors, reported together."""

    def __init__(self, errors: Iterable[SpecError]) -> None:
        self.errors = sorted(errors, key=SpecError.sort_key)
        super().__init__(f"{len(self.errors)} problem(s) in the specs")


ENVIRONMENT_ERRNOS = {
    errno.ENOSPC: "no space left on the device (the disk is full)",
    errno.EDQUOT: "the disk quota is used up",
    errno.EROFS: "the file system is read-only",
    errno.EACCES: "permission denied (read-only, or not yours)",
    errno.EPERM: "the operation is not permitted (an immutable or protected file or folder)",
    errno.ENAMETOOLONG: "the name is too long for the file system (at most 255 bytes per name)",
    errno.ENOENT: "no such file or folder",
    errno.ENOTDIR: "a part of the path is not a folder",
    errno.EISDIR: "it is a folder",
    errno.ENOTEMPTY: "the folder is not empty",
    errno.EEXIST: "it exists already",
    errno.ELOOP: "too many levels of symbolic links",
    errno.EMFILE: "too many open files",
    errno.ENFILE: "too many open files on the system",
    errno.EIO: "an input/output error of the device",
    errno.EXDEV: "it is on another file system",
    errno.EBUSY: "the file or folder is busy",
    errno.ETXTBSY: "the file is busy",
    errno.EFBIG: "the file is too large for the file system",
}
"""File-system errors that are the machine's state, not a bug: a command that meets one ends with
one located sentence and exit 2.  Any other OSError is a bug (exit 3)."""


def os_reason(exc: OSError) -> str:
    """What a file-system error means, in words for the person at the keyboard."""
    return ENVIRONMENT_ERRNOS.get(exc.errno or 0) or exc.strerror or str(exc)


def os_error_text(exc: OSError) -> str:
    """One sentence naming the path (or paths) and what is wrong with it."""
    paths = [str(p) for p in (exc.filename, exc.filename2) if p is not None]
    return f"{' -> '.join(paths)}: {os_reason(exc)}" if paths else os_reason(exc)


BUG = "This is a bug in specfold, not a problem in your specs"


def bug_summary(exc: BaseException) -> str:
    """``internal error: Type: first line of the message``: how a bug in specfold is named to the user."""
    detail = str(exc).split("\n", 1)[0][:300]
    return f"internal error: {type(exc).__name__}{': ' + detail if detail else ''}"
