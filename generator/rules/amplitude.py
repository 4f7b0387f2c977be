"""Rules about amplitude, bits and the noise floor of input channels."""

from __future__ import annotations

from collections.abc import Iterator

from ..analysis import ChannelResult
from ..analysis.amplitude import (
    TARGET_USAGE,
    AmplitudeResult,
    gain_for_usage,
    jitter_for_snr,
    over_full_scale_db,
    resolution_fix,
    sensor_noise_for_snr,
    snr_needed_from,
)
from ..dsp import quantization as q
from ..model import Channel, System
from ..quantities import Span, Unit, format_in_unit, format_percent, format_quantity
from . import Hit, beyond, channel_rule, short_of

UNDERUSED_BELOW = 0.1
"""Range usage under which a channel is flagged: a tenth of full scale (common practice)."""


def _span(span: Span) -> str:
    if span.bipolar:
        return f"±{format_quantity(span.high, span.dim)}"
    return f"{format_quantity(span.low, span.dim)}..{format_quantity(span.high, span.dim)}"


def _db(value: float) -> str:
    return f"{value:.1f} dB"


def _gain(value: float) -> str:
    return f"{value:.3g} V/V ({q.amplitude_db(value):.1f} dB)"


def _path(ch: Channel, *paths: str) -> str:
    """The first of ``paths`` the file actually writes (so the finding points at it), else the last."""
    return next((p for p in paths if p in ch.lines), paths[-1])


def _peak_text(ch: Channel) -> str:
    peak = ch.signal.peak
    return "the peak" if peak is None else f"the peak of {format_in_unit(peak, ch.unit)}"


def _gain_fix(ch: Channel, a: AmplitudeResult) -> str:
    """'a gain of about 9.47 V/V (19.5 dB)': the gain that puts the peak at about 90 % of full scale.

    On an input the converter sees peak x gain, on an output it must produce peak / gain."""
    gain = ch.conversion.gain
    wanted = gain_for_usage(ch, a)
    where = "ahead of the converter" if ch.kind == "input" else "after the converter"
    if gain == 1.0:
        return f"a gain of about {_gain(wanted)} {where}"
    return f"changing the gain from {_gain(gain)} to about {_gain(wanted)}"


def _at_converter(ch: Channel, a: AmplitudeResult) -> str:
    """'gives 12 V at the converter' (input) or 'needs 12 V from the converter' (output)."""
    volts = format_quantity(a.peak_volts or 0.0, "V")
    return f"gives {volts} at the converter" if ch.kind == "input" else f"needs {volts} from the converter"


@channel_rule(
    "clipping",
    "error",
    "Peak beyond the converter's full scale",
    """The signal at the converter, V_pk = peak x sensitivity x gain on an input (peak / gain on an
    output, the gain being after the D/A converter), must stay within the full scale: V_pk <= the
    full-scale amplitude, half the range's width (a unipolar 0..5 V range holds a sine of 2.5 V
    about its centre). Beyond it the converter clips and every figure downstream is wrong. Change
    the gain, choose a less sensitive sensor or a wider full scale.""",
    kinds=("input", "output"),
    tags=("amplitude", "gain-or-bits"),
)
def clipping(result: ChannelResult, system: System) -> Iterator[Hit]:
    a = result.amplitude
    ch = result.channel
    conv = ch.conversion
    if a is None or a.peak_volts is None or conv.full_scale is None:
        return
    if not beyond(a.peak_volts, a.full_scale_amplitude_volts):
        return
    over = over_full_scale_db(a) or 0.0
    other = "a less sensitive sensor" if ch.kind == "input" else "a converter with a wider range"
    yield Hit(
        f"{_peak_text(ch)} {_at_converter(ch, a)}, {_db(over)} beyond the {_span(conv.full_scale)} full scale "
        f"(amplitude {format_quantity(a.full_scale_amplitude_volts, 'V')}); try {_gain_fix(ch, a)} "
        f"(about {format_percent(TARGET_USAGE)} of full scale), {other} or a wider full scale",
        _path(ch, "conversion.gain", "signal.peak"),
    )


