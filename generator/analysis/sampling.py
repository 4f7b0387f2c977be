"""Sampling figures of input channels: rate, folding, and the anti-aliasing filter.

What each figure means, and which part of the chain sets it:

- The analog ``[filter]`` is designed from its family, order and corner (see
  :mod:`generator.dsp.filters` for the corner of each family).  A ``[filter]`` naming only a
  family is sized here: the least order of that family meeting the mask below.
- The *floor* content must fold below is the channel's own: ``snr`` below the signal at
  ``peak`` (peak in dBFS from peak x sensitivity x gain against the full-scale peak; 0 dBFS
  when that cannot be worked out), else the quantization floor of a full-scale sine,
  -(6.0206 N + 1.7609) dBFS.  The required alias rejection is how far the worst out-of-band
  level (``out_of_band``, default 0 dBFS) sits above that floor.
- On a delta-sigma converter with a declared decimation filter, content near fs is rejected by
  the digital filter (its stopband rejection applies where the distance to the nearest
  multiple of the modulator rate is at least stopband x fs); the analog filter only has to
  protect the band from content near the modulator rate (first analog alias f_mod - f_high).
  ``alias_rejection_source`` names which of the two sets ``alias_rejection_db``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

from ..dsp import filters as flt
from ..dsp import quantization
from ..dsp import sampling as dsp
from ..model import Channel, Converter, System, Tone
from .figures import FigureValue, figure

SAMPLE_RATE = figure("sample_rate_hz", "Sample rate", "Hz", "fs", "as specified or inherited from the converter")
NYQUIST = figure("nyquist_hz", "Nyquist frequency", "Hz", "f_N = fs / 2", "Shannon 1949; Nyquist 1928")
BAND_LOW = figure("band_low_hz", "Band, low edge", "Hz", "as specified", "requirement")
BAND_HIGH = figure("band_high_hz", "Band, high edge", "Hz", "f_high, as specified", "requirement")
OSR = figure("oversampling_ratio", "Oversampling ratio", "", "OSR = fs / (2 f_high)", "ADI MT-002")
FIRST_ALIAS = figure("first_alias_hz", "First alias onto the band top", "Hz", "fs - f_high", "ADI MT-002")

FILTER = figure("anti_alias_filter", "Anti-aliasing filter", "",
                "family, order, corner_hz (-3 dB: butterworth, bessel; ripple edge: chebyshev1, elliptic; "
                "stopband edge: chebyshev2), ripple_db, stopband_db, proposed",
                "as specified; sized by specfold when only the family is given")
DROOP = figure("band_edge_droop_db", "Filter loss at the band top", "dB", "A(f_high) = -20 log10 |H(j 2 pi f_high)|",
               "Williams & Taylor; scipy.signal analog prototypes")
ALIAS_REJECTION = figure("alias_rejection_db", "Alias rejection", "dB",
                         "min(A_analog(fs - f_high) + A_digital(fs - f_high), A_analog(f_mod - f_high))",
                         "ADI MT-002; delta-sigma decimation filter from system.toml")
ALIAS_SOURCE = figure("alias_rejection_source", "What sets the alias rejection", "",
                      "analog filter | digital decimation filter | none", "specfold")
FILTER_ALIAS = figure("filter_rejection_at_first_alias_db", "Analog filter loss at the first alias", "dB",
                      "A_analog(fs - f_high)", "Williams & Taylor")
GD_DC = figure("group_delay_dc_s", "Filter group delay at DC", "s", "tau(0) = sum -Re p / |p|^2",
               "from the pole positions; Williams & Taylor")
GD_EDGE = figure("group_delay_band_edge_s", "Filter group delay at the band top", "s",
                 "tau(w) = sum -s_p / ((w - w_p)^2 + s_p^2)", "from the pole positions; Williams & Taylor")
PEAK_DBFS = figure("peak_level_dbfs", "Signal peak at the converter", "dBFS",
                   "20 log10(peak x sensitivity x gain / full-scale peak)", "AES17 (sine-referenced dBFS)")
FLOOR = figure("alias_floor_dbfs", "Floor that aliases must stay under", "dBFS",
               "min(peak, 0 dBFS) - snr; else -(6.0206 N + 1.7609)", "ADI MT-001, MT-002")
REQUIRED = figure("required_alias_rejection_db", "Alias rejection required", "dB",
                  "out_of_band - floor", "ADI MT-002")
STOP_EDGE = figure("filter_stop_edge_hz", "Frequency the analog filter must reject at", "Hz",
                   "fs - f_high; on delta-sigma: f_mod - f_high", "ADI MT-002")
MIN_ORDER = figure("min_filter_order", "Least filter order per family", "",
                   "least n with A(f_high) <= flatness and A(stop edge) >= required; null above 20",
                   "scipy.signal buttord/cheb1ord/cheb2ord/ellipord (analog=True); bessel by search")
MOD_RATE = figure("modulator_rate_hz", "Delta-sigma modulator rate", "Hz", "f_mod (or the least OSR x fs)",
                  "system.toml")
MOD_ALIAS = figure("modulator_alias_hz", "First analog alias through the modulator", "Hz", "f_mod - f_high",
                   "derived from the sampling theorem")
MOD_REJECTION = figure("modulator_alias_rejection_db", "Analog filter loss at the modulator alias", "dB",
                       "A_analog(f_mod - f_high)", "Williams & Taylor")
DIG_PASS = figure("digital_passband_hz", "Decimation filter passband edge", "Hz", "passband x fs", "system.toml")
DIG_STOP = figure("digital_stopband_hz", "Decimation filter stopband edge", "Hz", "stopband x fs", "system.toml")
DIG_REJECTION = figure("digital_rejection_db", "Decimation filter stopband rejection", "dB", "as specified",
                       "system.toml")
STAGES = figure("stages", "Filter stages (f0, Q)", "",
                "poles of the prototype in pairs: f0 = |p| / 2 pi, Q = |p| / (2 |Re p|); a real pole is a "
                "first-order stage (q null); ascending Q",
                "Williams & Taylor; Zumbahlen, Linear Circuit Design Handbook ch. 8")
TONES = figure("interference_folds", "Where each declared tone lands", "",
               "f_a = |f - fs round(f / fs)|, zone = floor(2 f / fs) + 1, landed = level - A(f)",
               "Oppenheim & Schafer ch. 4; ADI MT-002")

ANALOG = "analog filter"
DIGITAL = "digital decimation filter"
NONE = "none"


@dataclass(frozen=True)
class DecimationFilter:
    """The digital filter of a delta-sigma converter, in Hz at the channel's rate."""

    modulator_rate_hz: float | None
    passband_hz: float
    stopband_hz: float
    rejection_db: float

    def attenuation_db(self, f_hz: float) -> float:
        """Stopband rejection where guaranteed, else 0 dB (passband and unspecified transition band)."""
        period = self.modulator_rate_hz if self.modulator_rate_hz else math.inf
        region = dsp.digital_filter_region(f_hz, period, self.passband_hz, self.stopband_hz)
        return self.rejection_db if region == "stop" else 0.0


