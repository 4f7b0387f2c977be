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
from dataclasses import dataclass, replace
from typing import Any

from ..dsp import filters as flt
from ..dsp import folding, quantization
from ..dsp import sampling as dsp
from ..model import Channel, Converter, System, Tone, key_default
from .figures import Figures, FigureValue, figure_field, result_class

DecimationFilter = folding.Decimation


@dataclass(frozen=True)
class ToneFold:
    """One ``[[interference]]`` tone after sampling."""

    index: int
    frequency_hz: float
    source: str
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


def _input(s: SamplingResult) -> bool:
    return s.kind == "input"


def _decimated(s: SamplingResult) -> bool:
    return s.kind == "input" and s.decimation is not None


def _filter_json(f: flt.AnalogFilter | None, s: SamplingResult) -> FigureValue:
    return None if f is None else {"family": f.family, "order": f.order, "corner_hz": f.corner_hz,
                                   "ripple_db": f.ripple_db, "stopband_db": f.stopband_db,
                                   "proposed": s.filter_proposed}


def _least_orders_json(least: dict[str, flt.OrderDesign | None], s: SamplingResult) -> FigureValue:
    if not least:
        return None
    return {fam: None if d is None else {"order": d.order, "corner_hz": d.corner_hz} for fam, d in least.items()}


def _zone_json(zone: str, s: SamplingResult) -> FigureValue:
    return None if s.alias_rejection_db is None else zone


def _tones_json(tones: tuple[ToneFold, ...], s: SamplingResult) -> FigureValue:
    return [t.as_dict() for t in tones]


def _finite_json(value: float | None, s: object) -> FigureValue:
    """A figure that may be infinite (the limit as f grows without bound) as JSON has it: null."""
    return value if value is not None and math.isfinite(value) else None


