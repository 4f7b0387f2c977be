"""The registry of figure keys: label, display unit, formula and source of each."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

FigureValue = float | int | str | bool | None | dict[str, Any] | list[Any]


@dataclass(frozen=True)
class FigureInfo:
    key: str  # JSON key, ending in its SI unit: sample_rate_hz
    label: str  # "Sample rate"
    dim: str  # display dimension for quantities.format_quantity ("" = plain number, "<unit>" = engineering)
    formula: str  # "f_N = fs / 2"
    source: str  # "Shannon 1949; Oppenheim & Schafer ch. 4"


FIGURES: dict[str, FigureInfo] = {}


def figure(key: str, label: str, dim: str, formula: str, source: str) -> str:
    """Declare a figure key once; returns the key so modules can keep it as a constant."""
    if key in FIGURES and FIGURES[key] != FigureInfo(key, label, dim, formula, source):
        raise ValueError(f"figure {key} declared twice with different meanings")
    FIGURES[key] = FigureInfo(key, label, dim, formula, source)
    return key