@dataclass(frozen=True)
class ToneFold:
    """One ``[[interference]]`` tone after sampling."""

    index: int
    frequency_hz: float
    source: str
    line: int
    alias_hz: float
    zone: int
    inverted: bool
    folded: bool  # arrives at another frequency than it has
    in_band: bool  # lands inside [band_low, band_high]
    level_dbfs: float | None  # as declared, at the converter input; None if it cannot be converted
    analog_attenuation_db: float
    digital_attenuation_db: float

    @property
    def attenuation_db(self) -> float:
        return self.analog_attenuation_db + self.digital_attenuation_db

    @property
    def landed_dbfs(self) -> float | None:
        return None if self.level_dbfs is None else self.level_dbfs - self.attenuation_db

    def as_dict(self) -> dict[str, Any]:
        return {
            "frequency_hz": self.frequency_hz,
            "source": self.source,
            "alias_hz": self.alias_hz,
            "zone": self.zone,
            "inverted": self.inverted,
            "folded": self.folded,
            "in_band": self.in_band,
            "level_dbfs": self.level_dbfs,
            "attenuation_db": self.attenuation_db,
            "analog_attenuation_db": self.analog_attenuation_db,
            "digital_attenuation_db": self.digital_attenuation_db,
            "landed_dbfs": self.landed_dbfs,
        }


