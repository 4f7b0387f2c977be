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
from .analysis.curves import aperture_response, band_top_images, filter_response, hold_response_db, least_orders_by_rate
from .dsp import filters as flt
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


def typed_array(values: Iterable[float] | np.ndarray, dtype: str = "f8") -> dict[str, str]:
    """plotly's typed-array form of a float array: little-endian float64 (or "f4", float32), base64."""
    if dtype not in ("f8", "f4"):
        raise ValueError(f"typed arrays are f8 or f4, not {dtype!r}")
    arr = np.asarray(values if isinstance(values, np.ndarray) else list(values), dtype="<" + dtype)
    return {"dtype": dtype, "bdata": base64.b64encode(arr.tobytes()).decode("ascii")}


def _curve(values: Iterable[float] | np.ndarray) -> dict[str, str]:
    """A dense curve (hundreds of points) as float32: half the bytes, ample for a drawing."""
    return typed_array(values, "f4")


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
    Tone markers are levels before the anti-aliasing filter; where a tone lands is drawn at its
    landed level, ``level - A(f)`` from :attr:`SamplingResult.tones` (analog filter plus any
    delta-sigma decimation filter), or at the declared level when no filter is known.
    """
    s = result.sampling
    ch = result.channel
    if s is None or ch.kind != "input" or s.rate_hz <= 0:
        return None
    fs = s.rate_hz
    order = sorted(range(len(ch.interference)),
                   key=lambda i: (ch.interference[i].frequency, ch.interference[i].level, ch.interference[i].source))
    tones = [ch.interference[i] for i in order]
    folds = [next(t for t in s.tones if t.index == i) for i in order]
    # before and after the analog filter (and a delta-sigma decimation filter): level, level - A(f)
    landed = [t.landed_dbfs for t in folds]
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

    levels = [t.level_dbfs for t in folds]
    known = [lv for lv in (*levels, *landed) if lv is not None]
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
    for tone, fold, lv, after in zip(tones, folds, levels, landed, strict=True):
        y = lv if lv is not None else y_unknown
        y_after = after if after is not None else y
        fa, zone = fold.alias_hz, fold.zone
        lands = "in the band" if fold.in_band else "outside the band"
        what = f"{_hz(tone.frequency)} at {_tone_level_text(tone, ch)}" + (f" ({tone.source})" if tone.source else "")
        where = f"appears at {_hz(fa)} (zone {zone}{', inverted' if fold.inverted else ''}), {lands}"
        if tone.frequency <= x_max:
            tx.append(tone.frequency)
            ty.append(y)
            ttext.append(f"{_text(what)}<br>{_text(where)}")
        ax.append(fa)
        ay.append(y_after)
        level_after = "" if after is None else f", {after:.1f} dBFS after the filter"
        atext.append(f"alias of {_text(what)}<br>{_text(where + level_after)}")
        if (zone > 1 or y_after != y) and tone.frequency <= x_max:
            annotations.append({
                "x": fa, "y": y_after, "ax": tone.frequency, "ay": y, "xref": "x", "yref": "y",
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
        f"(green). Shaded zones arrive spectrally inverted. Diamonds are levels before the anti-aliasing filter"
    )
    if any(lv is not None for lv in landed):
        caption += "; circles are where and how strong each tone lands after the filter."
    else:
        caption += "."
    if not tones:
        caption += " No interference tones are declared for this channel."
    if any(lv is None for lv in levels):
        caption += f" Tones whose level cannot be stated in dBFS are drawn at {y_unknown:g} dBFS."
    return Chart("chart-folding", "Folding", {"data": data, "layout": layout}, caption)


# ---------------------------------------------------------------------------------------------
# Filter response over its mask
# ---------------------------------------------------------------------------------------------

GRID_POINTS = 200
"""Points of a log-frequency response trace (marked frequencies are added exactly)."""

RESPONSE_FLOOR_DB = -200.0
"""Deepest gain drawn; a transmission zero (-inf dB) is drawn here."""

MASK_PASS_COLOUR = "rgba(46, 125, 50, 0.25)"
MASK_STOP_COLOUR = "rgba(198, 40, 40, 0.15)"
RESPONSE_COLOUR = "#1565c0"
DELAY_COLOUR = "#ef6c00"
HOLD_COLOUR = "#6a1b9a"


def _log_label(x: float, text: str, y: float = 1.0, anchor: str = "center") -> dict[str, Any]:
    # annotations on a log axis take log10 of the position (plotly's rule); shapes take the value
    label = _label(x, text, y, anchor)
    label["x"] = math.log10(x)
    return label


def _db_trace(values: np.ndarray) -> np.ndarray:
    out = np.where(np.isfinite(values), values, RESPONSE_FLOOR_DB)
    return np.maximum(out, RESPONSE_FLOOR_DB)


def _filter_name(filt: flt.AnalogFilter) -> str:
    return f"{filt.family}, order {filt.order}, corner {_hz(filt.corner_hz)}"


def filter_response_chart(result: ChannelResult) -> Chart | None:
    """The analog filter's gain, -A(f) = 20 log10 |H(j 2 pi f)|, over the mask it must meet.

    Input channels: the anti-aliasing filter of :class:`SamplingResult` against the allowed
    passband loss (``flatness``) up to f_high and the required alias rejection from the stop
    edge upward (fs - f_high, or f_mod - f_high on a delta-sigma converter, where the decimation
    filter guards fs - f_high).  Output channels: the reconstruction filter against the loss the
    filter must add at the first image fs - f_high (what the hold leaves over).  Group delay
    tau(f) is on a second axis in µs.  Response from :func:`generator.dsp.filters.attenuation_db`
    (Williams & Taylor; scipy.signal analog prototypes).
    """
    ch = result.channel
    s, o = result.sampling, result.output
    marks: list[tuple[float, str, str]] = []  # (frequency, label, colour)
    if ch.kind == "input" and s is not None and s.filter is not None:
        filt, fs, f_high = s.filter, s.rate_hz, s.band_high_hz
        flatness, required, stop = s.flatness_db, s.required_alias_rejection_db, s.stop_edge_hz
        marks.append((s.nyquist_hz, f"fs/2 = {_hz(s.nyquist_hz)}", MARK_COLOUR))
        if s.first_alias_hz > 0:
            marks.append((s.first_alias_hz, f"first alias {_hz(s.first_alias_hz)}", TONE_COLOUR))
        if s.modulator_alias_hz is not None and s.modulator_alias_hz > 0:
            marks.append((s.modulator_alias_hz, f"modulator alias {_hz(s.modulator_alias_hz)}", TONE_COLOUR))
        what = "Anti-aliasing filter"
        if s.delta_sigma:
            sets = (f"On this delta-sigma converter the decimation filter rejects content near fs; the analog "
                    f"filter's job is the modulator alias f_mod - f_high. The alias rejection is set by the "
                    f"{s.alias_rejection_source}.")
        else:
            sets = f"The alias rejection is set by the {s.alias_rejection_source}."
    elif ch.kind == "output" and o is not None:
        designed = o.filter
        if designed is None:
            return None
        filt, fs, f_high = designed, o.rate_hz, o.band_high_hz
        flatness, required, stop = o.flatness_db, o.filter_needed_at_image_db, o.first_image_hz
        marks.append((fs / 2.0, f"fs/2 = {_hz(fs / 2.0)}", MARK_COLOUR))
        marks.append((o.first_image_hz, f"first image {_hz(o.first_image_hz)}", TONE_COLOUR))
        what = "Reconstruction filter"
        sets = "The required loss at the first image is what the hold's own suppression leaves over."
    else:
        return None
    if not (fs > 0 and f_high > 0):
        return None
    marks = [m for m in marks if m[0] > 0]  # a nonsense rate (found by a rule) can put one below 0 Hz

    top = max([fs, filt.corner_hz, *(m[0] for m in marks), *([stop] if stop else [])])
    f_lo, f_hi = min(f_high, filt.corner_hz) / 20.0, 3.0 * top
    exact = [f_high, filt.corner_hz, *(m[0] for m in marks), *([stop] if stop else [])]
    grid = np.unique(np.concatenate([np.geomspace(f_lo, f_hi, GRID_POINTS),
                                     np.array([f for f in exact if f_lo <= f <= f_hi], dtype=float)]))
    response = filter_response(filt, grid)
    gain = _db_trace(response.gain_db)
    delay_us = response.delay_s * 1e6

    data: list[dict[str, Any]] = [
        {"type": "scatter", "mode": "lines", "name": "allowed passband loss", "x": typed_array([f_lo, f_high]),
         "y": typed_array([-flatness, -flatness]), "fill": "tozeroy", "fillcolor": MASK_PASS_COLOUR,
         "line": {"color": "rgba(46,125,50,0.9)", "width": 1.5, "dash": "dash"},
         "hovertemplate": _text(f"passband loss up to {flatness:g} dB below {_hz(f_high)}") + "<extra></extra>"},
    ]
    if required is not None and stop is not None and stop > 0:
        data.append({"type": "scatter", "mode": "lines", "name": "required rejection",
                     "x": typed_array([stop, f_hi]), "y": typed_array([-required, -required]),
                     "fill": "tozeroy", "fillcolor": MASK_STOP_COLOUR,
                     "line": {"color": TONE_COLOUR, "width": 1.5, "dash": "dash"},
                     "hovertemplate": _text(f"at least {required:.1f} dB from {_hz(stop)} up")
                     + "<extra></extra>"})
    data.append({"type": "scatter", "mode": "lines", "name": "filter gain", "x": _curve(grid), "y": _curve(gain),
                 "line": {"color": RESPONSE_COLOUR, "width": 2},
                 "hovertemplate": "%{x:.4~s}Hz: %{y:.2f} dB<extra>gain</extra>"})
    data.append({"type": "scatter", "mode": "lines", "name": "group delay", "x": _curve(grid),
                 "y": _curve(delay_us), "yaxis": "y2", "line": {"color": DELAY_COLOUR, "width": 1.5, "dash": "dot"},
                 "hovertemplate": "%{x:.4~s}Hz: %{y:.4g} µs<extra>group delay</extra>"})

    shapes = [_vline(f, colour) for f, _, colour in marks]
    annotations = [_log_label(f, text, 1.0 - 0.07 * i, "left") for i, (f, text, _) in enumerate(marks)]
    y_low = min(-(required or 0.0) - 20.0, -40.0)
    layout = _layout(
        f"{what} over its mask",
        _frequency_axis(type="log", range=[math.log10(f_lo), math.log10(f_hi)]),
        {"title": {"text": "Gain (dB)"}, "range": [y_low, 5.0], "ticksuffix": " dB"},
        yaxis2={"title": {"text": "Group delay (µs)"}, "overlaying": "y", "side": "right",
                "rangemode": "tozero", "showgrid": False},
        shapes=shapes,
        annotations=annotations,
    )
    layout["margin"] = {"l": 64, "r": 64, "t": 48, "b": 56}
    caption = (f"{_filter_name(filt)}. Green: the loss allowed in the band ({flatness:g} dB up to {_hz(f_high)}). "
               + (f"Red: the rejection required ({required:.1f} dB from {_hz(stop)} up). " if required and stop else "")
               + sets)
    return Chart("chart-filter", "Filter response", {"data": data, "layout": layout}, caption)


# ---------------------------------------------------------------------------------------------
# Noise budget
# ---------------------------------------------------------------------------------------------


def noise_budget_chart(result: ChannelResult) -> Chart | None:
    """Each noise contribution in dB relative to the signal (AmplitudeResult.budget, ADI MT-003),
    against the floor the channel requires: -snr from the [signal] table."""
    amp = result.amplitude
    if amp is None:
        return None
    rows = [c for c in amp.budget if c.db is not None]
    if not rows:
        return None
    ch = result.channel
    names = [c.name for c in rows]
    values = [float(c.db or 0.0) for c in rows]
    hover = []
    for c in rows:
        parts = [f"{c.name}: {c.db:.1f} dB re signal"]
        if c.volts is not None:
            parts.append(f"{format_quantity(c.volts, 'V')} rms at the converter")
        if c.units is not None:
            parts.append(f"{format_in_unit(c.units, ch.unit)} rms")
        hover.append("<br>".join(_text(p) for p in parts if p))
    colours = [MARK_COLOUR if c.name == "total" else ALIAS_COLOUR for c in rows]
    data: list[dict[str, Any]] = [
        {"type": "bar", "orientation": "h", "name": "contribution", "x": typed_array(values), "y": names,
         "text": hover, "hovertemplate": "%{text}<extra></extra>", "marker": {"color": colours}},
    ]
    shapes: list[dict[str, Any]] = []
    annotations: list[dict[str, Any]] = []
    snr = ch.signal.snr_db
    lowest = min(values)
    if snr is not None:
        shapes.append(_vline(-snr, TONE_COLOUR))
        annotations.append(_label(-snr, f"required floor -{snr:g} dB", 1.0, "left"))
        lowest = min(lowest, -snr)
    layout = _layout(
        "Noise budget",
        {"title": {"text": "Level relative to the signal (dB)"}, "ticksuffix": " dB",
         "range": [lowest - 10.0, 0.0], "zeroline": False},
        {"title": {"text": ""}, "autorange": "reversed", "automargin": True},
        shapes=shapes,
        annotations=annotations,
        showlegend=False,
        height=max(220, 80 + 40 * len(rows)),
    )
    caption = ("Each contribution's rms in the noise bandwidth, relative to the signal's rms; "
               "bars further left are smaller.")
    if snr is not None:
        caption += f" The red line is the floor the channel requires (snr = {snr:g} dB)."
    return Chart("chart-noise", "Noise budget", {"data": data, "layout": layout}, caption)


# ---------------------------------------------------------------------------------------------
# Trade-off: filter order against sample rate
# ---------------------------------------------------------------------------------------------

TRADE_RATES = 12
"""Sample rates tried, log-spaced from 2.2 f_high to 20 f_high."""


def trade_off_rates(f_high: float) -> np.ndarray:
    """The sample rates the trade-off chart tries: TRADE_RATES log-spaced in [2.2, 20] x f_high."""
    return np.geomspace(2.2 * f_high, 20.0 * f_high, TRADE_RATES)


def trade_off_chart(result: ChannelResult) -> Chart | None:
    """Least order per family (:func:`generator.dsp.filters.least_order`) meeting the channel's mask
    at each sample rate: flatness at f_high, the required rejection at fs - f_high.  Not drawn for
    delta-sigma channels, whose analog filter guards the modulator alias instead."""
    s = result.sampling
    if s is None or result.channel.kind != "input" or s.delta_sigma:
        return None
    f_high = s.band_high_hz
    sweep = least_orders_by_rate(s, trade_off_rates(f_high)) if f_high > 0 else None
    if sweep is None:
        return None
    stop_db = sweep.stop_db
    colours = ("#1565c0", "#2e7d32", "#ef6c00", "#6a1b9a", "#c62828")
    data: list[dict[str, Any]] = []
    for fam, colour in zip(flt.FAMILIES, colours, strict=True):
        xs = [fs for fs, _ in sweep.orders[fam]]
        ys = [float(n) for _, n in sweep.orders[fam]]
        if xs:
            data.append({"type": "scatter", "mode": "lines+markers", "name": fam, "x": typed_array(xs),
                         "y": typed_array(ys), "line": {"color": colour, "width": 1.5, "shape": "hv"},
                         "hovertemplate": "%{x:.4~s}Hz: order %{y}<extra>" + fam + "</extra>"})
    if not data:
        return None
    here = [(fam, d.order) for fam, d in s.least_orders.items() if d is not None]
    if here:
        data.append({"type": "scatter", "mode": "markers", "name": f"at this channel's rate {_hz(s.rate_hz)}",
                     "x": typed_array([s.rate_hz] * len(here)), "y": typed_array([float(n) for _, n in here]),
                     "text": [_text(f"{fam}: order {n}") for fam, n in here],
                     "marker": {"color": "#000000", "size": 11, "symbol": "x"},
                     "hovertemplate": "%{text}<extra></extra>"})
    layout = _layout(
        "Least filter order against sample rate",
        _frequency_axis("Sample rate (Hz)", type="log"),
        {"title": {"text": "Least order (poles)"}, "rangemode": "tozero", "dtick": 2},
        shapes=[_vline(s.rate_hz, MARK_COLOUR, "solid")],
        annotations=[_log_label(s.rate_hz, f" this channel {_hz(s.rate_hz)}", 1.0, "left")],
    )
    caption = (f"Fewest poles meeting {s.flatness_db:g} dB at {_hz(f_high)} and {stop_db:.1f} dB at fs - f_high. "
               "A family missing at a rate needs more than 20 poles there.")
    return Chart("chart-tradeoff", "Filter order against rate", {"data": data, "layout": layout}, caption)


# ---------------------------------------------------------------------------------------------
# Outputs: hold envelope and images
# ---------------------------------------------------------------------------------------------

HOLD_POINTS = 301
"""Points of the hold envelope from 0 to HOLD_SPAN x fs (fs/2 falls on a grid point)."""
HOLD_SPAN = 3


def hold_chart(result: ChannelResult) -> Chart | None:
    """Zero-order hold envelope 20 log10 |sinc(f / fs)| from 0 to 3 fs (ADI MT-017), the images of the
    band top at k fs ± f_high, and the reconstruction filter's gain overlaid."""
    o = result.output
    if o is None or result.channel.kind != "output" or not o.rate_hz > 0:
        return None
    fs, f_high = o.rate_hz, o.band_high_hz
    filt = o.filter
    zoh = o.hold == "zero-order"
    if not zoh and filt is None:
        return None
    grid = np.linspace(0.0, HOLD_SPAN * fs, HOLD_POINTS)
    hold_db = hold_response_db(o, grid)
    envelope = _db_trace(hold_db) if hold_db is not None else np.zeros_like(grid)
    data: list[dict[str, Any]] = []
    if zoh:
        data.append({"type": "scatter", "mode": "lines", "name": "hold |sinc(f/fs)|", "x": _curve(grid),
                     "y": _curve(envelope), "line": {"color": HOLD_COLOUR, "width": 2},
                     "hovertemplate": "%{x:.4~s}Hz: %{y:.2f} dB<extra>hold</extra>"})
    filt_db = None
    if filt is not None:
        filt_db = _db_trace(filter_response(filt, grid).gain_db)
        data.append({"type": "scatter", "mode": "lines", "name": f"filter ({_filter_name(filt)})", "x": _curve(grid),
                     "y": _curve(filt_db), "line": {"color": RESPONSE_COLOUR, "width": 1.5, "dash": "dot"},
                     "hovertemplate": "%{x:.4~s}Hz: %{y:.2f} dB<extra>filter</extra>"})
        if zoh:
            data.append({"type": "scatter", "mode": "lines", "name": "hold and filter", "x": _curve(grid),
                         "y": _curve(_db_trace(envelope + filt_db)), "line": {"color": "#000000", "width": 1},
                         "hovertemplate": "%{x:.4~s}Hz: %{y:.2f} dB<extra>hold and filter</extra>"})
    image_levels = band_top_images(o, HOLD_SPAN)
    images = [f for f, _ in image_levels]
    levels = [max(lv, RESPONSE_FLOOR_DB) for _, lv in image_levels]
    data.append({"type": "scatter", "mode": "markers", "name": "images of the band top (k fs ± f_high)",
                 "x": typed_array(images), "y": typed_array(levels),
                 "text": [_text(f"image at {_hz(f)}: {lv:.1f} dB") for f, lv in zip(images, levels, strict=True)],
                 "marker": {"color": TONE_COLOUR, "size": 9, "symbol": "diamond"},
                 "hovertemplate": "%{text}<extra></extra>"})
    shapes = [_rect(0.0, f_high, BAND_COLOUR), _vline(fs / 2.0, MARK_COLOUR, "solid")]
    shapes += [_vline(f, TONE_COLOUR, "dot") for f in images]
    annotations = [_label(fs / 2.0, f"fs/2 = {_hz(fs / 2.0)}")]
    y_low = min(-80.0, *(lv - 10.0 for lv in levels)) if levels else -80.0
    layout = _layout(
        "Hold droop and images",
        _frequency_axis(range=[0, HOLD_SPAN * fs], **_ticks([k * fs / 2.0 for k in range(2 * HOLD_SPAN + 1)], "Hz")),
        {"title": {"text": "Gain (dB)"}, "range": [max(y_low, RESPONSE_FLOOR_DB), 5.0], "ticksuffix": " dB"},
        shapes=shapes,
        annotations=annotations,
    )
    caption = (f"Updating at {_hz(fs)}: the band (green) up to {_hz(f_high)} repeats as images at k·fs ± f_high "
               "(red diamonds, level after the hold" + (" and the filter" if filt is not None else "") + ").")
    if not zoh:
        caption += " This output has no zero-order hold."
    elif o.sinc_compensation:
        caption += " Inverse-sinc compensation cancels the in-band droop; the images keep the hold's envelope."
    return Chart("chart-hold", "Hold and images", {"data": data, "layout": layout}, caption)