@channel_rule(
    "range-underused",
    "warning",
    "Peak uses less than a tenth of full scale",
    """Range usage = V_pk / full-scale amplitude. A signal below a tenth of full scale (20 dB of
    headroom; a common-practice threshold) wastes more than 3 bits: every contribution fixed in
    volts (quantization, converter noise) grows by the same factor relative to the signal. Change
    the gain so the peak uses about 90 % of full scale, or choose a smaller full scale.""",
    kinds=("input", "output"),
    tags=("amplitude", "gain-or-bits"),
)
def range_underused(result: ChannelResult, system: System) -> Iterator[Hit]:
    a = result.amplitude
    ch = result.channel
    conv = ch.conversion
    usage = None if a is None else a.range_usage
    if a is None or usage is None or usage <= 0 or not short_of(usage, UNDERUSED_BELOW) or conv.full_scale is None:
        return
    yield Hit(
        f"{_peak_text(ch)} {_at_converter(ch, a)}, "
        f"{format_percent(usage)} of the {_span(conv.full_scale)} full scale ({_db(a.headroom_db or 0.0)} "
        f"of headroom); {_gain_fix(ch, a)} would use about {format_percent(TARGET_USAGE)}, "
        "or choose a smaller full scale",
        _path(ch, "conversion.gain", "signal.peak"),
    )


@channel_rule(
    "resolution",
    "error",
    "LSB coarser than the required resolution",
    """One LSB referred to the measurand, q / (sensitivity x gain) with q = FSR / 2^N, must not
    exceed the required `resolution` (on an output, q x gain, the step the driven voltage takes).
    Use more bits (N >= log2(FSR / (resolution x sensitivity x gain))), or raise the gain if the
    peak still fits the full scale.""",
    kinds=("input", "output"),
    tags=("amplitude", "gain-or-bits"),
)
def resolution(result: ChannelResult, system: System) -> Iterator[Hit]:
    a = result.amplitude
    ch = result.channel
    wanted = ch.signal.resolution
    lsb_si = None if a is None else a.lsb_si
    if a is None or lsb_si is None or wanted is None or wanted <= 0 or not beyond(lsb_si, wanted):
        return
    needed = resolution_fix(a, wanted)
    if needed is None:
        return
    factor = needed.gain_factor
    fix = f"use at least {needed.bits} bits"
    usage = a.range_usage
    if usage is not None and usage * factor <= 1.0:
        fix += (
            f", or raise the gain by at least {factor:.3g} x (the peak would then use "
            f"{format_percent(usage * factor)} of full scale)"
        )
    elif usage is not None:
        fix += f"; raising the gain {factor:.3g} x would clip the peak"
    yield Hit(
        f"one LSB is {format_in_unit(lsb_si, ch.unit)} ({format_quantity(a.lsb_volts, 'V')} at the converter, "
        f"{a.bits} bits over {format_quantity(a.full_scale_range_volts, 'V')}), coarser than the required "
        f"{format_in_unit(wanted, ch.unit)}; {fix}",
        _path(ch, "signal.resolution"),
    )


@channel_rule(
    "noise-floor",
    "error",
    "Total SNR below the required SNR",
    """The noise contributions (quantization, sampling jitter, sensor noise), each relative to a
    sine at the channel's peak, add as powers: SNR_total = -10 log10(sum 10^(-SNR_i / 10)). It must
    reach the required `snr`. An output's budget holds the D/A converter's quantization and
    jitter, referred through the gain after it. The message names the largest contribution, the
    one to fix first.""",
    kinds=("input", "output"),
    tags=("amplitude", "rate-or-filter"),
)
def noise_floor(result: ChannelResult, system: System) -> Iterator[Hit]:
    a = result.amplitude
    ch = result.channel
    required = ch.signal.snr_db
    if a is None or a.total_snr_db is None or required is None or not short_of(a.total_snr_db, required):
        return
    top = a.dominant()
    if top is None or top.db is None:
        return
    need = snr_needed_from(a, top.name, required)
    band = ch.signal.band
    rate = ch.conversion.rate
    can_filter = (ch.kind == "input" and not ch.signal.filtered_to_band and band is not None and rate is not None
                  and band[1] - band[0] < rate / 2)
    if need is None:
        fix = "the other contributions alone already miss it, so improve them too"
    elif top.name == "quantization":
        fix = f"it needs {_db(need)}: use more bits or raise the gain so the peak uses more of the range"
        if can_filter:
            fix += ", or filter the data to the band (filtered_to_band) to earn processing gain"
    elif top.name == "sampling jitter":
        fix = f"it needs {_db(need)}"
        most = jitter_for_snr(ch, need)
        if most is not None:
            fix += f": lower the jitter to at most {format_quantity(most, 's')} rms"
    else:
        noise = ch.sensor.noise
        fix = f"it needs {_db(need)}: choose a quieter sensor"
        quieter = sensor_noise_for_snr(ch, a, need)
        if quieter is not None:
            if quieter.density is not None and a.noise_bandwidth_hz:
                per_root_hz = Unit(f"{ch.unit.symbol}/√Hz", ch.unit.factor, ch.unit.dim)
                fix += (f" (at most {format_in_unit(quieter.density, per_root_hz)} over "
                        f"{format_quantity(a.noise_bandwidth_hz, 'Hz')})")
            else:
                fix += f" (at most {format_in_unit(quieter.rms, ch.unit)} rms in the band)"
        if can_filter and noise is not None and noise.density:
            fix += ", or filter the data to the band (filtered_to_band) to narrow the noise bandwidth"
    yield Hit(
        f"total SNR {_db(a.total_snr_db)} at {_peak_text(ch)} is below the required {_db(required)}; "
        f"the largest contribution is {top.name} at {_db(-top.db)} below the signal; {fix}",
        _path(ch, "signal.snr"),
    )


