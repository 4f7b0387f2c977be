"""The one error type for bad input.

Every problem a user can cause with a spec file or a command-line argument is a
:class:`SpecError`: a plain sentence plus, where known, the file, line and
column it came from and the offending source line.  The loader collects many of
them and raises :class:`SpecErrors` once, so the CLI can report every problem in
every file before it exits with status 2.
"""

from __future__ import annotations

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