@result_class
class SamplingResult(Figures):
    """Rate and folding figures of an input or output channel; the anti-aliasing filter's of an input.

    Fields are in the order of the figures; the figures from ``anti_alias_filter`` on are an
    input's only, and the decimation filter's only with one."""

    rate_hz: float = figure_field("sample_rate_hz", "Sample rate", "Hz", "fs",
                                  "as specified or inherited from the converter")
    nyquist_hz: float = figure_field("nyquist_hz", "Nyquist frequency", "Hz", "f_N = fs / 2",
                                     "Shannon 1949; Nyquist 1928")
    band_low_hz: float = figure_field("band_low_hz", "Band, low edge", "Hz", "as specified", "requirement")
    band_high_hz: float = figure_field("band_high_hz", "Band, high edge", "Hz", "f_high, as specified", "requirement")
    rate_over_nyquist: float = figure_field("rate_over_nyquist", "Rate over the band's Nyquist rate", "",
                                            "fs / (2 f_high)", "ADI MT-002")
    first_alias_hz: float = figure_field("first_alias_hz", "First alias onto the band top", "Hz", "fs - f_high",
                                         "ADI MT-002")
    filter: flt.AnalogFilter | None = figure_field(
        "anti_alias_filter", "Anti-aliasing filter", "",
        "family, order, corner_hz (-3 dB: butterworth, bessel; ripple edge: chebyshev1, elliptic; "
        "stopband edge: chebyshev2), ripple_db, stopband_db, proposed",
        "as specified; sized by specfold when only the family is given",
        default=None, encode=_filter_json, shown=_input)
    stages: list[dict[str, float | None]] | None = figure_field(
        "stages", "Filter stages (f0, Q)", "",
        "poles of the prototype in pairs: f0 = |p| / 2 pi, Q = |p| / (2 |Re p|); a real pole is a "
        "first-order stage (q null); ascending Q",
        "Williams & Taylor; Zumbahlen, Linear Circuit Design Handbook ch. 8", default=None, shown=_input)
    band_edge_droop_db: float | None = figure_field(
        "band_edge_droop_db", "Filter loss at the band top", "dB", "A(f_high) = -20 log10 |H(j 2 pi f_high)|",
        "Williams & Taylor; scipy.signal analog prototypes", default=None, shown=_input)
    passband_loss_db: float | None = figure_field(
        "passband_loss_db", "Largest filter loss inside the band", "dB",
        "max A(f) for f_low <= f <= f_high (ripple troughs, the DC loss of even-order ripple "
        "families, the band top)", "Williams & Taylor; scipy.signal analog prototypes", default=None, shown=_input)
    passband_loss_at_hz: float | None = figure_field(
        "passband_loss_at_hz", "Where the largest loss inside the band lies", "Hz",
        "argmax A(f), f_low <= f <= f_high", "Williams & Taylor", default=None, shown=_input)
    filter_rejection_at_first_alias_db: float | None = figure_field(
        "filter_rejection_at_first_alias_db", "Analog filter loss at the first alias", "dB",
        "A_analog(fs - f_high)", "Williams & Taylor", default=None, shown=_input)
    alias_rejection_db: float | None = figure_field(
        "alias_rejection_db", "Alias rejection (least, over every band that folds onto the band)", "dB",
        "min over f in k fs - f_high .. k fs + f_high (k >= 1) of A_analog(f) + A_digital(f); "
        "A_digital = 0 within the decimation filter's stopband edge of a multiple of f_mod",
        "Oppenheim & Schafer ch. 4; ADI MT-002; decimation filter from system.toml", default=None, shown=_input)
    alias_worst_hz: float | None = figure_field(  # math.inf: the limit as f grows without bound
        "alias_worst_hz", "Where the least alias rejection lies", "Hz",
        "argmin of the above; null when it is the limit as f grows without bound "
        "(even-order chebyshev2 and elliptic filters)", "Oppenheim & Schafer ch. 4",
        default=None, encode=_finite_json, shown=_input)
    alias_worst_band: str = figure_field(
        "alias_worst_band", "Kind of band the least alias rejection lies in", "",
        "fold (k fs +/- f_high) | transition (the decimation filter's transition band) | "
        "modulator (near a multiple of f_mod)", "ADI MT-002", default=folding.FOLD, encode=_zone_json, shown=_input)
    alias_rejection_source: str = figure_field(
        "alias_rejection_source", "What sets the alias rejection", "",
        "analog filter | digital decimation filter | none", "specfold", default=folding.NONE, shown=_input)
    group_delay_dc_s: float | None = figure_field(
        "group_delay_dc_s", "Filter group delay at DC", "s", "tau(0) = sum -Re p / |p|^2",
        "from the pole positions; Williams & Taylor", default=None, shown=_input)
    group_delay_band_edge_s: float | None = figure_field(
        "group_delay_band_edge_s", "Filter group delay at the band top", "s",
        "tau(w) = sum -s_p / ((w - w_p)^2 + s_p^2)", "from the pole positions; Williams & Taylor",
        default=None, shown=_input)
    peak_dbfs: float | None = figure_field(
        "peak_level_dbfs", "Signal peak at the converter", "dBFS",
        "20 log10(peak x sensitivity x gain / full-scale amplitude), full-scale amplitude = "
        "(high - low) / 2", "AES17 (sine-referenced dBFS)", default=None, shown=_input)
    floor_dbfs: float | None = figure_field(
        "alias_floor_dbfs", "Floor that aliases must stay under", "dBFS",
        "min(peak, 0 dBFS) - snr; else -(6.0206 N + 1.7609)", "ADI MT-001, MT-002", default=None, shown=_input)
    required_alias_rejection_db: float | None = figure_field(
        "required_alias_rejection_db", "Alias rejection required", "dB", "out_of_band - floor", "ADI MT-002",
        default=None, shown=_input)
    stop_edge_hz: float | None = figure_field(
        "filter_stop_edge_hz", "Frequency the analog filter must reject at", "Hz",
        "fs - f_high; on delta-sigma: f_mod - f_high", "ADI MT-002", default=None, shown=_input)
    least_orders: dict[str, flt.OrderDesign | None] = figure_field(
        "min_filter_order", "Least filter order per family", "",
        "least n whose design, cornered to lose exactly the flatness at f_high, gives an alias "
        "rejection (as above) >= required; null above 20",
        "starts from scipy.signal buttord/cheb1ord/cheb2ord/ellipord (analog=True); bessel by search",
        default_factory=dict, encode=_least_orders_json, shown=_input)
    modulator_rate_hz: float | None = figure_field(  # on every delta-sigma input whose rate is known
        "modulator_rate_hz", "Delta-sigma modulator rate", "Hz", "f_mod (or the least OSR x fs)", "system.toml",
        default=None, shown=_decimated)
    modulator_alias_hz: float | None = figure_field(
        "modulator_alias_hz", "First analog alias through the modulator", "Hz", "f_mod - f_high",
        "derived from the sampling theorem", default=None, shown=_decimated)
    modulator_alias_rejection_db: float | None = figure_field(
        "modulator_alias_rejection_db", "Analog filter loss over the modulator's alias bands", "dB",
        "min A_analog(f) within the decimation stopband edge of m f_mod, m >= 1", "Williams & Taylor",
        default=None, shown=_decimated)
    digital_passband_hz: float | None = figure_field(
        "digital_passband_hz", "Decimation filter passband edge", "Hz", "passband x fs", "system.toml",
        default=None, shown=_decimated)
    digital_stopband_hz: float | None = figure_field(
        "digital_stopband_hz", "Decimation filter stopband edge", "Hz", "stopband x fs", "system.toml",
        default=None, shown=_decimated)
    digital_rejection_db: float | None = figure_field(
        "digital_rejection_db", "Decimation filter stopband rejection", "dB", "as specified", "system.toml",
        default=None, shown=_decimated)
    tones: tuple[ToneFold, ...] = figure_field(
        "interference_folds", "Where each declared tone lands", "",
        "f_a = |f - fs round(f / fs)|, zone = floor(2 f / fs) + 1, landed = level - A(f)",
        "Oppenheim & Schafer ch. 4; ADI MT-002", default=(), encode=_tones_json, shown=_input)

    kind: str = "input"
    architecture: str = ""
    flatness_db: float = key_default("signal.flatness")
    out_of_band_dbfs: float = key_default("signal.out_of_band")
    filter_proposed: bool = False
    filter_problem: str = ""  # why a declared [filter] could not be designed
    decimation: DecimationFilter | None = None
    delta_sigma: bool = False

    @property
    def has_input_figures(self) -> bool:
        return self.kind == "input"

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
    return DecimationFilter(modulator_rate(conv, rate), conv.passband * rate, conv.stopband * rate,
                            conv.stopband_rejection_db)