@channel_rule(
    "jitter-limit",
    "error",
    "Sampling jitter alone misses the required SNR",
    """A sine at the band top f_high sampled with rms jitter t_j can reach at most
    SNR_j = -20 log10(2 pi f_high t_j) (ADI MT-007, AN-756), whatever the bits. If that is below the
    required `snr`, lower the jitter to t_j <= 10^(-SNR/20) / (2 pi f_high) or narrow the band. A D/A
    output's update clock jitters the same way. The jitter is the channel's own, else the
    converter's aperture jitter and its clock's added as a root sum of squares (ADI MT-007).""",
    kinds=("input", "output"),
    tags=("amplitude", "gain-or-bits"),
)
def jitter_limit(result: ChannelResult, system: System) -> Iterator[Hit]:
    a = result.amplitude
    ch = result.channel
    required = ch.signal.snr_db
    band = ch.signal.band
    jitter = ch.conversion.total_jitter
    if a is None or a.jitter_snr_db is None or required is None or band is None or jitter is None:
        return
    if not short_of(a.jitter_snr_db, required):
        return
    yield Hit(
        f"{format_quantity(jitter, 's')} rms of sampling jitter limits a sine at "
        f"{format_quantity(band[1], 'Hz')} to {_db(a.jitter_snr_db)}, below the required {_db(required)}; "
        f"lower the jitter to at most {format_quantity(jitter_for_snr(ch, required) or 0.0, 's')} rms "
        "(a cleaner clock or converter), or lower the band top",
        _path(ch, "conversion.jitter", "conversion.converter", "signal.snr"),
    )


@channel_rule(
    "bits-mismatch",
    "warning",
    "Channel states bits or full scale unlike its converter's",
    """A channel inherits `bits` and `full_scale` from its converter. Writing a different value in
    the channel file makes its figures disagree with the hardware it names. Remove the key to
    inherit the converter's value, or correct the converter in system.toml.""",
    tags=("amplitude", "gain-or-bits"),
)
def bits_mismatch(result: ChannelResult, system: System) -> Iterator[Hit]:
    ch = result.channel
    conv = ch.conversion
    converter = system.converters.get(conv.converter) if conv.converter else None
    if converter is None:
        return
    if "bits" in conv.stated and conv.bits is not None and conv.bits != converter.bits:
        yield Hit(
            f"the channel states {conv.bits} bits but converter '{converter.id}' has {converter.bits}; "
            f"the figures use {conv.bits}: remove bits to inherit {converter.bits}, or correct one of the two",
            "conversion.bits",
        )
    fs = conv.full_scale
    if "full_scale" in conv.stated and fs is not None and fs != converter.full_scale:
        yield Hit(
            f"the channel states a full scale of {_span(fs)} but converter '{converter.id}' has "
            f"{_span(converter.full_scale)}; the figures use {_span(fs)}: remove full_scale to inherit "
            "the converter's, or correct one of the two",
            "conversion.full_scale",
        )
