"""Amplitude figures: does the signal fit the converter, are there enough bits, what sets the noise floor.

Every SNR here is relative to the channel's own signal, a sine at ``peak`` (rms = peak / sqrt(2)),
not to full scale; only ``sqnr_db`` and ``dynamic_range_db`` are full-scale figures.  Noise is
counted over one noise bandwidth for all contributions: the band's width when the data are
filtered to the band (which is when processing gain is credited), otherwise 0..fs/2.

Volts are at the converter (after the gain on an input, before it on an output) unless a row
says otherwise; engineering-unit values are referred to the measurand through the sensitivity
and the gain of an input, or through the gain after the D/A converter of an output.  The full
scale's *amplitude* is half its width (the largest sine that fits, about the range's centre), on
a unipolar range as on a bipolar one: ``peak`` is an amplitude about the signal's own centre.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from ..dsp import quantization as q
from ..model import Channel, System
from .figures import Figures, FigureValue, figure_field, result_class

_SIGNAL = "signal = sine at the channel's peak, rms = peak / sqrt(2)"

@dataclass(frozen=True)
class Contribution:
    """One row of a noise budget.  ``volts`` at the converter input, ``units`` in SI of the measurand.

    ``db`` is the contribution relative to the signal (negative: below it), or None when the
    signal's level is unknown.
    """

    name: str
    volts: float | None
    units: float | None
    db: float | None


@result_class
class AmplitudeResult(Figures):
    """Range use, bits and the noise budget of a channel.  A figure whose value is None is left out."""

    peak_volts: float | None = figure_field(
        "peak_volts", "Peak at the converter", "V",
        "V_pk = peak x sensitivity x gain (input); peak / gain (output)", "requirement; sensor data",
        default=None, omit_none=True)
    range_usage: float | None = figure_field(
        "range_usage", "Share of full scale used", "%",
        "V_pk / full-scale amplitude, amplitude = (high - low) / 2", "definition", default=None, omit_none=True)
    headroom_db: float | None = figure_field(
        "headroom_db", "Headroom to full scale", "dB", "20 log10(full-scale amplitude / V_pk)", "definition",
        default=None, omit_none=True)
    lsb_volts: float = figure_field(
        "lsb_volts", "LSB (code width)", "V", "q = FSR / 2^N (some data sheets use FSR / (2^N - 1))",
        "IEEE Std 1241-2010; ADI MT-001", omit_none=True)
    lsb_units: float | None = figure_field(
        "lsb_units", "LSB in the engineering unit", "<unit>", "q / (sensitivity x gain)", "IEEE Std 1241-2010",
        default=None, omit_none=True)
    sqnr_db: float = figure_field(
        "sqnr_db", "Quantization SNR, full-scale sine", "dB",
        "SQNR = N x 20 log10(2) + 10 log10(1.5) (= 6.02 N + 1.76 dB)", "ADI MT-001", omit_none=True)
    quantization_noise_volts: float = figure_field(
        "quantization_noise_volts", "Quantization noise, 0..fs/2", "V", "q / sqrt(12)", "ADI MT-001; Bennett 1948",
        omit_none=True)
    processing_gain_db: float | None = figure_field(
        "processing_gain_db", "Processing gain credited", "dB",
        "10 log10(fs / (2 B)) when filtered_to_band and B < fs / 2, else 0", "ADI MT-001",
        default=None, omit_none=True)
    jitter_s: float | None = figure_field(
        "sampling_jitter_s", "Rms sampling jitter", "s",
        "the channel's own jitter, else sqrt(t_aperture^2 + t_clock^2)", "ADI MT-007 (independent jitter adds as rss)",
        default=None, omit_none=True)
    jitter_snr_db: float | None = figure_field(
        "jitter_snr_db", "Jitter-limited SNR at the band top", "dB", "-20 log10(2 pi f_high t_j)",
        "ADI MT-007; ADI AN-756", default=None, omit_none=True)
    sensor_snr_db: float | None = figure_field(
        "sensor_snr_db", "Sensor-noise SNR", "dB",
        f"20 log10(signal rms / sensor noise rms), noise = rms or density x sqrt(B_n); {_SIGNAL}", "definition",
        default=None, omit_none=True)
    total_snr_db: float | None = figure_field(
        "total_snr_db", "Total SNR at the channel's peak", "dB",
        f"-10 log10(sum 10^(-SNR_i / 10)) over quantization, jitter, sensor; {_SIGNAL}", "ADI MT-003; ADI AN-756",
        default=None, omit_none=True)
    enob_bits: float | None = figure_field(
        "enob_bits", "Effective bits at the channel's peak, from noise only (distortion not modelled)", "",
        "(total SNR - 10 log10(1.5)) / 20 log10(2), not corrected to full scale; the data-sheet ENOB uses SINAD, "
        "which adds distortion", "ADI MT-003", default=None, omit_none=True)
    dynamic_range_db: float | None = figure_field(
        "dynamic_range_db", "Dynamic range", "dB",
        "20 log10(full-scale sine rms / rss(quantization, sensor noise)), in B_n", "ADI MT-003",
        default=None, omit_none=True)

    bits: int
    full_scale_range_volts: float
    full_scale_amplitude_volts: float
    unit_factor: float  # SI value of one engineering unit
    noise_bandwidth_hz: float | None = None
    volts_per_unit: float | None = None  # at the converter, per SI unit of the measurand
    budget: tuple[Contribution, ...] = ()

    @property
    def lsb_si(self) -> float | None:
        """The LSB referred to the measurand, SI."""
        return None if self.volts_per_unit is None else self.lsb_volts / self.volts_per_unit

    def dominant(self) -> Contribution | None:
        """The largest contribution of the budget (the total row excluded)."""
        rows = [c for c in self.budget if c.name != "total" and c.db is not None]
        return max(rows, key=lambda c: c.db or -math.inf) if rows else None

    def budget_table(self) -> list[dict[str, FigureValue]]:
        """The noise budget as rows for the channel page (units in the channel's engineering unit)."""
        return [
            {
                "contribution": c.name,
                "rms_volts": c.volts,
                "rms_units": None if c.units is None else c.units / self.unit_factor,
                "db_re_signal": c.db,
            }
            for c in self.budget
        ]


def _volts_per_unit(channel: Channel) -> float | None:
    """Volts at the converter per SI unit of the measurand; None when the chain is not known.

    An input: sensitivity x gain (a measurand in volts is at the gain stage's input).  An output
    whose unit is a voltage: 1 / gain, the driven voltage being the converter's times the gain
    after it.  Other outputs name no way back to the converter."""
    gain = channel.conversion.gain
    if channel.kind == "output":
        return 1.0 / gain if channel.unit.dim == "V" and gain > 0 else None
    sensitivity = channel.sensor.sensitivity
    if sensitivity is None and channel.unit.dim == "V":
        sensitivity = 1.0  # the measurand is a voltage at the gain stage's input
    return None if sensitivity is None else sensitivity * gain


def _noise_bandwidth(channel: Channel) -> tuple[float | None, float]:
    """(noise bandwidth in Hz, processing gain credited in dB)."""
    rate = channel.conversion.rate
    band = channel.signal.band
    if rate is None or rate <= 0:
        return (band[1] - band[0] if band else None), 0.0
    width = band[1] - band[0] if band else None
    if channel.kind == "input" and channel.signal.filtered_to_band and width is not None and 0 < width < rate / 2.0:
        return width, q.processing_gain_db(rate, width)
    return rate / 2.0, 0.0


def _sensor_noise(channel: Channel, bandwidth: float | None) -> tuple[float | None, float | None] | None:
    """Sensor noise rms as (volts at the sensor output, SI units of the measurand); None if not given."""
    noise = channel.sensor.noise
    if noise is None:
        return None
    if noise.density:
        if bandwidth is None:
            return None
        rms = q.noise_from_density(noise.value, bandwidth)
    else:
        rms = noise.value
    sensitivity = channel.sensor.sensitivity
    if sensitivity is None and channel.unit.dim == "V":
        sensitivity = 1.0
    if noise.in_volts:
        return rms, (None if sensitivity is None else rms / sensitivity)
    return (None if sensitivity is None else rms * sensitivity), rms


def _db_re(signal_rms: float | None, noise_rms: float | None) -> float | None:
    if signal_rms is None or noise_rms is None or signal_rms <= 0 or noise_rms <= 0:
        return None
    return q.amplitude_db(noise_rms / signal_rms)


def analyze_amplitude(channel: Channel, system: System) -> AmplitudeResult | None:
    """Amplitude, bits and the noise budget of an input channel (LSB and SQNR only for outputs)."""
    conv = channel.conversion
    if channel.kind == "image" or conv.bits is None or conv.full_scale is None or conv.bits < 1:
        return None
    span = conv.full_scale
    if span.dim != "V" or span.width <= 0:
        return None
    lsb = q.lsb(span.width, conv.bits)
    qnoise = q.quantization_noise_rms(lsb)
    base = AmplitudeResult(
        bits=conv.bits,
        full_scale_range_volts=span.width,
        full_scale_amplitude_volts=span.amplitude,
        lsb_volts=lsb,
        sqnr_db=q.sqnr_db(conv.bits),
        quantization_noise_volts=qnoise,
        unit_factor=channel.unit.factor,
    )
    return _budget(channel, base)


def _budget(channel: Channel, base: AmplitudeResult) -> AmplitudeResult:
    """Range use and the noise budget of an input (quantization, jitter, sensor) or of an output
    (quantization and jitter of the D/A converter, referred through the gain after it)."""
    per_unit = _volts_per_unit(channel)
    peak = channel.signal.peak
    peak_volts = None if per_unit is None or peak is None else abs(peak) * per_unit
    signal_v = None if peak_volts is None else q.sine_rms(peak_volts)
    signal_si = None if peak is None else q.sine_rms(abs(peak))
    bandwidth, pg = _noise_bandwidth(channel)
    gain = channel.conversion.gain

    def units(volts: float | None) -> float | None:
        return None if volts is None or per_unit is None else volts / per_unit

    rows: list[Contribution] = []
    # quantization, in the noise bandwidth
    q_band = base.quantization_noise_volts / q.amplitude_ratio(pg)
    rows.append(Contribution("quantization", q_band, units(q_band), _db_re(signal_v, q_band)))
    # sampling jitter, on a sine at the band top
    jitter = channel.conversion.total_jitter
    band = channel.signal.band
    jitter_snr = None
    jitter_used = jitter if jitter is not None and jitter > 0 else None
    if jitter is not None and jitter > 0 and band is not None and band[1] > 0:
        jitter_snr = q.jitter_snr_db(band[1], jitter)
        j_volts = None if signal_v is None else q.jitter_noise_rms(signal_v, band[1], jitter)
        j_units = None if signal_si is None else q.jitter_noise_rms(signal_si, band[1], jitter)
        rows.append(Contribution("sampling jitter", j_volts, j_units, -jitter_snr))
    # sensor noise, referred to the converter input through the gain
    sensor = _sensor_noise(channel, bandwidth)
    sensor_snr = None
    sensor_at_converter = None
    if sensor is not None:
        s_volts, s_si = sensor
        sensor_at_converter = None if s_volts is None else s_volts * gain
        db = _db_re(signal_si, s_si) if s_si is not None else _db_re(signal_v, sensor_at_converter)
        sensor_snr = None if db is None else -db
        rows.append(Contribution("sensor noise", sensor_at_converter, s_si, db))

    total_snr = None
    if all(r.db is not None for r in rows):
        total_snr = q.power_sum_snr_db(-(r.db or 0.0) for r in rows)
        total_v = q.rss(r.volts for r in rows if r.volts is not None) if signal_v is not None else None
        total_db = -total_snr
        rows.append(Contribution("total", total_v, units(total_v), total_db))

    # dynamic range: full-scale sine over the noise present with no signal (jitter needs a signal)
    floor = [base.quantization_noise_volts / q.amplitude_ratio(pg)]
    dynamic_range = None
    if sensor is None or sensor_at_converter is not None:
        if sensor_at_converter is not None:
            floor.append(sensor_at_converter)
        dynamic_range = q.snr_db(q.sine_rms(base.full_scale_range_volts / 2.0), q.rss(floor))

    usage = None if peak_volts is None else peak_volts / base.full_scale_amplitude_volts
    headroom = (None if peak_volts is None or peak_volts <= 0
                else q.amplitude_db(base.full_scale_amplitude_volts / peak_volts))
    lsb_si = None if per_unit is None else base.lsb_volts / per_unit
    return replace(
        base,
        noise_bandwidth_hz=bandwidth,
        volts_per_unit=per_unit,
        peak_volts=peak_volts,
        range_usage=usage,
        headroom_db=headroom,
        lsb_units=None if lsb_si is None else lsb_si / base.unit_factor,
        enob_bits=None if total_snr is None else q.enob(total_snr),
        processing_gain_db=pg,
        jitter_s=jitter_used,
        jitter_snr_db=jitter_snr,
        sensor_snr_db=sensor_snr,
        total_snr_db=total_snr,
        dynamic_range_db=dynamic_range,
        budget=tuple(rows),
    )


# ------------------------------------------------------------------ what would fix it (rule messages)

TARGET_USAGE = 0.9
"""Share of full scale a suggested gain aims at, leaving about 1 dB of headroom (common practice)."""


def gain_for_usage(channel: Channel, a: AmplitudeResult, target: float = TARGET_USAGE) -> float:
    """The gain that puts the peak at ``target`` of the full-scale amplitude: on an input the
    converter sees peak x gain, so g' = g x target / usage; on an output it must produce peak / gain,
    so g' = g x usage / target (usage = V_pk / full-scale amplitude, as :attr:`AmplitudeResult.range_usage`)."""
    usage = a.range_usage or 0.0
    gain = channel.conversion.gain
    return gain * target / usage if channel.kind == "input" else gain * usage / target


def over_full_scale_db(a: AmplitudeResult) -> float | None:
    """How far the peak at the converter lies beyond the full-scale amplitude: 20 log10(V_pk / A_FS)
    (ADI MT-001 amplitude ratio in dB); None without a peak."""
    if a.peak_volts is None:
        return None
    return q.amplitude_db(a.peak_volts / a.full_scale_amplitude_volts)


@dataclass(frozen=True)
class ResolutionFix:
    bits: int  # fewest bits whose LSB meets the resolution
    gain_factor: float  # how many times the gain must rise for the same (LSB / resolution)


def resolution_fix(a: AmplitudeResult, wanted: float) -> ResolutionFix | None:
    """Fewest bits N with FSR / 2^N <= resolution x volts per unit (:func:`generator.dsp.quantization.bits_for_lsb`,
    IEEE Std 1241-2010 code width), and the gain factor LSB / resolution that would do instead;
    None when the LSB in the measurand is not known."""
    lsb_si = a.lsb_si
    if lsb_si is None or not wanted > 0:
        return None
    per_unit = a.volts_per_unit or 1.0
    return ResolutionFix(q.bits_for_lsb(a.full_scale_range_volts, wanted * per_unit), lsb_si / wanted)


def snr_needed_from(a: AmplitudeResult, name: str, required_db: float) -> float | None:
    """The SNR the named contribution must reach for the power sum of the budget to meet
    ``required_db``: -10 log10(10^(-SNR_req / 10) - sum over the others of 10^(-SNR_i / 10))
    (ADI MT-003); None when the others alone already miss it."""
    others = [-(c.db or 0.0) for c in a.budget if c.name not in (name, "total") and c.db is not None]
    room = math.pow(10.0, -required_db / 10.0) - math.fsum(math.pow(10.0, -s / 10.0) for s in others)
    return None if room <= 0 else -q.power_db(room)


def jitter_for_snr(channel: Channel, snr_db: float) -> float | None:
    """Largest rms jitter with which a sine at the band top still reaches ``snr_db``:
    t_j = 10^(-SNR/20) / (2 pi f_high) (:func:`generator.dsp.quantization.max_jitter`, ADI MT-007);
    None without a band."""
    band = channel.signal.band
    if band is None or not band[1] > 0:
        return None
    return q.max_jitter(snr_db, band[1])


@dataclass(frozen=True)
class SensorNoiseFix:
    rms: float  # largest sensor noise, SI of the measurand, rms in the noise bandwidth
    density: float | None  # the same per root hertz, for a sensor specified by its density


def sensor_noise_for_snr(channel: Channel, a: AmplitudeResult, snr_db: float) -> SensorNoiseFix | None:
    """Largest sensor noise that keeps the sensor's part of the budget at ``snr_db`` below a sine at
    the peak: rms = (peak / sqrt 2) / 10^(SNR/20); a density divides that by sqrt(B_n) (ADI MT-003).
    None without a peak or a sensor noise."""
    peak, noise = channel.signal.peak, channel.sensor.noise
    if peak is None or noise is None:
        return None
    allowed = q.sine_rms(peak) / q.amplitude_ratio(snr_db)
    density = allowed / math.sqrt(a.noise_bandwidth_hz) if noise.density and a.noise_bandwidth_hz else None
    return SensorNoiseFix(allowed, density)