def modulator_rate(conv: Converter, rate: float) -> float | None:
    """The converter's modulator rate, else the least oversampling ratio x fs (the worst case: its
    aliases lie nearest the band); None when neither is given."""
    if conv.modulator_rate is not None:
        return conv.modulator_rate
    return min(conv.oversampling_ratios) * rate if conv.oversampling_ratios else None


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
    if volts is None or fs is None or fs.amplitude <= 0:
        return None
    return dsp.level_dbfs(abs(volts), fs.amplitude)


def _floor(channel: Channel, peak_dbfs: float | None) -> float | None:
    snr = channel.signal.snr_db
    if snr is not None:
        return min(peak_dbfs if peak_dbfs is not None else 0.0, 0.0) - snr
    bits = channel.conversion.bits
    return -quantization.sqnr_db(bits) if bits is not None else None


def _order_masks(rate: float, high: float, stop: float, dec: DecimationFilter | None,
                 delta_sigma: bool) -> list[tuple[float, float]]:
    """(stop edge, loss needed there) pairs every compliant filter must meet: a necessary
    condition of :func:`folding.alias_rejection`, so the least order of each is a lower bound.

    With one mask it is also sufficient (every classical design has at least the needed loss
    from its edge up), so the classical least order is exact."""
    masks = []
    if not delta_sigma or dec is None:
        masks.append((rate - high, stop))
    else:
        f_mod = dec.modulator_rate_hz
        if f_mod:
            ratio = f_mod / rate
            exact = abs(ratio - round(ratio)) <= 1e-9 * ratio
            # the lowest content that folds through the modulator (folding._near_modulator)
            masks.append((f_mod - (high if exact else dec.stopband_hz), stop))
        if rate - high < dec.stopband_hz:  # the first alias falls in the decimation filter's transition band
            masks.append((rate - high, stop))
        elif stop - dec.rejection_db > 0:  # the decimation filter alone is not enough near fs
            masks.append((rate - high, stop - dec.rejection_db))
    return [(edge, need) for edge, need in masks if edge > high * (1 + 1e-12)]