@dataclass(frozen=True)
class SamplingResult:
    rate_hz: float
    band_low_hz: float
    band_high_hz: float
    nyquist_hz: float
    oversampling_ratio: float
    first_alias_hz: float
    kind: str = "input"
    architecture: str = ""
    flatness_db: float = 0.5
    out_of_band_dbfs: float = 0.0
    filter: flt.AnalogFilter | None = None
    filter_proposed: bool = False
    filter_problem: str = ""  # why a declared [filter] could not be designed
    decimation: DecimationFilter | None = None
    delta_sigma: bool = False
    band_edge_droop_db: float | None = None
    filter_rejection_at_first_alias_db: float | None = None
    alias_rejection_db: float | None = None
    alias_rejection_source: str = NONE
    near_rate_rejection_db: float | None = None  # at fs - f_high, everything counted
    modulator_alias_hz: float | None = None
    modulator_alias_rejection_db: float | None = None
    group_delay_dc_s: float | None = None
    group_delay_band_edge_s: float | None = None
    peak_dbfs: float | None = None
    floor_dbfs: float | None = None
    required_alias_rejection_db: float | None = None
    stop_edge_hz: float | None = None
    least_orders: dict[str, flt.OrderDesign | None] = field(default_factory=dict)
    tones: tuple[ToneFold, ...] = ()

    @property
    def has_input_figures(self) -> bool:
        return self.kind == "input"

    def figures(self) -> dict[str, FigureValue]:
        out: dict[str, FigureValue] = {
            SAMPLE_RATE: self.rate_hz,
            NYQUIST: self.nyquist_hz,
            BAND_LOW: self.band_low_hz,
            BAND_HIGH: self.band_high_hz,
            OSR: self.oversampling_ratio,
            FIRST_ALIAS: self.first_alias_hz,
        }
        if not self.has_input_figures:
            return out
        f = self.filter
        out[FILTER] = None if f is None else {
            "family": f.family, "order": f.order, "corner_hz": f.corner_hz, "ripple_db": f.ripple_db,
            "stopband_db": f.stopband_db, "proposed": self.filter_proposed,
        }
        out[STAGES] = None if f is None else stage_list(f)
        out[DROOP] = self.band_edge_droop_db
        out[FILTER_ALIAS] = self.filter_rejection_at_first_alias_db
        out[ALIAS_REJECTION] = self.alias_rejection_db
        out[ALIAS_SOURCE] = self.alias_rejection_source
        out[GD_DC] = self.group_delay_dc_s
        out[GD_EDGE] = self.group_delay_band_edge_s
        out[PEAK_DBFS] = self.peak_dbfs
        out[FLOOR] = self.floor_dbfs
        out[REQUIRED] = self.required_alias_rejection_db
        out[STOP_EDGE] = self.stop_edge_hz
        out[MIN_ORDER] = {
            fam: None if d is None else {"order": d.order, "corner_hz": d.corner_hz}
            for fam, d in self.least_orders.items()
        } if self.least_orders else None
        if self.decimation is not None:
            dec = self.decimation
            out[MOD_RATE] = dec.modulator_rate_hz
            out[MOD_ALIAS] = self.modulator_alias_hz
            out[MOD_REJECTION] = self.modulator_alias_rejection_db
            out[DIG_PASS] = dec.passband_hz
            out[DIG_STOP] = dec.stopband_hz
            out[DIG_REJECTION] = dec.rejection_db
        out[TONES] = [t.as_dict() for t in self.tones]
        return out

    def best_least_order(self) -> flt.OrderDesign | None:
        """The family needing the fewest poles (ties go to the earlier family in FAMILIES)."""
        found = [d for d in self.least_orders.values() if d is not None]
        return min(found, key=lambda d: (d.order, flt.FAMILIES.index(d.family))) if found else None


