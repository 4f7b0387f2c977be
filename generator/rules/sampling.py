"""Rules about sampling and the anti-aliasing filter."""

from __future__ import annotations

import math
from collections.abc import Iterator

from ..analysis import ChannelResult
from ..analysis.sampling import (
    SamplingResult,
    corner_for_flatness,
    order_for_tone,
    rate_clearing_transition,
    rate_for_decimation_passband,
    rate_for_order,
    rate_for_rejection,
)
from ..dsp import folding
from ..dsp.filters import AnalogFilter, OrderDesign
from ..dsp.sampling import alias_frequency
from ..model import System
from ..quantities import format_quantity
from . import Hit, beyond, channel_rule, short_of


@channel_rule(
    "below-nyquist",
    "error",
    "Sample rate below twice the band",
    """A band reaching f_high can only be captured when fs >= 2 f_high (Nyquist 1928,
    Shannon 1949). Below that, the top of the band folds onto itself and no filter can
    separate it. Raise the rate, or narrow the band.""",
    kinds=("input", "output"),
    tags=("sampling", "rate-or-filter"),
)
def below_nyquist(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    if s is None or not short_of(s.rate_hz, 2 * s.band_high_hz):
        return
    yield Hit(
        f"rate {format_quantity(s.rate_hz, 'Hz')} cannot carry a band up to "
        f"{format_quantity(s.band_high_hz, 'Hz')}: the Nyquist rate 2 x f_high is "
        f"{format_quantity(2 * s.band_high_hz, 'Hz')}; raise the rate to at least that (more, to leave the "
        f"filter room) or lower the band top to {format_quantity(s.nyquist_hz, 'Hz')}",
        "conversion.rate",
    )


# ---------------------------------------------------------------------------------------------
# The anti-aliasing filter
# ---------------------------------------------------------------------------------------------

def _hz(value: float) -> str:
    return format_quantity(value, "Hz")


def _db(value: float) -> str:
    return f"{value:.1f} dB"


def _dbfs(value: float) -> str:
    return f"{value:.1f} dBFS"


def _ordinal(n: int) -> str:
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"


def _describe(filt: AnalogFilter) -> str:
    return f"{_ordinal(filt.order)}-order {filt.family} at {_hz(filt.corner_hz)}"


def _describe_design(d: OrderDesign) -> str:
    return f"{_ordinal(d.order)}-order {d.family} at {_hz(d.corner_hz)}"


def _order_advice(s: SamplingResult, family: str | None) -> str:
    """"use a 9th-order butterworth at 1.31 kHz (a 5th-order elliptic also does)"; "" if none fits."""
    best = s.best_least_order()
    if best is None:
        return ""
    own = s.least_orders.get(family) if family else None
    if own is None or own.family == best.family:
        return f"use a {_describe_design(best)}"
    if own.order == best.order:
        return f"use a {_describe_design(own)}"
    return f"use a {_describe_design(own)} (a {_describe_design(best)} also does)"


def _skip_alias_checks(s: SamplingResult | None) -> bool:
    return s is None or not s.has_input_figures or short_of(s.rate_hz, 2 * s.band_high_hz)


@channel_rule(
    "alias-rejection",
    "error",
    "Not enough attenuation where content folds onto the band",
    """Everything in k fs - f_high .. k fs + f_high (k >= 1) folds onto the band (Oppenheim &
    Schafer ch. 4). It must arrive below the channel's floor, so the least attenuation over all of
    those bands (not only at fs - f_high: a chebyshev2 or elliptic stopband ripples back up, and an
    even-order one tends to its floor as f grows) must reach out_of_band - floor, where the floor is
    the required snr below the signal at peak (peak in dBFS = 20 log10(V_pk / full-scale
    amplitude), taken as 0 dBFS when unknown), or, without an snr, the quantization floor of a
    full-scale sine, -(6.0206 N + 1.7609) dBFS, and out_of_band defaults to 0 dBFS (ADI MT-001,
    MT-002). On a delta-sigma converter the decimation filter's stopband rejection adds to the
    analog filter's loss, except within its stopband edge of every multiple of the modulator rate
    f_mod (there content folds through the modulator itself, and in its own transition band), where
    only the analog filter counts; no analog filter counts as 0 dB. A decimation filter
    system.toml does not describe earns no credit; an unknown modulator rate is reported.""",
    tags=("sampling", "rate-or-filter"),
)
def alias_rejection(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    if s is None or _skip_alias_checks(s):
        return
    if s.filter_problem:
        yield Hit(f"the [filter] cannot be designed: {s.filter_problem}; fix its values", "filter")
        return
    need = s.required_alias_rejection_db
    have = s.alias_rejection_db
    if need is None or have is None:
        return
    filt = s.filter
    conv_id = result.channel.conversion.converter or ""
    if s.delta_sigma and s.decimation is not None and not s.decimation.modulator_rate_hz:
        yield from _modulator_unknown(s, need, conv_id)
        if filt is None:
            return
    if not short_of(have, need):
        return
    if filt is None and not s.delta_sigma:
        return  # filter-missing reports it
    undescribed = (f"; converter '{conv_id}' does not describe its decimation filter (passband, stopband, "
                   "stopband_rejection in system.toml), so it is given no credit" if s.delta_sigma
                   and s.decimation is None else "")
    where = _worst_place(s)
    if s.alias_rejection_source == folding.DIGITAL and s.decimation is not None:
        dec = s.decimation
        analog = have - dec.rejection_db
        verb = "make the analog filter give" if filt is not None else "add an analog filter giving"
        yield Hit(
            f"{where}: the decimation filter rejects it by {_db(dec.rejection_db)}"
            f"{f' and {_describe(filt)} by {_db(analog)}' if filt is not None else ''}, {_db(need)} needed "
            f"for out-of-band content at {_dbfs(s.out_of_band_dbfs)} to fold below the "
            f"{_dbfs(s.floor_dbfs or 0.0)} floor: {verb} {_db(need - dec.rejection_db)} there, or choose a converter "
            "with more stopband rejection",
            "filter.order" if filt is not None else "conversion.converter",
        )
        return
    transition = _transition_hit(s, need)
    if transition is not None:
        yield transition
    if filt is None:  # a delta-sigma input with no analog filter at all
        advice = _order_advice(s, None).removeprefix("use ")
        yield Hit(
            f"no analog filter ahead of the delta-sigma modulator: {_modulator_place(s)} with 0 dB of rejection, "
            f"{_db(need)} needed{undescribed}: add a [filter]{', e.g. ' + advice if advice else ''}",
            "conversion.converter",
        )
        return
    if transition is not None and s.alias_worst_band == folding.TRANSITION:
        return
    advice = _order_advice(s, filt.family)
    fixes = []
    if s.alias_worst_band == folding.FOLD and not s.delta_sigma:
        rate = rate_for_rejection(s, need)
        if rate is not None:
            fixes.append(f"raise the rate to at least {_hz(rate)}")
    if advice:
        fixes.append(advice)
    fix = ", or ".join(fixes) if fixes else "lower out_of_band or raise the rate"
    yield Hit(
        f"{where}; {_describe(filt)} gives {_db(have)} there, {_db(need)} needed{undescribed}: {fix}",
        "filter.order",
    )


def _worst_place(s: SamplingResult) -> str:
    """'content at 29.6 kHz folds onto 1.6 kHz': where the least rejection lies, in words."""
    f = s.alias_worst_hz
    if f is None or math.isinf(f):
        return (f"content ever higher above the band (the filter's stopband floor, approached as the frequency "
                f"grows) folds onto it at {_hz(s.rate_hz)}")
    if s.alias_worst_band == folding.MODULATOR and s.decimation is not None and s.decimation.modulator_rate_hz:
        f_mod = s.decimation.modulator_rate_hz
        return (f"content at {_hz(f)}, near the modulator rate {_hz(f_mod)}, folds through the modulator onto "
                f"{_hz(alias_frequency(f, f_mod))}")
    return f"content at {_hz(f)} folds onto {_hz(alias_frequency(f, s.rate_hz))}"


def _modulator_place(s: SamplingResult) -> str:
    """Where content folds through the modulator, in words."""
    if s.alias_worst_band == folding.MODULATOR:
        return _worst_place(s)
    f_mod = s.modulator_rate_hz
    if f_mod is None:
        return "content near the modulator rate folds through the modulator onto the band"
    return (f"content at {_hz(f_mod - s.band_high_hz)}, near the modulator rate {_hz(f_mod)}, folds through the "
            f"modulator onto {_hz(s.band_high_hz)}")


def _transition_hit(s: SamplingResult, need: float) -> Hit | None:
    """The first alias inside the decimation filter's transition band (below its stopband edge), where
    it rejects nothing and only the analog filter counts; None when that is not the case or suffices."""
    dec = s.decimation
    if dec is None or not s.first_alias_hz < dec.stopband_hz:
        return None
    got = (s.alias_rejection_db if s.alias_worst_band == folding.TRANSITION and s.alias_rejection_db is not None
           else s.filter_rejection_at_first_alias_db or 0.0)
    if not short_of(got, need):
        return None
    f = s.alias_worst_hz if s.alias_worst_band == folding.TRANSITION and s.alias_worst_hz else s.first_alias_hz
    rate = rate_clearing_transition(s)
    fix = f"raise the rate to at least {_hz(rate)}" if rate is not None else "raise the rate"
    analog = f"{_describe(s.filter)} gives {_db(got)}" if s.filter is not None else "no analog filter"
    return Hit(
        f"content at {_hz(f)} folds onto {_hz(alias_frequency(f, s.rate_hz))}, inside the decimation filter's "
        f"transition band (below its stopband edge {_hz(dec.stopband_hz)}), where it rejects nothing; "
        f"{_db(need)} needed there ({analog}): {fix}, or lower the band top",
        "conversion.rate",
    )


def _modulator_unknown(s: SamplingResult, need: float, conv_id: str) -> Iterator[Hit]:
    """A delta-sigma input whose modulator rate is unknown: what folds through the modulator cannot
    be placed, so it is said, not passed silently (an error when there is no analog filter at all)."""
    if s.filter is None:
        yield Hit(
            f"no analog filter ahead of the delta-sigma modulator: content near the modulator rate folds "
            f"through it with 0 dB of rejection, {_db(need)} needed; converter '{conv_id}' gives no "
            "modulator_rate or oversampling_ratios, so where it lies is not known either: add a [filter] and "
            "give the modulator rate in system.toml",
            "conversion.converter",
        )
        return
    yield Hit(
        f"converter '{conv_id}' gives no modulator_rate or oversampling_ratios, so whether {_describe(s.filter)} "
        f"rejects what folds through the modulator ({_db(need)} needed there) cannot be checked: give the "
        "modulator rate in system.toml",
        "conversion.converter",
        severity="warning",
    )


@channel_rule(
    "band-edge-droop",
    "warning",
    "The filter loses too much at the top of the band",
    """The anti-aliasing filter's largest loss inside the band, max A(f) for f_low <= f <= f_high with
    A(f) = -20 log10 |H(j 2 pi f)| relative to its peak gain, must not exceed the allowed flatness
    (default 0.5 dB). For a monotonic family it lies at the band top: a butterworth with its -3 dB
    corner at fc loses 10 log10(1 + (f_high / fc)^(2n)) there (Williams & Taylor), and the corner
    that just meets the flatness is fc = f_high / (10^(flatness/10) - 1)^(1/2n). A chebyshev1 or
    elliptic loses up to its ripple anywhere inside its passband (an even order at DC). On a
    delta-sigma converter the band must also sit inside the decimation filter's passband,
    f_high <= passband x fs.""",
    tags=("sampling", "rate-or-filter"),
)
def band_edge_droop(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    if s is None or not s.has_input_figures:
        return
    dec = s.decimation
    passband_fix = rate_for_decimation_passband(s)
    if dec is not None and passband_fix is not None and beyond(s.band_high_hz, dec.passband_hz):
        ratio, rate = passband_fix
        yield Hit(
            f"band top {_hz(s.band_high_hz)} lies above the decimation filter's passband edge "
            f"{_hz(dec.passband_hz)} ({ratio:g} x {_hz(s.rate_hz)}), where its response is not specified: "
            f"raise the rate to at least {_hz(rate)}, or lower the band top to "
            f"{_hz(dec.passband_hz)}",
            "conversion.rate",
        )
    filt = s.filter
    loss = s.passband_loss_db
    if filt is None or loss is None or not beyond(loss, s.flatness_db):
        return
    moved = corner_for_flatness(s)
    if moved is None:
        fix = f"lower the ripple to {_db(s.flatness_db)} or less"
    else:
        fix = f"raise the corner to {_hz(moved.corner_hz)}"
        if s.required_alias_rejection_db is not None and moved.alias_rejection_db is not None:
            fix += (f" (it then rejects aliases by {_db(moved.alias_rejection_db)}, "
                    f"{_db(s.required_alias_rejection_db)} needed)")
    advice = _order_advice(s, filt.family)
    at = s.passband_loss_at_hz if s.passband_loss_at_hz is not None else s.band_high_hz
    place = (f"at the band top {_hz(s.band_high_hz)}" if math.isclose(at, s.band_high_hz, rel_tol=1e-9)
             else f"at {_hz(at)}, inside the band {_hz(s.band_low_hz)} to {_hz(s.band_high_hz)}")
    yield Hit(
        f"{_describe(filt)} loses {loss:.2f} dB {place}, "
        f"{s.flatness_db:.2f} dB allowed: {fix}{', or ' + advice if advice else ''}",
        "filter.corner",
    )


@channel_rule(
    "filter-missing",
    "error",
    "No anti-aliasing filter on a converter without one of its own",
    """A converter that samples at the output rate (SAR, pipeline, flash) folds everything above
    fs - f_high onto the band; only an analog filter ahead of it can remove that content. An
    input on such a converter needs a [filter] (family, order and corner; a family alone lets
    specfold size it). A delta-sigma converter's decimation filter does this job near fs.""",
    tags=("sampling", "rate-or-filter"),
)
def filter_missing(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    ch = result.channel
    if s is None or not s.has_input_figures or s.delta_sigma or ch.filter is not None:
        return
    need = s.required_alias_rejection_db
    best = s.best_least_order()
    butter = s.least_orders.get("butterworth")
    if best is None:
        fix = "add a [filter] and raise the rate (no filter of 20 poles or fewer fits this rate)"
    elif butter is not None and butter.family != best.family:
        fix = f"add a [filter], e.g. a {_describe_design(butter)} or a {_describe_design(best)}"
    else:
        fix = f"add a [filter], e.g. a {_describe_design(best)}"
    needed = f" ({_db(need)} needed there)" if need is not None else ""
    yield Hit(
        f"no anti-aliasing filter on a {s.architecture or 'non-oversampling'} converter: content from "
        f"{_hz(s.first_alias_hz)} up folds into the band unattenuated{needed}: {fix}",
        "conversion.converter",
    )


@channel_rule(
    "filter-impractical",
    "warning",
    "No practical filter can meet the mask at this rate",
    """The least order meeting both the flatness at f_high and the required rejection at the
    stop edge (fs - f_high, or f_mod - f_high on a delta-sigma converter) is found per family
    with scipy's analog order formulas (butterworth n >= log10(es2/ep2) / (2 log10 r),
    chebyshev n >= acosh(sqrt(es2/ep2)) / acosh r, elliptic from complete elliptic integrals,
    with r = f_stop / f_high, ep2 = 10^(flatness/10) - 1, es2 = 10^(A/10) - 1; Williams &
    Taylor) and by search for bessel. When every family needs more than 20 poles the rate
    leaves the filter too little room.""",
    tags=("sampling", "rate-or-filter"),
)
def filter_impractical(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    if _skip_alias_checks(s) or s is None or not s.least_orders or s.best_least_order() is not None:
        return
    need = s.required_alias_rejection_db or 0.0
    edge = s.stop_edge_hz or s.first_alias_hz
    ratio = edge / s.band_high_hz
    fix = "raise the rate, relax the flatness, or lower out_of_band"
    rate8 = rate_for_order(s, "elliptic", 8) if s.decimation is None else None
    if rate8 is not None:
        fix = f"raise the rate to at least {_hz(rate8)} (then an 8th-order elliptic fits)"
    yield Hit(
        f"no filter family of 20 poles or fewer gives {_db(need)} at {_hz(edge)} while losing at most "
        f"{s.flatness_db:.2f} dB at {_hz(s.band_high_hz)} (transition ratio {ratio:.4g}): {fix}",
        "conversion.rate",
    )


@channel_rule(
    "interference-folds",
    "warning",
    "A declared tone folds into the band above the floor",
    """A tone at f is seen at f_a = |f - fs round(f / fs)| (Nyquist zone z = floor(2 f / fs) + 1;
    even zones arrive spectrally inverted; Oppenheim & Schafer ch. 4, ADI MT-002). On a
    delta-sigma converter the modulator folds it first, at f_mod. The tone is attenuated by the
    analog filter at f (and by the decimation filter's stopband rejection where it applies) and
    lands at level - attenuation dBFS; the finding is raised when it lands inside the band
    above the channel's floor (see alias-rejection).""",
    tags=("sampling", "rate-or-filter"),
)
def interference_folds(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    if s is None or not s.has_input_figures or s.floor_dbfs is None:
        return
    for tone in s.tones:
        landed = tone.landed_dbfs
        if not (tone.folded and tone.in_band) or landed is None or landed <= s.floor_dbfs:
            continue
        short = landed - s.floor_dbfs
        what = f" ({tone.source})" if tone.source else ""
        by = []
        if tone.analog_attenuation_db > 0:
            by.append(f"{_db(tone.analog_attenuation_db)} from the analog filter")
        if tone.digital_attenuation_db > 0:
            by.append(f"{_db(tone.digital_attenuation_db)} from the decimation filter")
        got = " and ".join(by) if by else "no attenuation"
        fixes = [f"add {_db(short)} of rejection at {_hz(tone.frequency_hz)}"]
        steeper = order_for_tone(s, tone, short)
        if steeper is not None:
            fixes[0] += f" (a {_describe(steeper)} gives it)"
        fixes.append("remove it at its source")
        yield Hit(
            f"the {_hz(tone.frequency_hz)} tone{what} at {_dbfs(tone.level_dbfs or 0.0)} folds from zone "
            f"{tone.zone}{' (inverted)' if tone.inverted else ''} onto {_hz(tone.alias_hz)}, inside the band; "
            f"it gets {got} and lands at {_dbfs(landed)}, {_db(short)} above the {_dbfs(s.floor_dbfs)} floor: "
            + ", or ".join(fixes),
            f"interference.{tone.index}",
        )
