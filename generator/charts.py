"""Charts as plotly figure dicts: plain dicts and lists, serialised with :mod:`json`.

Why not ``plotly.graph_objects``: building and validating a figure object costs tens of
milliseconds, which is minutes over ten thousand channel pages; a dict costs microseconds and
plotly.js reads it just the same.  Numeric arrays go out as plotly's typed-array form
``{"dtype": "f8", "bdata": <base64 of little-endian float64>}`` (read by plotly.js 2.28 and
later), which is smaller than decimal text and round-trips exactly.

Each chart is one function ``fn(result) -> Chart | None`` (None when the channel has nothing
to show); :func:`channel_charts` runs the functions listed in :data:`CHANNEL_CHARTS` in order.
To add a chart, write its function here and append it to that tuple.  Every chart carries a
fixed element id, so pages are byte-identical from build to build.

Text shown by plotly (hover labels, annotations) passes through :func:`_text`, which escapes
``<``, ``>`` and ``&``: plotly interprets a small set of HTML tags in its strings, and a tone's
``source`` comes from a spec file.
"""

from __future__ import annotations

import base64
import html
import json
import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .analysis import ChannelResult
from .dsp.sampling import alias_frequency, nyquist_zone
from .model import Channel, Tone
from .quantities import format_in_unit, format_quantity

Figure = dict[str, Any]

# One palette for every chart (colour-blind safe, prints legibly in grey).
BAND_COLOUR = "rgba(46, 125, 50, 0.18)"
FOLD_COLOUR = "rgba(198, 40, 40, 0.10)"
ZONE_COLOUR = "rgba(120, 120, 120, 0.07)"
TONE_COLOUR = "#c62828"
ALIAS_COLOUR = "#1565c0"
MARK_COLOUR = "#555555"

MAX_ZONES = 16
"""Most Nyquist zones a folding chart draws; tones further up are still listed where they land."""