def stage_list(filt: flt.AnalogFilter) -> list[dict[str, float | None]]:
    """The filter's cascade as JSON objects: {f0_hz, q} per stage, ascending Q (q None: first order).

    A stage with a pair of imaginary-axis zeros (chebyshev2, elliptic) also carries ``notch_hz``.
    """
    out: list[dict[str, float | None]] = []
    for s in flt.stages(filt):
        item: dict[str, float | None] = {"f0_hz": s.f0_hz, "q": s.q}
        if s.notch_hz is not None:
            item["notch_hz"] = s.notch_hz
        out.append(item)
    return out


def _converter(channel: Channel, system: System) -> Converter | None:
    cid = channel.conversion.converter
    return system.converters.get(cid) if cid else None


def _decimation(conv: Converter | None, rate: float) -> DecimationFilter | None:
    if conv is None or not conv.is_delta_sigma:
        return None
    if conv.passband is None or conv.stopband is None or conv.stopband_rejection_db is None:
        return None
    f_mod = conv.modulator_rate
    if f_mod is None and conv.oversampling_ratios:
        f_mod = min(conv.oversampling_ratios) * rate  # the least ratio is the worst case
    return DecimationFilter(f_mod, conv.passband * rate, conv.stopband * rate, conv.stopband_rejection_db)


def _volts_at_converter(channel: Channel, value: float, dim: str) -> float | None:
    """A level in volts at the sensor output or in the engineering unit -> volts at the converter."""
    gain = channel.conversion.gain
    if dim == "V":
        return value * gain
    sens = channel.sensor.sensitivity
    if dim == channel.unit.dim and sens is not None:
        return value * sens * gain
    return None


def _dbfs(channel: Channel, value: float, dim: str) -> float | None:
    if dim == "dBFS":
        return value
    fs = channel.conversion.full_scale
    volts = _volts_at_converter(channel, value, dim)
    if volts is None or fs is None or fs.peak <= 0:
        return None
    return dsp.level_dbfs(abs(volts), fs.peak)


def _floor(channel: Channel, peak_dbfs: float | None) -> float | None:
    snr = channel.signal.snr_db
    if snr is not None:
        return min(peak_dbfs if peak_dbfs is not None else 0.0, 0.0) - snr
    bits = channel.conversion.bits
    return -quantization.sqnr_db(bits) if bits is not None else None


def _least_orders(f_pass: float, f_stop: float | None, flatness: float,
                  required: float | None) -> dict[str, flt.OrderDesign | None]:
    if f_stop is None or required is None or not f_stop > f_pass:
        return {}
    stop = max(required, flatness + 0.01)  # a requirement below the flatness is met by any order
    return {fam: flt.least_order(fam, f_pass, f_stop, flatness, stop) for fam in flt.FAMILIES}


def _design(channel: Channel, least: dict[str, flt.OrderDesign | None]) -> tuple[flt.AnalogFilter | None, bool, str]:
    spec = channel.filter
    if spec is None:
        return None, False, ""
    if spec.order is None or spec.corner is None:
        d = least.get(spec.family)
        if d is None:
            return None, True, ""
        return d.as_filter(), True, ""
    try:
        return flt.design(spec.family, spec.order, spec.corner, spec.ripple_db, spec.stopband_db), False, ""
    except ValueError as exc:
        return None, False, str(exc)


def _tone(i: int, channel: Channel, tone: Tone, rate: float, filt: flt.AnalogFilter | None,
          dec: DecimationFilter | None) -> ToneFold:
    f = tone.frequency
    low, high = channel.signal.band or (0.0, 0.0)
    if dec is not None and dec.modulator_rate_hz:
        landed_at = dsp.alias_frequency(dsp.modulator_fold(f, dec.modulator_rate_hz), rate)
    else:
        landed_at = dsp.alias_frequency(f, rate)
    zone = dsp.nyquist_zone(f, rate)
    return ToneFold(
        index=i, frequency_hz=f, source=tone.source, line=tone.line, alias_hz=landed_at, zone=zone,
        inverted=dsp.is_inverted(f, rate), folded=not math.isclose(landed_at, f, rel_tol=1e-12),
        in_band=low <= landed_at <= high, level_dbfs=_dbfs(channel, tone.level, tone.level_dim),
        analog_attenuation_db=flt.attenuation_db(filt, f) if filt is not None else 0.0,
        digital_attenuation_db=dec.attenuation_db(f) if dec is not None else 0.0,
    )


