"""Figures: each declared once, on the result field that carries it.

A figure is a field of a result dataclass (:func:`result_class`) declared with :func:`figure_field`: its key (the
JSON name, ending in its SI unit), label, display unit, formula and source go into the field's
metadata and into :data:`FIGURES`, the registry the README table, the site and ``diff`` read.
:class:`Figures` gives every result a ``figures()`` derived from those fields, in field order.

Whether a figure appears in ``figures()``:

- ``shown(result)``, when given, decides whether the key is there at all (an input-only figure
  on an output channel, a decimation-filter figure without one: absent);
- ``omit_none``: a None value leaves the key out (the amplitude figures) instead of writing null;
- otherwise the key is always there, null when the value is None.

``encode(value, result)`` turns a value JSON cannot hold as it is (a filter, a tuple of tone
folds, a value that may be infinite) into one it can.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import MISSING, dataclass, field, fields
from typing import Any, TypeVar, dataclass_transform

FigureValue = float | int | str | bool | None | dict[str, Any] | list[Any]

Encoder = Callable[[Any, Any], FigureValue]
"""(the field's value, the whole result) -> the JSON value."""
Shown = Callable[[Any], bool]
"""the whole result -> whether the figure appears at all."""


@dataclass(frozen=True)
class FigureInfo:
    key: str  # JSON key, ending in its SI unit: sample_rate_hz
    label: str  # "Sample rate"
    dim: str  # display dimension for quantities.format_quantity ("" = plain number, "<unit>" = engineering)
    formula: str  # "f_N = fs / 2"
    source: str  # "Shannon 1949; Oppenheim & Schafer ch. 4"


FIGURES: dict[str, FigureInfo] = {}


@dataclass(frozen=True)
class FigureSpec:
    """What a field's metadata says about the figure it carries."""

    info: FigureInfo
    encode: Encoder | None = None
    shown: Shown | None = None
    omit_none: bool = False


_FIGURE = "specfold.figure"  # the metadata key


def _declare(info: FigureInfo) -> FigureInfo:
    if info.key in FIGURES and FIGURES[info.key] != info:
        raise ValueError(f"figure {info.key} declared twice with different meanings")
    FIGURES[info.key] = info
    return info


def figure_field(key: str, label: str | None = None, dim: str = "", formula: str = "", source: str = "", *,
                 default: Any = MISSING, default_factory: Any = MISSING, encode: Encoder | None = None,
                 shown: Shown | None = None, omit_none: bool = False) -> Any:
    """A dataclass field carrying the figure ``key``, declared here with its label, display unit,
    formula and source.  A second field carrying a figure declared elsewhere (one meaning, two
    results) gives the key alone."""
    if label is None:
        if key not in FIGURES:
            raise ValueError(f"figure {key} is used before it is declared")
        info = FIGURES[key]
    else:
        info = _declare(FigureInfo(key, label, dim, formula, source))
    return field(default=default, default_factory=default_factory,
                 metadata={_FIGURE: FigureSpec(info, encode, shown, omit_none)})


_FIELDS: dict[type, tuple[tuple[str, FigureSpec], ...]] = {}


def _figure_fields(cls: type) -> tuple[tuple[str, FigureSpec], ...]:
    """(field name, figure) of each figure field of a result class, in field order; looked up once."""
    found = _FIELDS.get(cls)
    if found is None:
        found = _FIELDS[cls] = tuple((f.name, f.metadata[_FIGURE]) for f in fields(cls) if _FIGURE in f.metadata)
    return found


def figure_values(result: Any) -> dict[str, FigureValue]:
    """The figures a result carries, JSON-ready, keyed by figure key, in field order."""
    out: dict[str, FigureValue] = {}
    for name, spec in _figure_fields(type(result)):
        if spec.shown is not None and not spec.shown(result):
            continue
        value = getattr(result, name)
        if spec.encode is not None:
            value = spec.encode(value, result)
        if value is None and spec.omit_none:
            continue
        out[spec.info.key] = value
    return out


class Figures:
    """Base of every result with figure fields: ``figures()`` from the declarations."""

    def figures(self) -> dict[str, FigureValue]:
        return figure_values(self)


_T = TypeVar("_T")


@dataclass_transform(frozen_default=True, kw_only_default=True, field_specifiers=(field, figure_field))
def result_class(cls: type[_T]) -> type[_T]:
    """A frozen, keyword-only dataclass whose fields may be :func:`figure_field` s (keyword-only, so
    the fields can stand in the order their figures are listed, with or without defaults)."""
    return dataclass(frozen=True, kw_only=True)(cls)
