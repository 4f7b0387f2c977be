"""Rules about output (D/A) channels: the hold's droop, image rejection, the drive level."""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from dataclasses import replace

from ..analysis import ChannelResult
from ..analysis.output import filter_loss_db, image_rejection_at
from ..dsp import reconstruction as rec
from ..model import Channel, System
from ..quantities import format_in_unit, format_quantity
from . import Hit, channel_rule


def _path(ch: Channel, *paths: str) -> str:
    """The first of ``paths`` written in the channel's file (findings point at that line)."""
    return next((p for p in paths if p in ch.lines), paths[-1])


def _root(fn: Callable[[float], float], lo: float, hi: float) -> float | None:
    """Where ``fn`` crosses zero between ``lo`` and ``hi``; None without a sign change."""
    try:
        a, b = fn(lo), fn(hi)
        if not (math.isfinite(a) and math.isfinite(b)) or a * b > 0:
            return None
        from scipy.optimize import brentq  # imported when first needed

        return float(brentq(fn, lo, hi, rtol=1e-10))
    except (ValueError, ZeroDivisionError, OverflowError):
        return None


def _db(value: float) -> str:
    return format_quantity(value, "dB")


def _hz(value: float) -> str:
    return format_quantity(value, "Hz")


@channel_rule(
    "zoh-droop",
    "warning",
    "Hold and reconstruction filter lose more than the flatness allows at the band top",
    """A zero-order hold multiplies the output by |sinc(f/fs)|, a loss of -20 log10|sinc(f_high/fs)|
    dB at the band top (ADI MT-017), which adds to the reconstruction filter's own loss there. The
    sum must stay within `flatness`. An ideal inverse-sinc correction of the sample stream
    (`sinc_compensation`) removes the hold's part. Fix: raise the rate, pre-correct the stream,
    or raise the filter corner.""",
    kinds=("output",),
)
def zoh_droop(result: ChannelResult, system: System) -> Iterator[Hit]:
    o = result.output
    if o is None or o.passband_error_db <= o.flatness_db * (1 + 1e-9):
        return
    hold_loss = -(o.zoh_droop_db or 0.0)
    filt_loss = o.filter_droop_db or 0.0
    parts = [f"the hold loses {_db(hold_loss)}" if o.zoh_droop_db is not None else "no hold"]
    if o.filter_droop_db is not None:
        parts.append(f"the filter {_db(filt_loss)}")
    head = (f"at the band top {_hz(o.band_high_hz)} the output loses {_db(o.passband_error_db)} "
            f"({'; '.join(parts)}), more than the flatness {_db(o.flatness_db)}")
    budget = o.flatness_db - filt_loss
    if hold_loss > 0.0 and budget > 0.0:
        rate = rec.min_rate_for_droop(o.band_high_hz, budget)
        fix = (f"raise the rate to at least {_hz(rate)}, or set sinc_compensation = true "
               "to pre-correct the stream for the hold")
    elif hold_loss > 0.0:
        fix = ("the filter alone uses the whole flatness: raise its corner, then raise the rate or set "
               "sinc_compensation = true for the hold")
    else:
        fix = "raise the filter's corner or choose a flatter family"
    yield Hit(f"{head}: {fix}", _path(result.channel, "conversion.hold", "conversion.rate", "signal.flatness"))


@channel_rule(
    "image-rejection",
    "warning",
    "First image not suppressed enough",
    """A held output carries images of every tone f at k fs +/- f (ADI MT-017). The hold puts the
    first image, at fs - f_high, 20 log10(f_high/(fs - f_high)) dB relative to the tone; the
    reconstruction filter must add the rest of the required suppression there:
    hold + filter >= `image_rejection` (default: the DAC's quantization floor 6.02 N + 1.76 dB,
    ADI MT-001). Fix: raise the rate (the image moves up, both parts grow), or steepen the filter.""",
    kinds=("output",),
)
def image_rejection(result: ChannelResult, system: System) -> Iterator[Hit]:
    o = result.output
    ch = result.channel
    if o is None or o.required_image_rejection_db is None:
        return
    required = o.required_image_rejection_db
    if o.image_rejection_db >= required - 1e-9:
        return
    filt = ch.filter
    have = [f"the hold gives {_db(o.hold_image_attenuation_db)}" if o.hold == "zero-order" else "no hold"]
    have.append(f"the filter {_db(o.filter_image_attenuation_db)}" if o.filter_image_attenuation_db is not None
                else "no designed reconstruction filter")
    needed = o.filter_needed_at_image_db if o.filter_needed_at_image_db is not None else required
    head = (f"the first image at {_hz(o.first_image_hz)} sits {_db(o.image_rejection_db)} below the tone "
            f"({'; '.join(have)}); {_db(required)} required")
    fixes: list[str] = []
    rate = _root(lambda fs: image_rejection_at(ch, fs) - required, o.rate_hz, o.rate_hz * 1e4)
    if rate is not None:
        fixes.append(f"raise the rate to at least {_hz(rate)}")
    if filt is not None and filt.order is not None and filt.corner is not None:
        def excess(corner: float) -> float:
            return (filter_loss_db(replace(filt, corner=corner), o.first_image_hz) or 0.0) - needed

        corner = _root(excess, o.first_image_hz * 1e-6, filt.corner)
        target = f"a filter with at least {_db(needed)} at {_hz(o.first_image_hz)}"
        if corner is not None and corner > o.band_high_hz:
            fixes.append(f"use {target} (this family and order: corner at most {_hz(corner)}, "
                         "check the band-top droop) or raise the order")
        else:
            fixes.append(f"use {target} (a higher order or a steeper family)")
    else:
        fixes.append(f"add a reconstruction filter with at least {_db(needed)} at {_hz(o.first_image_hz)}")
    yield Hit(f"{head}: {', or '.join(fixes)}", _path(ch, "filter", "conversion.rate", "signal.image_rejection"))


@channel_rule(
    "output-overrange",
    "error",
    "Output can drive beyond what the driven device accepts",
    """The largest drive an output can produce is the converter's full-scale peak times the gain
    after it. When that exceeds the driven device's `limit`, a wrong or saturated command can
    overdrive the actuator. Checked where the channel's unit is a voltage. Fix: lower the gain,
    or narrow the converter's range.""",
    kinds=("output",),
)
def output_overrange(result: ChannelResult, system: System) -> Iterator[Hit]:
    o = result.output
    ch = result.channel
    limit = ch.signal.limit
    fs = ch.conversion.full_scale
    if o is None or o.output_peak_volts is None or limit is None or fs is None or ch.unit.dim != "V":
        return
    if o.output_peak_volts <= limit * (1 + 1e-9):
        return
    gain_max = limit / fs.peak
    yield Hit(
        f"full scale {format_quantity(fs.peak, 'V')} peak x gain {ch.conversion.gain:.4g} gives "
        f"{format_quantity(o.output_peak_volts, 'V')} peak, above the limit {format_in_unit(limit, ch.unit)}: "
        f"lower the gain to at most {gain_max:.4g} ({20 * math.log10(gain_max):.3g} dB), "
        "or clamp the converter's range to the limit",
        _path(ch, "conversion.gain", "signal.limit"),
    )