@dataclass(frozen=True)
class Chart:
    """One chart on a page: a fixed element id, a title for the page and the figure dict."""

    id: str  # element id, unique on its page: "chart-folding"
    title: str
    figure: Figure
    caption: str = ""

    def to_json(self) -> str:
        """Compact JSON, safe inside ``<script type="application/json">`` (no ``<``, ``>``, ``&``)."""
        text = json.dumps(self.figure, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
        return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def typed_array(values: Iterable[float] | np.ndarray) -> dict[str, str]:
    """plotly's typed-array form of a float array: little-endian float64, base64."""
    arr = np.asarray(values if isinstance(values, np.ndarray) else list(values), dtype="<f8")
    return {"dtype": "f8", "bdata": base64.b64encode(arr.tobytes()).decode("ascii")}


def _text(value: str) -> str:
    return html.escape(value, quote=False)


def _hz(value: float) -> str:
    return format_quantity(value, "Hz")


def _frequency_axis(title: str = "Frequency (Hz)", **extra: Any) -> dict[str, Any]:
    # d3's "~s" gives SI prefixes ("20k"), so ticks read "20 kHz" with the suffix
    axis: dict[str, Any] = {"title": {"text": title}, "tickformat": "~s", "ticksuffix": " Hz", "zeroline": False}
    axis.update(extra)
    return axis


def _layout(title: str, xaxis: dict[str, Any], yaxis: dict[str, Any], **extra: Any) -> dict[str, Any]:
    layout: dict[str, Any] = {
        "title": {"text": _text(title), "font": {"size": 15}},
        "xaxis": xaxis,
        "yaxis": yaxis,
        "height": 380,
        "margin": {"l": 64, "r": 24, "t": 48, "b": 56},
        "hovermode": "closest",
        "legend": {"orientation": "h", "y": -0.22},
        "font": {"family": "system-ui, sans-serif", "size": 12},
        "plot_bgcolor": "#ffffff",
        "paper_bgcolor": "#ffffff",
    }
    layout.update(extra)
    return layout


def _vline(x: float, colour: str, dash: str = "dash") -> dict[str, Any]:
    return {"type": "line", "xref": "x", "yref": "paper", "x0": x, "x1": x, "y0": 0, "y1": 1,
            "line": {"color": colour, "width": 1.5, "dash": dash}}


def _rect(x0: float, x1: float, colour: str) -> dict[str, Any]:
    return {"type": "rect", "xref": "x", "yref": "paper", "x0": x0, "x1": x1, "y0": 0, "y1": 1,
            "fillcolor": colour, "line": {"width": 0}, "layer": "below"}


def _label(x: float, text: str, y: float = 1.0, anchor: str = "center") -> dict[str, Any]:
    return {"x": x, "y": y, "xref": "x", "yref": "paper", "text": _text(text), "showarrow": False,
            "xanchor": anchor, "yanchor": "bottom", "font": {"size": 11, "color": MARK_COLOUR}}


def _ticks(values: Sequence[float], dim: str) -> dict[str, Any]:
    """Fixed ticks labelled in engineering units ("25.6 kHz"), where d3 would write "25.6k"."""
    return {"tickmode": "array", "tickvals": list(values), "ticktext": [format_quantity(v, dim) for v in values]}


# ---------------------------------------------------------------------------------------------
# Folding
# ---------------------------------------------------------------------------------------------


def tone_dbfs(tone: Tone, channel: Channel) -> float | None:
    """A tone's level in dBFS (sine-referenced) at the converter input, or None if unknown.

    Volts at the sensor output are multiplied by the gain, engineering units by the
    sensitivity and the gain; 0 dBFS is a sine whose peak is half the full-scale range
    (the sine-referenced convention, AES17).  Levels are read as peak amplitudes.
    """
    if tone.level_dim == "dBFS":
        return tone.level
    conv = channel.conversion
    if conv.full_scale is None or conv.full_scale.width <= 0:
        return None
    if tone.level_dim == "V":
        volts = tone.level * conv.gain
    elif channel.sensor.sensitivity is not None and tone.level_dim == channel.unit.dim:
        volts = tone.level * channel.sensor.sensitivity * conv.gain
    else:
        return None
    if volts <= 0:
        return None
    return 20.0 * math.log10(volts / (conv.full_scale.width / 2.0))


def _tone_level_text(tone: Tone, channel: Channel) -> str:
    if tone.level_dim == "dBFS":
        return f"{tone.level:g} dBFS"
    if tone.level_dim == "V":
        return format_quantity(tone.level, "V")
    if tone.level_dim == channel.unit.dim:
        return format_in_unit(tone.level, channel.unit)
    return f"{tone.level:g}"


def folding_chart(result: ChannelResult) -> Chart | None:
    """Where out-of-band content lands after sampling.

    Draws the band, the Nyquist zones (alternate zones shaded; even zones arrive inverted),
    fs/2 and the multiples of fs, the first alias fs - f_high, the frequency ranges that fold
    into the band, and each declared interference tone at its own frequency with an arrow to
    where it appears after sampling, f_a = |f - fs round(f / fs)| (Oppenheim & Schafer ch. 4).
    Levels are before the anti-aliasing filter.
    """
    s = result.sampling
    ch = result.channel
    if s is None or ch.kind != "input" or s.rate_hz <= 0:
        return None
    fs = s.rate_hz
    tones = sorted(ch.interference, key=lambda t: (t.frequency, t.level, t.source))
    top = max([2.0 * fs, *(1.1 * t.frequency for t in tones)])
    zones = min(MAX_ZONES, max(4, math.ceil(2.0 * top / fs)))
    x_max = zones * fs / 2.0

    shapes: list[dict[str, Any]] = []
    annotations: list[dict[str, Any]] = []
    for z in range(2, zones + 1, 2):  # shade the even (inverted) zones
        shapes.append(_rect((z - 1) * fs / 2.0, z * fs / 2.0, ZONE_COLOUR))
    for k in range(1, zones // 2 + 1):  # what folds into the band: k fs ± [f_low, f_high]
        below = (k * fs - s.band_high_hz, k * fs - s.band_low_hz)
        above = (k * fs + s.band_low_hz, k * fs + s.band_high_hz)
        for lo, hi in (below, above):
            lo, hi = max(lo, s.nyquist_hz), min(hi, x_max)
            if hi > lo:
                shapes.append(_rect(lo, hi, FOLD_COLOUR))
    shapes.append(_rect(s.band_low_hz, s.band_high_hz, BAND_COLOUR))
    shapes.append(_vline(s.nyquist_hz, MARK_COLOUR, "solid"))
    annotations.append(_label(s.nyquist_hz, f"fs/2 = {_hz(s.nyquist_hz)}"))
    for k in range(1, zones // 2 + 1):
        shapes.append(_vline(k * fs, MARK_COLOUR, "dot"))
    annotations.append(_label(fs, f" fs = {_hz(fs)}", 1.0, "left"))
    if 0 < s.first_alias_hz < x_max:
        shapes.append(_vline(s.first_alias_hz, TONE_COLOUR, "dash"))
        annotations.append(_label(s.first_alias_hz, f"first alias {_hz(s.first_alias_hz)} ", 0.93, "right"))

    levels = [tone_dbfs(t, ch) for t in tones]
    known = [lv for lv in levels if lv is not None]
    floor = min([-120.0, *(lv - 20.0 for lv in known)])
    y_unknown = floor + 10.0  # tones whose level cannot be put in dBFS sit on a fixed line

    data: list[dict[str, Any]] = [
        {  # an invisible trace so the band shows in the legend and the axes span the zones
            "type": "scatter", "mode": "lines", "name": "band (green), folds into band (red)",
            "x": typed_array([s.band_low_hz, s.band_high_hz]), "y": typed_array([floor, floor]),
            "line": {"color": "rgba(46,125,50,0.8)", "width": 6},
            "text": [_text(f"band {_hz(s.band_low_hz)} to {_hz(s.band_high_hz)}")] * 2,
            "hovertemplate": "%{text}<extra></extra>",
        }
    ]
    tx: list[float] = []
    ty: list[float] = []
    ax: list[float] = []
    ay: list[float] = []
    ttext: list[str] = []
    atext: list[str] = []
    for tone, lv in zip(tones, levels, strict=True):
        y = lv if lv is not None else y_unknown
        fa = alias_frequency(tone.frequency, fs)
        zone = nyquist_zone(tone.frequency, fs)
        lands = "in the band" if s.band_low_hz <= fa <= s.band_high_hz else "outside the band"
        what = f"{_hz(tone.frequency)} at {_tone_level_text(tone, ch)}" + (f" ({tone.source})" if tone.source else "")
        where = f"appears at {_hz(fa)} (zone {zone}{', inverted' if zone % 2 == 0 else ''}), {lands}"
        if tone.frequency <= x_max:
            tx.append(tone.frequency)
            ty.append(y)
            ttext.append(f"{_text(what)}<br>{_text(where)}")
        ax.append(fa)
        ay.append(y)
        atext.append(f"alias of {_text(what)}<br>{_text(where)}")
        if zone > 1 and tone.frequency <= x_max:
            annotations.append({
                "x": fa, "y": y, "ax": tone.frequency, "ay": y, "xref": "x", "yref": "y",
                "axref": "x", "ayref": "y", "showarrow": True, "arrowhead": 2, "arrowsize": 1,
                "arrowwidth": 1.2, "arrowcolor": ALIAS_COLOUR, "text": "",
            })
    if tones:
        data.append({"type": "scatter", "mode": "markers", "name": "interference tone (before the filter)",
                     "x": typed_array(tx), "y": typed_array(ty), "text": ttext,
                     "marker": {"color": TONE_COLOUR, "size": 10, "symbol": "diamond"},
                     "hovertemplate": "%{text}<extra></extra>"})
        data.append({"type": "scatter", "mode": "markers", "name": "where it lands after sampling",
                     "x": typed_array(ax), "y": typed_array(ay), "text": atext,
                     "marker": {"color": ALIAS_COLOUR, "size": 9, "symbol": "circle-open", "line": {"width": 2}},
                     "hovertemplate": "%{text}<extra></extra>"})

    edges = [z * fs / 2.0 for z in range(0, zones + 1, 1 if zones <= 8 else 2)]  # ticks on the zone edges
    layout = _layout(
        "Folding of out-of-band content",
        _frequency_axis(range=[0, x_max], **_ticks(edges, "Hz")),
        {"title": {"text": "Level (dBFS, sine-referenced)"}, "range": [floor, 10.0], "ticksuffix": " dB"},
        shapes=shapes,
        annotations=annotations,
    )
    caption = (
        f"Sampling at {_hz(fs)}: content between k·fs ± the band edges (red) folds into the band "
        f"(green). Shaded zones arrive spectrally inverted. Levels are before the anti-aliasing filter."
    )
    if not tones:
        caption += " No interference tones are declared for this channel."
    if any(lv is None for lv in levels):
        caption += f" Tones whose level cannot be stated in dBFS are drawn at {y_unknown:g} dBFS."
    return Chart("chart-folding", "Folding", {"data": data, "layout": layout}, caption)


ChartBuilder = Callable[[ChannelResult], "Chart | None"]

CHANNEL_CHARTS: tuple[ChartBuilder, ...] = (folding_chart,)
"""The charts of a channel page, in page order.  Append new chart functions here."""


def channel_charts(result: ChannelResult, builders: Sequence[ChartBuilder] = CHANNEL_CHARTS) -> list[Chart]:
    """Every chart that applies to the channel, in page order; element ids are unique."""
    charts = [c for c in (build(result) for build in builders) if c is not None]
    ids = [c.id for c in charts]
    if len(set(ids)) != len(ids):
        raise ValueError(f"chart ids repeat on one page: {ids}")
    return charts
