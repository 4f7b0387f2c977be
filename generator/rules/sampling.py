"""Rules about sampling and the anti-aliasing filter."""

from __future__ import annotations

from collections.abc import Iterator

from ..analysis import ChannelResult
from ..analysis.sampling import DIGITAL, SamplingResult
from ..dsp import filters as flt
from ..dsp.filters import AnalogFilter, OrderDesign
from ..model import System
from ..quantities import format_quantity
from . import Hit, channel_rule


@channel_rule(
    "below-nyquist",
    "error",
    "Sample rate below twice the band",
    """A band reaching f_high can only be captured when fs >= 2 f_high (Nyquist 1928,
    Shannon 1949). Below that, the top of the band folds onto itself and no filter can
    separate it. Raise the rate, or narrow the band.""",
    kinds=("input", "output"),
)
def below_nyquist(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    if s is None or s.rate_hz >= 2 * s.band_high_hz:
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

_TOL_DB = 1e-6


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
    return s is None or not s.has_input_figures or s.rate_hz < 2 * s.band_high_hz


@channel_rule(
    "alias-rejection",
    "error",
    "Not enough attenuation where content folds onto the band",
    """Content at fs - f_high folds onto the top of the band. It must arrive below the channel's
    floor, so the anti-aliasing must give A(fs - f_high) >= out_of_band - floor, where the floor
    is the required snr below the signal at peak (peak in dBFS = 20 log10(peak x sensitivity x
    gain / full-scale peak), taken as 0 dBFS when unknown), or, without an snr, the quantization
    floor of a full-scale sine, -(6.0206 N + 1.7609) dBFS, and out_of_band defaults to 0 dBFS
    (ADI MT-001, MT-002). On a delta-sigma converter the decimation filter's stopband rejection
    covers content near fs, and the analog filter must give the same margin at f_mod - f_high,
    where content folds through the modulator itself; the weaker of the two is reported.""",
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
    if need is None or have is None or have >= need - _TOL_DB:
        return
    filt = s.filter
    if s.decimation is not None and s.alias_rejection_source == DIGITAL:
        dec = s.decimation
        if dec.attenuation_db(s.first_alias_hz) <= 0:
            stop_frac = dec.stopband_hz / s.rate_hz
            fix = (f"raise the rate to at least {_hz(s.band_high_hz / (1 - stop_frac))}" if stop_frac < 1
                   else "raise the rate")
            yield Hit(
                f"the first alias {_hz(s.first_alias_hz)} lies below the decimation filter's stopband edge "
                f"{_hz(dec.stopband_hz)}, where its rejection is not specified; {_db(need)} needed there "
                f"(the analog filter gives {_db(have)}): {fix}, or lower the band top",
                "conversion.rate",
            )
            return
        yield Hit(
            f"the decimation filter rejects content near fs by {_db(dec.rejection_db)}"
            f"{f' (with the analog filter, {_db(have)})' if filt is not None else ''}, "
            f"{_db(need)} needed at {_hz(s.first_alias_hz)} for out-of-band content at "
            f"{_dbfs(s.out_of_band_dbfs)} to fold below the {_dbfs(s.floor_dbfs or 0.0)} floor: add an analog filter "
            f"giving {_db(need - have + (s.filter_rejection_at_first_alias_db or 0.0))} at {_hz(s.first_alias_hz)}, "
            "or choose a converter with more stopband rejection",
            "filter.order" if filt is not None else "conversion.converter",
        )
        return
    if filt is None:
        return  # filter-missing reports it
    if s.decimation is not None:
        edge = s.modulator_alias_hz or 0.0
        advice = _order_advice(s, filt.family)
        yield Hit(
            f"the modulator rate {_hz(edge + s.band_high_hz)} folds {_hz(edge)} onto the band top "
            f"{_hz(s.band_high_hz)}; {_describe(filt)} gives {_db(have)} there, {_db(need)} needed"
            f"{': ' + advice if advice else ''}",
            "filter.order",
        )
        return
    fixes = []
    f_ok = flt.frequency_for_attenuation(filt, need)
    if f_ok is not None:
        fixes.append(f"raise the rate to at least {_hz(f_ok + s.band_high_hz)}")
    advice = _order_advice(s, filt.family)
    if advice:
        fixes.append(advice)
    fix = ", or ".join(fixes) if fixes else "lower out_of_band or raise the rate"
    yield Hit(
        f"rate {_hz(s.rate_hz)} folds {_hz(s.first_alias_hz)} onto the band top {_hz(s.band_high_hz)}; "
        f"{_describe(filt)} gives {_db(have)} there, {_db(need)} needed: {fix}",
        "filter.order",
    )


@channel_rule(
    "band-edge-droop",
    "warning",
    "The filter loses too much at the top of the band",
    """The anti-aliasing filter's loss at the top of the band, A(f_high) = -20 log10 |H(j 2 pi
    f_high)|, must not exceed the allowed flatness (default 0.5 dB). For a butterworth with its
    -3 dB corner at fc this is 10 log10(1 + (f_high / fc)^(2n)) (Williams & Taylor); the corner
    that just meets the flatness is fc = f_high / (10^(flatness/10) - 1)^(1/2n). On a
    delta-sigma converter the band must also sit inside the decimation filter's passband,
    f_high <= passband x fs.""",
)
def band_edge_droop(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    if s is None or not s.has_input_figures:
        return
    dec = s.decimation
    if dec is not None and s.band_high_hz > dec.passband_hz * (1 + 1e-12):
        ratio = dec.passband_hz / s.rate_hz
        yield Hit(
            f"band top {_hz(s.band_high_hz)} lies above the decimation filter's passband edge "
            f"{_hz(dec.passband_hz)} ({ratio:g} x {_hz(s.rate_hz)}), where its response is not specified: "
            f"raise the rate to at least {_hz(s.band_high_hz / ratio)}, or lower the band top to "
            f"{_hz(dec.passband_hz)}",
            "conversion.rate",
        )
    filt = s.filter
    droop = s.band_edge_droop_db
    if filt is None or droop is None or droop <= s.flatness_db + _TOL_DB:
        return
    corner = flt.corner_for_droop(filt, s.band_high_hz, s.flatness_db)
    if corner is None:
        fix = f"lower the ripple to {_db(s.flatness_db)} or less"
    else:
        after = flt.attenuation_db(flt.design(filt.family, filt.order, corner, filt.ripple_db, filt.stopband_db),
                                   s.stop_edge_hz or s.first_alias_hz)
        fix = f"raise the corner to {_hz(corner)}"
        if s.required_alias_rejection_db is not None and s.stop_edge_hz is not None:
            fix += (f" (it then gives {_db(after)} at {_hz(s.stop_edge_hz)}, "
                    f"{_db(s.required_alias_rejection_db)} needed)")
    advice = _order_advice(s, filt.family)
    yield Hit(
        f"{_describe(filt)} loses {droop:.2f} dB at the band top {_hz(s.band_high_hz)}, "
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
)
def filter_impractical(result: ChannelResult, system: System) -> Iterator[Hit]:
    s = result.sampling
    if _skip_alias_checks(s) or s is None or not s.least_orders or s.best_least_order() is not None:
        return
    need = s.required_alias_rejection_db or 0.0
    edge = s.stop_edge_hz or s.first_alias_hz
    ratio = edge / s.band_high_hz
    fix = "raise the rate, relax the flatness, or lower out_of_band"
    stop8 = flt.stop_edge_for_order("elliptic", s.band_high_hz, 8, s.flatness_db, max(need, s.flatness_db + 0.01))
    if stop8 is not None and s.decimation is None:
        fix = f"raise the rate to at least {_hz(stop8 + s.band_high_hz)} (then an 8th-order elliptic fits)"
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
        filt = s.filter
        if filt is not None:
            target = tone.analog_attenuation_db + short
            for n in range(filt.order + 1, flt.MAX_ORDER + 1):
                cand = flt.design(filt.family, n, filt.corner_hz, filt.ripple_db, filt.stopband_db)
                if flt.attenuation_db(cand, tone.frequency_hz) >= target:
                    fixes[0] += f" (a {_describe(cand)} gives it)"
                    break
        fixes.append("remove it at its source")
        yield Hit(
            f"the {_hz(tone.frequency_hz)} tone{what} at {_dbfs(tone.level_dbfs or 0.0)} folds from zone "
            f"{tone.zone}{' (inverted)' if tone.inverted else ''} onto {_hz(tone.alias_hz)}, inside the band; "
            f"it gets {got} and lands at {_dbfs(landed)}, {_db(short)} above the {_dbfs(s.floor_dbfs)} floor: "
            + ", or ".join(fixes),
            f"interference.{tone.index}",
        )
