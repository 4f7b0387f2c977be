"""Memos of pure functions that a build cache may keep from one process to the next.

A few numerical solutions serve thousands of channels: a filter prototype per (family, order,
ripple, stopband), a least order per normalised mask, a hold fraction per allowed loss.  Each is
computed once per process and remembered here.  Computing one needs scipy, whose import costs
about a second; a build keeps the tables (:func:`known`) in its cache and gives them back to the
next process (:func:`remember`), so a rebuild that meets only known filters never imports it.

Remembered entries are checked for shape by each memo's ``valid`` and never overwrite an entry
computed in this process.  The tables are only as good as the library that computed them: the
build cache is keyed by the library versions.  No I/O here: the caller stores the tables.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable
from typing import Generic, TypeVar

K = TypeVar("K", bound=Hashable)
V = TypeVar("V")

_MEMOS: dict[str, Memo[object, object]] = {}


class Memo(Generic[K, V]):
    """A named table of a pure function's results; ``valid(key, value)`` judges remembered entries."""

    def __init__(self, name: str, valid: Callable[[object, object], bool]) -> None:
        if name in _MEMOS:
            raise ValueError(f"memo {name!r} declared twice")
        self.name = name
        self.valid = valid
        self.table: dict[K, V] = {}
        _MEMOS[name] = self  # type: ignore[assignment]  # the registry holds memos of every type

    def get(self, key: K, compute: Callable[[], V]) -> V:
        """The value for ``key``, computed by ``compute()`` the first time it is asked for."""
        if key in self.table:
            return self.table[key]
        value = self.table[key] = compute()
        return value


def known() -> dict[str, dict[object, object]]:
    """Every memo's table, by memo name (a copy, in a stable order)."""
    return {name: dict(sorted(memo.table.items(), key=lambda item: repr(item[0])))
            for name, memo in sorted(_MEMOS.items())}


def remember(tables: object) -> int:
    """Take entries kept by :func:`known` in an earlier process; returns how many were taken.

    Anything of the wrong shape (an unknown memo, a key or value its ``valid`` refuses) is
    ignored, and an entry already present is left as it is.
    """
    if not isinstance(tables, dict):
        return 0
    taken = 0
    for name, table in tables.items():
        memo = _MEMOS.get(name) if isinstance(name, str) else None
        if memo is None or not isinstance(table, dict):
            continue
        for key, value in table.items():
            try:
                ok = memo.valid(key, value)
            except Exception:  # a malformed entry is refused, whatever it trips over
                ok = False
            if ok:
                memo.table.setdefault(key, value)
                taken += 1
    return taken