def least_orders(rate: float, high: float, flatness: float, required: float | None,
                 dec: DecimationFilter | None = None, delta_sigma: bool = False) -> dict[str, flt.OrderDesign | None]:
    """Least order per family whose design, cornered to lose exactly ``flatness`` at ``high``
    (the family's own corner rule, :func:`generator.dsp.filters.least_order`), gives an alias
    rejection (:func:`generator.dsp.folding.alias_rejection`, the very figure the channel reports)
    of at least ``required``; None for a family that needs more than 20 poles.

    Starts from the largest classical least order over the masks every compliant filter must
    meet (:func:`_order_masks`; exact on its own for a converter without a decimation filter,
    where fs - f_high is the only edge) and steps up until the rejection holds.
    """
    if required is None or not rate >= 2 * high or not high > 0:
        return {}
    stop = max(required, flatness + 0.01)  # a requirement below the flatness is met by any order
    masks = _order_masks(rate, high, stop, dec, delta_sigma)
    if not masks:
        return {}
    out: dict[str, flt.OrderDesign | None] = {}
    for fam in flt.FAMILIES:
        starts = [flt.least_order(fam, high, edge, flatness, need) for edge, need in masks]
        if any(d is None for d in starts):
            out[fam] = None
            continue
        first = max((d for d in starts if d is not None), key=lambda d: d.order)
        if len(masks) == 1 or fam not in ("chebyshev2", "elliptic"):
            # one mask: exact; a monotonic stopband meets every mask from the edge up, so the largest
            # classical order over the masks is exact too
            out[fam] = first
            continue
        found = None
        for n in range(first.order, flt.MAX_ORDER + 1):
            d = flt.design_for_flatness(fam, n, high, flatness, stop)
            if d is not None and folding.alias_rejection(d.as_filter(), rate, high, dec).db >= stop - 1e-9:
                found = d
                break
        out[fam] = found
    return out


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
        index=i, frequency_hz=f, source=tone.source, alias_hz=landed_at, zone=zone,
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
        rate_over_nyquist=dsp.rate_over_nyquist(rate, high),
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

    f_mod = modulator_rate(conv, rate) if conv is not None and delta_sigma else None
    least = least_orders(rate, high, sig.flatness_db, required, dec, delta_sigma)
    filt, proposed, problem = _design(channel, least)

    # Below Nyquist the band folds onto itself (below-nyquist says so) and no rejection figure means anything.
    sampled = rate >= 2 * high * (1 - 1e-9)
    rejection = folding.alias_rejection(filt, rate, high, dec, None if dec is not None else f_mod) if sampled else None
    through = folding.modulator_alias_rejection(filt, rate, high, dec) if dec is not None and sampled else None
    passband = flt.largest_loss_between(filt, low, high) if filt is not None else None
    if delta_sigma and dec is not None:
        stop_edge = rate - high if rate - high < dec.stopband_hz else (f_mod - high if f_mod else None)
    else:
        stop_edge = rate - high
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
        band_edge_droop_db=flt.attenuation_db(filt, high) if filt is not None else 0.0,
        passband_loss_db=passband.loss_db if passband is not None else 0.0,
        passband_loss_at_hz=passband.frequency_hz if passband is not None else None,
        filter_rejection_at_first_alias_db=flt.attenuation_db(filt, rate - high) if filt is not None else None,
        alias_rejection_db=rejection.db if rejection is not None else None,
        alias_worst_hz=rejection.frequency_hz if rejection is not None else None,
        alias_worst_band=rejection.zone if rejection is not None else folding.FOLD,
        alias_rejection_source=rejection.source if rejection is not None else folding.NONE,
        modulator_alias_hz=f_mod - high if f_mod else None,
        modulator_alias_rejection_db=through.loss_db if through is not None else None,
        group_delay_dc_s=flt.group_delay_s(filt, 0.0) if filt is not None else None,
        group_delay_band_edge_s=flt.group_delay_s(filt, high) if filt is not None else None,
        peak_dbfs=peak_dbfs,
        floor_dbfs=floor,
        required_alias_rejection_db=required,
        stop_edge_hz=stop_edge,
        least_orders=least,
        modulator_rate_hz=f_mod,
        digital_passband_hz=dec.passband_hz if dec is not None else None,
        digital_stopband_hz=dec.stopband_hz if dec is not None else None,
        digital_rejection_db=dec.rejection_db if dec is not None else None,
        stages=stage_list(filt) if filt is not None else None,
        tones=tuple(_tone(i, channel, t, rate, filt, dec) for i, t in enumerate(channel.interference)),
    )


