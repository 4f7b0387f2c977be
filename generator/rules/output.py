"""Rules about output (D/A) channels: the hold's droop, image rejection, the drive level."""

from __future__ import annotations

import math
from collections.abc import Iterator

from ..analysis import ChannelResult
from ..analysis.output import corner_for_image_rejection, droop_parts, gain_for_limit, rate_for_image_rejection
from ..model import Channel, System
from ..quantities import format_in_unit, format_quantity
from . import Hit, beyond, channel_rule, short_of


def _path(ch: Channel, *paths: str) -> str:
    """The first of ``paths`` written in the channel's file (findings point at that line)."""
    return next((p for p in paths if p in ch.lines), paths[-1])


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
    tags=("rate-or-filter",),
)
def zoh_droop(result: ChannelResult, system: System) -> Iterator[Hit]:
    o = result.output
    if o is None or not beyond(o.passband_error_db, o.flatness_db):
        return
    loss = droop_parts(result.channel, o)
    at, hold_loss, filt_loss = loss.at_hz, loss.hold_db, loss.filter_db
    parts = [f"the hold loses {_db(hold_loss)}" if o.zoh_droop_db is not None else "no hold"]
    if o.filter_droop_db is not None:
        parts.append(f"the filter {_db(filt_loss)}")
    place = (f"at the band top {_hz(at)}" if math.isclose(at, o.band_high_hz, rel_tol=1e-9)
             else f"at {_hz(at)}, inside the band")
    head = (f"{place} the output loses {_db(o.passband_error_db)} "
            f"({'; '.join(parts)}), more than the flatness {_db(o.flatness_db)}")
    if loss.rate_hz is not None:
        fix = (f"raise the rate to at least {_hz(loss.rate_hz)}, or set sinc_compensation = true "
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
    "An image not suppressed enough",
    """A held output carries images of every tone f at g = k fs +/- f, k >= 1 (ADI MT-017). The
    hold puts each 20 log10(g / f) dB below its tone (|sinc(g/fs)| / |sinc(f/fs)| = f / g), the
    reconstruction filter adds its loss A(g); the least of hold + filter over every image of every
    tone in the band (not only the first image, fs - f_high: a chebyshev2 or elliptic stopband
    ripples back up) must reach `image_rejection` (default: the DAC's quantization floor
    6.02 N + 1.76 dB, ADI MT-001). Fix: raise the rate (the images move up), or steepen the
    filter.""",
    kinds=("output",),
    tags=("rate-or-filter",),
)
def image_rejection(result: ChannelResult, system: System) -> Iterator[Hit]:
    o = result.output
    ch = result.channel
    if o is None or o.required_image_rejection_db is None:
        return
    required = o.required_image_rejection_db
    if not short_of(o.image_rejection_db, required):
        return
    filt = ch.filter
    where = ("images ever higher above the band (the filter's stopband floor, approached as the frequency grows)"
             if math.isinf(o.image_worst_hz) else
             f"the image at {_hz(o.image_worst_hz)} of the {_hz(o.image_worst_tone_hz)} tone")
    hold = "the hold and the filter together" if o.hold == "zero-order" else "the filter (no hold)"
    head = (f"{where} sits {_db(o.image_rejection_db)} below its tone ({hold}; the first image, at "
            f"{_hz(o.first_image_hz)}, gets {_db(o.hold_image_attenuation_db)} from the hold and "
            f"{_db(o.filter_image_attenuation_db or 0.0)} from the filter); {_db(required)} required")
    fixes: list[str] = []
    rate = rate_for_image_rejection(ch, o, required)
    if rate is not None:
        fixes.append(f"raise the rate to at least {_hz(rate)}")
    if filt is not None and filt.order is not None and filt.corner is not None:
        corner = corner_for_image_rejection(ch, o, required)
        if corner is not None:
            fixes.append(f"lower the filter's corner to at most {_hz(corner)} (check the band-top droop), "
                         "or raise the order")
        else:
            fixes.append("use a higher order or a steeper family")
    else:
        needed = o.filter_needed_at_image_db if o.filter_needed_at_image_db is not None else required
        fixes.append(f"add a reconstruction filter with at least {_db(needed)} at {_hz(o.first_image_hz)} "
                     "and beyond")
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
    tags=("gain-or-bits",),
)
def output_overrange(result: ChannelResult, system: System) -> Iterator[Hit]:
    o = result.output
    ch = result.channel
    limit = ch.signal.limit
    fs = ch.conversion.full_scale
    if o is None or o.output_peak_volts is None or limit is None or fs is None or ch.unit.dim != "V":
        return
    if not beyond(o.output_peak_volts, limit):
        return
    gain_max = gain_for_limit(ch)
    if gain_max is None:
        return
    yield Hit(
        f"full scale {format_quantity(fs.peak, 'V')} peak x gain {ch.conversion.gain:.4g} gives "
        f"{format_quantity(o.output_peak_volts, 'V')} peak, above the limit {format_in_unit(limit, ch.unit)}: "
        f"lower the gain to at most {gain_max:.4g} ({20 * math.log10(gain_max):.3g} dB), "
        "or clamp the converter's range to the limit",
        _path(ch, "conversion.gain", "signal.limit"),
    )
