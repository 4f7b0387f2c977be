"""Curves and sweeps the channel pages draw, computed from a channel's result.

The charts (:mod:`generator.charts`) choose where to draw (the frequency grids, the rates of a
sweep) and lay the numbers out; the numbers come from here, from the same dsp functions and the
same result the figures and rules use.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from ..dsp import filters as flt
from ..dsp import reconstruction as rec
from .output import OutputResult
from .sampling import SamplingResult

Floats = NDArray[np.float64]


@dataclass(frozen=True)
class Response:
    gain_db: Floats  # -A(f) = 20 log10 |H(j 2 pi f)|; -inf at a transmission zero
    delay_s: Floats  # group delay tau(f)


def filter_response(filt: flt.AnalogFilter, f_hz: Floats) -> Response:
    """Gain -A(f) (:func:`generator.dsp.filters.attenuation_db`) and group delay tau(f)
    (:func:`generator.dsp.filters.group_delay_s`) of an analog filter on a frequency grid, from its
    poles and zeros (Williams & Taylor; scipy.signal analog prototypes)."""
    return Response(-flt.attenuation_db(filt, f_hz), flt.group_delay_s(filt, f_hz))


# ---------------------------------------------------------------------------- least order by rate


@dataclass(frozen=True)
class OrdersByRate:
    """Least order per family at each rate tried (a family needing more than 20 poles at a rate is
    missing there), for the mask: ``flatness_db`` at f_high, ``stop_db`` at fs - f_high."""

    flatness_db: float
    stop_db: float
    orders: dict[str, list[tuple[float, int]]]  # family -> [(rate, least order)], in rate order


@lru_cache(maxsize=4096)
def _least_order(family: str, ratio: float, pass_db: float, stop_db: float) -> int | None:
    # the least order depends only on f_stop / f_pass and the two losses, so designs are shared
    d = flt.least_order(family, 1.0, ratio, pass_db, stop_db)
    return None if d is None else d.order


def least_orders_by_rate(s: SamplingResult, rates_hz: Floats) -> OrdersByRate | None:
    """Least order per family (:func:`generator.dsp.filters.least_order`: scipy's analog order
    formulas, bessel by search) meeting the channel's mask at each of ``rates_hz``: the flatness at
    f_high and the required alias rejection (at least the flatness + 0.01 dB) at the first alias
    fs - f_high (ADI MT-002).  None for a channel without a requirement, a band top or a flatness."""
    if s.required_alias_rejection_db is None or not s.band_high_hz > 0 or not s.flatness_db > 0:
        return None
    f_high = s.band_high_hz
    stop_db = round(max(s.required_alias_rejection_db, s.flatness_db + 0.01), 9)
    orders: dict[str, list[tuple[float, int]]] = {}
    for fam in flt.FAMILIES:
        found = []
        for fs in rates_hz:
            n = _least_order(fam, round(float(fs) / f_high - 1.0, 12), s.flatness_db, stop_db)
            if n is not None:
                found.append((float(fs), n))
        orders[fam] = found
    return OrdersByRate(s.flatness_db, stop_db, orders)


# ------------------------------------------------------------------------------- hold and images


def hold_response_db(o: OutputResult, f_hz: Floats) -> Floats | None:
    """The zero-order hold's gain 20 log10 |sinc(f / fs)| on a grid (-inf at multiples of fs;
    ADI MT-017); None for an output without a hold."""
    if o.hold != "zero-order":
        return None
    with np.errstate(divide="ignore"):
        return np.asarray(20.0 * np.log10(np.abs(np.sinc(f_hz / o.rate_hz))), dtype=np.float64)


def band_top_images(o: OutputResult, multiples: int) -> list[tuple[float, float]]:
    """(frequency, level in dB re the tone) of each image of the band top, k fs +/- f_high for
    k = 1 .. ``multiples`` up to ``multiples`` x fs: the hold's 20 log10 |sinc(g / fs)|
    (:func:`generator.dsp.reconstruction.hold_droop_db`, ADI MT-017; 0 without a hold) less the
    reconstruction filter's loss A(g) (Williams & Taylor).  -inf where the hold has a zero."""
    fs, f_high = o.rate_hz, o.band_high_hz
    images = sorted(f for k in range(1, multiples + 1) for f in (k * fs - f_high, k * fs + f_high)
                    if 0 < f <= multiples * fs)
    out = []
    for f in images:
        level = rec.hold_droop_db(f, fs) if o.hold == "zero-order" else 0.0
        if o.filter is not None:
            level -= float(flt.attenuation_db(o.filter, f))
        out.append((f, level))
    return out


# ------------------------------------------------------------------------------------ pixels


def aperture_response(pitch_m: float, f_cycles_per_m: Floats) -> Floats:
    """Full-fill pixel aperture response |sinc(f p)| on a grid of spatial frequencies (box
    aperture; Holst, from memory): 2/pi at the spatial Nyquist frequency 1 / (2 p)."""
    return np.asarray(np.abs(np.sinc(f_cycles_per_m * pitch_m)), dtype=np.float64)