# ------------------------------------------------------------------ what would fix it (rule messages)


def rate_for_rejection(s: SamplingResult, need_db: float) -> float | None:
    """Least rate at which the channel's own filter rejects everything from the first alias up by
    ``need_db``: fs = f_high + f_A, f_A the lowest frequency from which the filter's loss stays at or
    above ``need_db`` (:func:`generator.dsp.filters.frequency_for_attenuation`; fs - f_high is the
    first alias, ADI MT-002).  None without a filter, or when its stopband never gets there."""
    if s.filter is None:
        return None
    f_ok = flt.frequency_for_attenuation(s.filter, need_db)
    return None if f_ok is None else f_ok + s.band_high_hz


def rate_clearing_transition(s: SamplingResult) -> float | None:
    """Least rate whose first alias fs - f_high reaches the decimation filter's stopband edge
    b x fs (b the stopband as a fraction of the output rate): fs = f_high / (1 - b) [DER from ADI
    MT-002]; None without a decimation filter or when b >= 1 (no rate does)."""
    dec = s.decimation
    if dec is None:
        return None
    stop_frac = dec.stopband_hz / s.rate_hz
    return s.band_high_hz / (1 - stop_frac) if stop_frac < 1 else None


def rate_for_decimation_passband(s: SamplingResult) -> tuple[float, float] | None:
    """(passband as a fraction p of the output rate, least rate whose decimation passband p x fs
    reaches the band top: fs = f_high / p); None without a decimation filter."""
    dec = s.decimation
    if dec is None:
        return None
    ratio = dec.passband_hz / s.rate_hz
    return ratio, s.band_high_hz / ratio


@dataclass(frozen=True)
class CornerFix:
    """A filter's corner moved to lose exactly the flatness at the band top."""

    corner_hz: float
    alias_rejection_db: float | None  # the channel's alias rejection with it; None when not judged


def corner_for_flatness(s: SamplingResult) -> CornerFix | None:
    """The corner at which the channel's filter (same family, order, ripple, stopband) loses
    exactly the flatness at f_high (:func:`generator.dsp.filters.corner_for_droop`), with the alias
    rejection (:func:`generator.dsp.folding.alias_rejection`) it then gives when the channel has a
    required one; None without a filter, or for a ripple family whose ripple exceeds the flatness."""
    filt = s.filter
    if filt is None:
        return None
    corner = flt.corner_for_droop(filt, s.band_high_hz, s.flatness_db)
    if corner is None:
        return None
    after = None
    if s.required_alias_rejection_db is not None and s.alias_rejection_db is not None:
        moved = flt.design(filt.family, filt.order, corner, filt.ripple_db, filt.stopband_db)
        after = folding.alias_rejection(moved, s.rate_hz, s.band_high_hz, s.decimation,
                                        None if s.decimation is not None else s.modulator_rate_hz).db
    return CornerFix(corner, after)


def rate_for_order(s: SamplingResult, family: str, order: int) -> float | None:
    """Least rate at which ``order`` poles of ``family`` meet the channel's mask: the flatness at
    f_high and the required rejection at fs - f_high; fs = f_high + the stopband edge of
    :func:`generator.dsp.filters.stop_edge_for_order`.  None when no edge up to 1e9 f_high does."""
    need = s.required_alias_rejection_db or 0.0
    edge = flt.stop_edge_for_order(family, s.band_high_hz, order, s.flatness_db, max(need, s.flatness_db + 0.01))
    return None if edge is None else edge + s.band_high_hz


def order_for_tone(s: SamplingResult, tone: ToneFold, more_db: float) -> flt.AnalogFilter | None:
    """The channel's filter at the least higher order (same family, corner, ripple and stopband) whose
    loss at the tone's frequency, A(f) = -20 log10 |H(j 2 pi f)| (Williams & Taylor), is ``more_db``
    above what the filter gives it now; None without a filter or when 20 poles do not."""
    filt = s.filter
    if filt is None:
        return None
    target = tone.analog_attenuation_db + more_db
    for n in range(filt.order + 1, flt.MAX_ORDER + 1):
        cand = flt.design(filt.family, n, filt.corner_hz, filt.ripple_db, filt.stopband_db)
        if flt.attenuation_db(cand, tone.frequency_hz) >= target:
            return cand
    return None
