"""Output (D/A) channels: the hold's droop, images and their rejection, the drive level.

Sign conventions: ``zoh_droop_db`` is the hold's gain at the band top in dB (0 or negative,
-0.35 is a loss of 0.35 dB), as data sheets and handbooks tabulate it; every ``*_attenuation_db``,
``image_rejection_db`` and ``passband_error_db`` is a positive number of dB of loss.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

from ..dsp import filters, folding, quantization
from ..dsp import reconstruction as rec
from ..model import Channel, Filter, System
from .figures import Figures, FigureValue, figure_field, result_class
from .sampling import stage_list


def _finite_json(value: float, o: OutputResult) -> FigureValue:
    """The limit as the image frequency grows (math.inf) as JSON has it: null."""
    return value if math.isfinite(value) else None


@result_class
class OutputResult(Figures):
    """Hold, image and drive figures of an output channel; every figure is always there (null when
    it does not apply)."""

    zoh_droop_db: float | None = figure_field(
        "zoh_droop_db", "Hold droop at the band top (gain; 0 after ideal sinc compensation)", "dB",
        "20 log10 |sinc(f_high / fs)|; 0 with sinc_compensation (ideal inverse-sinc correction leaves no residual)",
        "ADI MT-017; Oppenheim & Schafer ch. 4")
    zoh_droop_uncorrected_db: float | None = figure_field(
        "zoh_droop_uncorrected_db", "Hold droop at the band top before any sinc compensation (gain)", "dB",
        "20 log10 |sinc(f_high / fs)|", "ADI MT-017")
    first_image_hz: float = figure_field("first_image_hz", "First image of the band top", "Hz", "fs - f_high",
                                         "ADI MT-017")
    hold_image_attenuation_db: float = figure_field(
        "hold_image_attenuation_db", "Hold's suppression of the first image below the tone", "dB",
        "20 log10((fs - f_high) / f_high) (0 without a hold)", "ADI MT-017; sin(pi(1 - x)) = sin(pi x)")
    filter_image_attenuation_db: float | None = figure_field(  # None: no designed filter (treated as 0 dB)
        "filter_image_attenuation_db", "Reconstruction filter's attenuation at the first image", "dB",
        "-20 log10 |H(j 2 pi (fs - f_high))|", "scipy.signal analog prototype; Williams & Taylor")
    image_rejection_db: float = figure_field(
        "image_rejection_db", "Image rejection (least, over every image of every tone in the band)", "dB",
        "min over k >= 1 and 0 < f <= f_high of 20 log10(g / f) (hold; 0 without) + A(g), images g = k fs +/- f",
        "ADI MT-017; Oppenheim & Schafer ch. 4")
    image_worst_hz: float = figure_field(  # math.inf: the limit as the image frequency grows
        "image_worst_hz", "Where the least image rejection lies", "Hz",
        "the image g of the minimum above; null when it is the limit as g grows without bound", "ADI MT-017",
        encode=_finite_json)
    image_worst_tone_hz: float = figure_field(
        "image_worst_tone_hz", "The in-band tone whose image that is", "Hz", "|g - k fs|", "ADI MT-017")
    required_image_rejection_db: float | None = figure_field(
        "required_image_rejection_db", "Required suppression of the first image", "dB",
        "[signal] image_rejection, else the DAC's floor 20 log10(2^N sqrt(1.5)) = 6.02 N + 1.76", "ADI MT-001")
    filter_needed_at_image_db: float | None = figure_field(
        "filter_needed_at_image_db", "Attenuation the filter must add at the first image", "dB",
        "required - hold_image_attenuation", "ADI MT-017")
    filter_droop_db: float | None = figure_field(
        "filter_droop_db", "Reconstruction filter's loss at the band top", "dB",
        "-20 log10 |H(j 2 pi f_high)|", "scipy.signal analog prototype; Williams & Taylor")
    passband_error_db: float = figure_field(
        "passband_error_db", "Largest output loss inside the band, hold and filter together", "dB",
        "max over f_low <= f <= f_high of -20 log10 |sinc(f / fs)| (0 with sinc_compensation or no hold) + A(f)",
        "ADI MT-017")
    passband_error_at_hz: float = figure_field(
        "passband_error_at_hz", "Where the largest output loss inside the band lies", "Hz", "argmax of the above",
        "ADI MT-017")
    output_peak_volts: float | None = figure_field(
        "output_peak_volts", "Largest drive the output can produce", "V", "full-scale peak x gain", "definition")
    stages: list[dict[str, float | None]] | None = figure_field("stages", default=None)  # the reconstruction filter's

    rate_hz: float
    band_high_hz: float
    hold: str
    sinc_compensation: bool
    flatness_db: float
    filter: filters.AnalogFilter | None = None  # the reconstruction filter as designed


def designed_filter(filt: Filter | None) -> filters.AnalogFilter | None:
    """An output's reconstruction filter as designed; None without one, or without an order and a
    corner (an output's filter is never sized for it), or when its values cannot be designed."""
    if filt is None or filt.order is None or filt.corner is None:
        return None
    try:
        return filters.design(filt.family, filt.order, filt.corner, filt.ripple_db, filt.stopband_db)
    except ValueError:
        return None


def filter_loss_db(filt: Filter | None, f_hz: float) -> float | None:
    """Loss of a channel's reconstruction filter at ``f_hz``; None when no filter is designed."""
    designed = designed_filter(filt)
    return None if designed is None else float(filters.attenuation_db(designed, f_hz))


def image_rejection_at(channel: Channel, rate_hz: float) -> float:
    """Image rejection (hold + filter, dB, least over every image,
    :func:`generator.dsp.folding.image_rejection`) the channel would have at ``rate_hz``."""
    assert channel.signal.band is not None
    got = folding.image_rejection(designed_filter(channel.filter), rate_hz, channel.signal.band[1],
                                  channel.conversion.hold == "zero-order")
    return got.db


# ------------------------------------------------------------------ what would fix it (rule messages)


def _root(fn: Callable[[float], float], lo: float, hi: float) -> float | None:
    """Where ``fn`` crosses zero between ``lo`` and ``hi`` (Brent's method, scipy.optimize.brentq,
    relative tolerance 1e-10); None without a sign change there."""
    try:
        a, b = fn(lo), fn(hi)
        if not (math.isfinite(a) and math.isfinite(b)) or a * b > 0:
            return None
        from scipy.optimize import brentq  # imported when first needed

        return float(brentq(fn, lo, hi, rtol=1e-10))
    except (ValueError, ZeroDivisionError, OverflowError):
        return None


def rate_for_image_rejection(channel: Channel, o: OutputResult, required_db: float) -> float | None:
    """The rate, between the channel's and 10^4 times it, at which its image rejection
    (:func:`image_rejection_at`) reaches ``required_db``; None when none in that span does."""
    return _root(lambda fs: image_rejection_at(channel, fs) - required_db, o.rate_hz, o.rate_hz * 1e4)


def corner_for_image_rejection(channel: Channel, o: OutputResult, required_db: float) -> float | None:
    """The corner, between the band top and the filter's own, at which the channel's image rejection
    (:func:`image_rejection_at`, same family and order) reaches ``required_db``; None without an
    ordered and cornered filter, or when no corner above the band top does."""
    filt = channel.filter
    if filt is None or filt.order is None or filt.corner is None:
        return None

    def excess(corner: float) -> float:
        return image_rejection_at(replace(channel, filter=replace(filt, corner=corner)), o.rate_hz) - required_db

    corner = _root(excess, o.band_high_hz, filt.corner)
    return corner if corner is not None and corner > o.band_high_hz else None


@dataclass(frozen=True)
class DroopParts:
    """The output's loss where it is largest inside the band, split between the hold and the filter,
    and the least rate at which the hold's part fits what the filter leaves of the flatness."""

    at_hz: float
    hold_db: float  # loss (positive dB); 0 without a hold or with sinc compensation
    filter_db: float  # 0 without a designed filter
    rate_hz: float | None  # None: the hold has no part, or the filter alone uses the flatness


def droop_parts(channel: Channel, o: OutputResult) -> DroopParts:
    """Hold loss -20 log10 |sinc(f / fs)| (ADI MT-017) and filter loss A(f) at the worst in-band
    frequency f of :attr:`OutputResult.passband_error_at_hz`; the rate that brings the hold's loss at
    f down to flatness - A(f): :func:`generator.dsp.reconstruction.min_rate_for_droop`."""
    at = o.passband_error_at_hz
    hold = -(rec.hold_droop_db(at, o.rate_hz)) if o.hold == "zero-order" and not o.sinc_compensation else 0.0
    filt = filter_loss_db(channel.filter, at) or 0.0
    budget = o.flatness_db - filt
    rate = rec.min_rate_for_droop(at, budget) if hold > 0.0 and budget > 0.0 else None
    return DroopParts(at, hold, filt, rate)


def gain_for_limit(channel: Channel) -> float | None:
    """The largest gain after the converter whose drive, full-scale peak x gain, stays within the
    channel's ``limit``: limit / full-scale peak; None without a limit or a full scale."""
    limit, fs = channel.signal.limit, channel.conversion.full_scale
    if limit is None or fs is None or not fs.peak > 0:
        return None
    return limit / fs.peak


def analyze_output(channel: Channel, system: System) -> OutputResult | None:
    """Hold, image and drive-level figures of an output channel with a band and a rate."""
    band = channel.signal.band
    conv = channel.conversion
    rate = conv.rate
    if channel.kind != "output" or band is None or rate is None or not 0.0 < band[1] < rate:
        return None
    f_low, f_high = band
    zero_order = conv.hold == "zero-order"
    raw = rec.hold_droop_db(f_high, rate) if zero_order else None
    droop = (rec.compensated_droop_db(f_high, rate) if conv.sinc_compensation else raw) if zero_order else None
    hold_image = rec.hold_image_attenuation_db(f_high, rate) if zero_order else 0.0
    first = rec.first_image(f_high, rate)
    designed = designed_filter(channel.filter)
    filt_image = filter_loss_db(channel.filter, first)
    filt_droop = filter_loss_db(channel.filter, f_high)
    images = folding.image_rejection(designed, rate, f_high, zero_order)
    passband = rec.largest_passband_loss(designed, rate, f_low, f_high, zero_order and not conv.sinc_compensation)
    required = channel.signal.image_rejection_db
    if required is None and conv.bits is not None:
        required = quantization.sqnr_db(conv.bits)
    needed = None if required is None else required - hold_image
    peak = None if conv.full_scale is None else conv.full_scale.peak * conv.gain
    return OutputResult(
        rate_hz=rate,
        band_high_hz=f_high,
        hold=conv.hold,
        sinc_compensation=conv.sinc_compensation,
        zoh_droop_db=droop,
        zoh_droop_uncorrected_db=raw,
        first_image_hz=first,
        hold_image_attenuation_db=hold_image,
        filter_image_attenuation_db=filt_image,
        image_rejection_db=images.db,
        image_worst_hz=images.image_hz,
        image_worst_tone_hz=images.tone_hz,
        required_image_rejection_db=required,
        filter_needed_at_image_db=needed,
        filter_droop_db=filt_droop,
        passband_error_db=passband.loss_db,
        passband_error_at_hz=passband.frequency_hz,
        flatness_db=channel.signal.flatness_db,
        output_peak_volts=peak,
        filter=designed,
        stages=_stages(channel.filter),
    )


def _stages(filt: Filter | None) -> list[dict[str, float | None]] | None:
    if filt is None or filt.order is None or filt.corner is None:
        return None
    try:
        return stage_list(filters.design(filt.family, filt.order, filt.corner, filt.ripple_db, filt.stopband_db))
    except ValueError:
        return None