# ---------------------------------------------------------------------------------------------
# Images: pixel aperture response
# ---------------------------------------------------------------------------------------------

MTF_POINTS = 201
"""Points of the aperture response from 0 to 2x the spatial Nyquist frequency (Nyquist on a point)."""


def aperture_chart(result: ChannelResult) -> Chart | None:
    """Full-fill pixel aperture response |sinc(f p)| (Holst) to twice the spatial Nyquist 1/(2p),
    with Nyquist and the required detail marked; spatial frequency in cycles/mm."""
    im = result.image
    if im is None or not im.pixel_pitch_m > 0:
        return None
    pitch, nyq = im.pixel_pitch_m, im.spatial_nyquist_cycles_per_m
    grid = np.linspace(0.0, 2.0 * nyq, MTF_POINTS)
    mtf = aperture_response(pitch, grid)
    per_mm = grid / 1000.0
    data: list[dict[str, Any]] = [
        {"type": "scatter", "mode": "lines", "name": "pixel aperture |sinc(f p)|", "x": _curve(per_mm),
         "y": _curve(mtf), "line": {"color": RESPONSE_COLOUR, "width": 2},
         "hovertemplate": "%{x:.4g} cycles/mm: %{y:.3f}<extra></extra>"},
    ]
    shapes = [_rect(nyq / 1000.0, 2.0 * nyq / 1000.0, FOLD_COLOUR), _vline(nyq / 1000.0, MARK_COLOUR, "solid")]
    annotations = [_label(nyq / 1000.0, f" Nyquist {format_quantity(nyq, 'cycles/m')}", 1.0, "left")]
    detail = result.channel.signal.detail_cycles_per_m
    if detail is not None and detail > 0:
        shapes.append(_vline(detail / 1000.0, TONE_COLOUR))
        annotations.append(_label(detail / 1000.0, f"required detail {format_quantity(detail, 'cycles/m')} ",
                                  0.93, "right"))
        if detail <= 2.0 * nyq and im.pixel_aperture_mtf_at_detail is not None:
            data.append({"type": "scatter", "mode": "markers", "name": "at the required detail",
                         "x": typed_array([detail / 1000.0]), "y": typed_array([im.pixel_aperture_mtf_at_detail]),
                         "marker": {"color": TONE_COLOUR, "size": 10, "symbol": "diamond"},
                         "hovertemplate": "%{x:.4g} cycles/mm: %{y:.3f}<extra>required detail</extra>"})
    layout = _layout(
        "Pixel aperture response",
        {"title": {"text": "Spatial frequency (cycles/mm)"}, "range": [0, 2.0 * nyq / 1000.0], "zeroline": False},
        {"title": {"text": "Modulation transfer (0 to 1)"}, "range": [0, 1.05]},
        shapes=shapes,
        annotations=annotations,
    )
    caption = (f"Pixel pitch {format_quantity(pitch, 'm')}, full fill: the response at Nyquist is 2/π = 0.637. "
               "Detail beyond Nyquist (red) aliases to coarser patterns.")
    return Chart("chart-aperture", "Pixel aperture", {"data": data, "layout": layout}, caption)


ChartBuilder = Callable[[ChannelResult], "Chart | None"]

CHANNEL_CHARTS: tuple[ChartBuilder, ...] = (
    folding_chart, filter_response_chart, trade_off_chart, noise_budget_chart, hold_chart, aperture_chart,
)
"""The charts of a channel page, in page order.  Append new chart functions here."""


def channel_charts(result: ChannelResult, builders: Sequence[ChartBuilder] = CHANNEL_CHARTS) -> list[Chart]:
    """Every chart that applies to the channel, in page order; element ids are unique."""
    charts = [c for c in (build(result) for build in builders) if c is not None]
    ids = [c.id for c in charts]
    if len(set(ids)) != len(ids):
        raise ValueError(f"chart ids repeat on one page: {ids}")
    return charts
