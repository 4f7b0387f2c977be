"""Figures are declared once, on the result fields that carry them; the JSON contract follows."""

from __future__ import annotations

import pytest

from generator.analysis import FIGURES, analyze
from generator.analysis.figures import FigureInfo, figure_field
from generator.load import load_spec

from .conftest import DEMO


@pytest.fixture(scope="module")
def demo_figures() -> dict[str, tuple[str, dict[str, object]]]:
    return {r.channel.id: (r.channel.kind, r.figures) for r in analyze(load_spec(DEMO)).channels}


def test_every_figure_a_channel_has_is_declared(demo_figures: dict[str, tuple[str, dict[str, object]]]) -> None:
    seen = {key for _, figs in demo_figures.values() for key in figs}
    assert seen and seen <= set(FIGURES)
    for info in FIGURES.values():
        assert info.label and info.formula and info.source, info.key


def test_input_only_figures_are_absent_elsewhere(demo_figures: dict[str, tuple[str, dict[str, object]]]) -> None:
    kinds = {kind for kind, _ in demo_figures.values()}
    assert kinds == {"input", "output", "image"}
    for kind, figs in demo_figures.values():
        # absent, not null: an output or image channel has no anti-aliasing filter at all
        assert ("anti_alias_filter" in figs) == (kind == "input")
        assert ("interference_folds" in figs) == (kind == "input")
        # the decimation filter's figures are there only with a decimation filter to describe
        assert ("digital_rejection_db" in figs) == ("modulator_rate_hz" in figs)
        # an amplitude figure without a value is left out, never null
        assert figs.get("peak_volts", 0.0) is not None and figs.get("lsb_units", 0.0) is not None
    assert any("digital_rejection_db" in figs for _, figs in demo_figures.values())  # the demo has one


def test_a_figure_has_one_meaning() -> None:
    info = FIGURES["sample_rate_hz"]
    assert info == FigureInfo("sample_rate_hz", "Sample rate", "Hz", "fs", info.source)
    with pytest.raises(ValueError, match="declared twice"):
        figure_field("sample_rate_hz", "Sampling frequency", "Hz", "fs", "elsewhere")
    with pytest.raises(ValueError, match="before it is declared"):
        figure_field("no_such_figure_hz")
    assert FIGURES["sample_rate_hz"] is info