def analyze_sampling(channel: Channel, system: System) -> SamplingResult | None:
    """Sampling figures for an input or output channel with a band and a rate.

    Output channels get the rate figures only; their hold and anti-imaging filter are
    analysed elsewhere.
    """
    band = channel.signal.band
    rate = channel.conversion.rate
    if channel.kind == "image" or band is None or rate is None or not rate > 0:
        return None
    low, high = band
    base = SamplingResult(
        rate_hz=rate,
        band_low_hz=low,
        band_high_hz=high,
        nyquist_hz=dsp.nyquist_frequency(rate),
        oversampling_ratio=dsp.oversampling_ratio(rate, high),
        first_alias_hz=dsp.first_alias(rate, high),
        kind=channel.kind,
    )
    if channel.kind != "input":
        return base

    conv = _converter(channel, system)
    dec = _decimation(conv, rate)
    delta_sigma = conv is not None and conv.is_delta_sigma
    sig = channel.signal
    peak_dbfs = None
    if sig.peak is not None:
        peak_dbfs = _dbfs(channel, sig.peak, channel.unit.dim)
    floor = _floor(channel, peak_dbfs)
    required = max(sig.out_of_band_dbfs - floor, 0.0) if floor is not None else None

    first_alias = rate - high
    if delta_sigma:
        stop_edge = dec.modulator_rate_hz - high if dec is not None and dec.modulator_rate_hz else None
    else:
        stop_edge = first_alias
    least = _least_orders(high, stop_edge, sig.flatness_db, required)
    filt, proposed, problem = _design(channel, least)

    droop = flt.attenuation_db(filt, high) if filt is not None else 0.0
    analog_first = flt.attenuation_db(filt, abs(first_alias)) if filt is not None else 0.0
    mod_alias = mod_rejection = None
    if dec is not None:
        near = analog_first + dec.attenuation_db(abs(first_alias))
        if dec.modulator_rate_hz:
            mod_alias = dec.modulator_rate_hz - high
            if filt is not None:
                mod_rejection = flt.attenuation_db(filt, mod_alias)
        if mod_rejection is not None and mod_rejection < near:
            rejection, source = mod_rejection, ANALOG
        else:
            rejection, source = near, DIGITAL
    else:
        near = analog_first
        rejection, source = analog_first, (ANALOG if filt is not None else NONE)

    return replace(
        base,
        architecture=conv.architecture if conv is not None else "",
        flatness_db=sig.flatness_db,
        out_of_band_dbfs=sig.out_of_band_dbfs,
        filter=filt,
        filter_proposed=proposed,
        filter_problem=problem,
        decimation=dec,
        delta_sigma=delta_sigma,
        band_edge_droop_db=droop,
        filter_rejection_at_first_alias_db=analog_first if filt is not None else None,
        alias_rejection_db=rejection,
        alias_rejection_source=source,
        near_rate_rejection_db=near,
        modulator_alias_hz=mod_alias,
        modulator_alias_rejection_db=mod_rejection,
        group_delay_dc_s=flt.group_delay_s(filt, 0.0) if filt is not None else None,
        group_delay_band_edge_s=flt.group_delay_s(filt, high) if filt is not None else None,
        peak_dbfs=peak_dbfs,
        floor_dbfs=floor,
        required_alias_rejection_db=required,
        stop_edge_hz=stop_edge,
        least_orders=least,
        tones=tuple(_tone(i, channel, t, rate, filt, dec) for i, t in enumerate(channel.interference)),
    )
