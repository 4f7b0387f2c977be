"""What folds onto a sampled band, and how much of it the chain removes.

Sampling at fs makes every frequency in k fs - f_high .. k fs + f_high (k >= 1) land inside
0..f_high [OS] (ch. 4), [MT-002]; a held D/A output carries images of every tone f at k fs +/- f
[MT-017].  The figures here are the *least* rejection over all of those bands, not the value at
fs - f_high alone: a filter whose stopband ripples back up (chebyshev2, elliptic), or tends to its
stopband floor as f grows (even orders), has its worst point elsewhere.

Delta-sigma converters sample twice: the modulator at f_mod, then the decimation filter, which
runs at f_mod and repeats around every multiple of it, reduces the rate to fs.  Content within
the decimation filter's stopband edge of a multiple of f_mod (including the multiple 0: the
filter's own transition band) is not rejected by it; everything else that folds onto the band
gets the filter's stopband rejection on top of the analog filter's loss [MT-002], [DER].

References
----------
[OS]  A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*, ch. 4.
[MT-002] W. Kester, "What the Nyquist criterion means to your sampled data system design",
      Analog Devices tutorial MT-002.
[MT-017] W. Kester, "Oversampling interpolating DACs", Analog Devices tutorial MT-017.
[DER] derived here from the definitions above.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from . import filters as flt
from .filters import AnalogFilter, Bands, LossAt

ANALOG = "analog filter"
DIGITAL = "digital decimation filter"
NONE = "none"

FOLD = "fold"
"""The least rejection lies in an ordinary fold band, k fs +/- f_high."""
TRANSITION = "transition"
"""... in the decimation filter's transition band (below its stopband edge), where it rejects nothing."""
MODULATOR = "modulator"
"""... near a multiple of the modulator rate, where content folds through the modulator itself."""


@dataclass(frozen=True)
class Decimation:
    """The digital filter of a delta-sigma converter, in Hz at the channel's rate.

    ``modulator_rate_hz`` None: the modulator rate is not known (its aliases cannot be placed).
    """

    modulator_rate_hz: float | None
    passband_hz: float
    stopband_hz: float
    rejection_db: float

    def attenuation_db(self, f_hz: float) -> float:
        """Stopband rejection where the distance to the nearest multiple of f_mod is at least the
        stopband edge, else 0 dB (passband and unspecified transition band) [MT-002], [DER]."""
        d = abs(f_hz) if not self.modulator_rate_hz else abs(math.remainder(f_hz, self.modulator_rate_hz))
        return self.rejection_db if d >= self.stopband_hz else 0.0


@dataclass(frozen=True)
class Rejection:
    """The least rejection of everything that folds onto the band.

    ``frequency_hz`` is where it lies (``math.inf``: the limit as f grows without bound);
    ``source`` says what sets it (:data:`ANALOG`, :data:`DIGITAL` or :data:`NONE`), ``zone``
    what kind of band it lies in (:data:`FOLD`, :data:`TRANSITION` or :data:`MODULATOR`).
    """

    db: float
    frequency_hz: float
    source: str
    zone: str


def _near_modulator(rate_hz: float, f_high_hz: float, dec: Decimation) -> tuple[list[Bands], list[Bands]]:
    """The parts of the fold bands the decimation filter does not reject: (in its own transition
    band below the stopband edge s, within s of a multiple m >= 1 of f_mod), as :data:`Bands`.

    With f_mod an integer multiple of fs, the fold bands near every multiple of f_mod repeat the
    same pattern, so each piece of it is one family of period f_mod (exact).  Otherwise the whole
    zone f_mod m - s .. f_mod m + s is taken (it holds every fold band part there: conservative).
    """
    s = dec.stopband_hz
    transition: list[Bands] = []
    k = 1
    while k * rate_hz - f_high_hz < s and k <= 1_000_000:
        transition.append((rate_hz, -f_high_hz, min(f_high_hz, s - k * rate_hz), k, k))
        k += 1
    f_mod = dec.modulator_rate_hz
    if not f_mod:
        return transition, []
    ratio = f_mod / rate_hz
    near: list[Bands] = []
    if abs(ratio - round(ratio)) <= 1e-9 * ratio and round(ratio) >= 1:
        reach = math.ceil((s + f_high_hz) / rate_hz)
        for j in range(-reach, reach + 1):
            a, b = max(j * rate_hz - f_high_hz, -s), min(j * rate_hz + f_high_hz, s)
            if a <= b:
                near.append((f_mod, a, b, 1, math.inf))
    else:
        near.append((f_mod, -s, s, 1, math.inf))
    return transition, near


def alias_rejection(filt: AnalogFilter | None, rate_hz: float, f_high_hz: float,
                    decimation: Decimation | None = None, modulator_rate_hz: float | None = None) -> Rejection:
    """Least rejection, in dB, of content anywhere that folds onto 0..f_high at ``rate_hz``.

    Without a decimation filter: min over f in k fs - f_high .. k fs + f_high (k >= 1) of the
    analog loss A(f) [OS], [MT-002].  With one (delta-sigma): min(T1, T2), where T1 is the least
    A(f) over the fold bands' parts the decimation filter does not reject (its transition band, and
    near every multiple of f_mod, where content folds through the modulator) and T2 the least
    A(f) over all fold bands plus the decimation filter's stopband rejection [DER].  No analog
    filter counts as 0 dB everywhere.  Needs 0 < f_high <= fs / 2 (ValueError otherwise: below
    that rate the band folds onto itself).  A delta-sigma converter whose decimation filter is not
    described gets no credit for it: pass ``decimation`` None and its ``modulator_rate_hz``, and
    content within f_high of every multiple of f_mod counts too.  Exact to the turning points of
    the filter's loss (:func:`generator.dsp.filters.least_loss_on_bands`).
    """
    if not (0 < f_high_hz <= rate_hz / 2 * (1 + 1e-9)):
        raise ValueError(f"a band up to {f_high_hz} Hz is not sampled at {rate_hz} Hz without folding onto itself")
    folds = flt.fold_bands(rate_hz, f_high_hz)
    everywhere = flt.least_loss_on_bands(filt, folds)
    source = ANALOG if filt is not None else NONE
    if decimation is None:
        plain = Rejection(everywhere.loss_db, everywhere.frequency_hz, source, FOLD)
        if modulator_rate_hz:
            through = flt.least_loss_on_bands(filt, flt.fold_bands(modulator_rate_hz, f_high_hz))
            if through.loss_db < plain.db:
                return Rejection(through.loss_db, through.frequency_hz, source, MODULATOR)
        return plain
    digital = Rejection(everywhere.loss_db + decimation.rejection_db, everywhere.frequency_hz, DIGITAL, FOLD)
    best = digital
    transition, near = _near_modulator(rate_hz, f_high_hz, decimation)
    for bands, zone in ((transition, TRANSITION), (near, MODULATOR)):
        if bands:
            got = flt.least_loss_on_bands(filt, bands)
            if got.loss_db < best.db or (got.loss_db == best.db and zone != FOLD and best.zone == FOLD):
                best = Rejection(got.loss_db, got.frequency_hz, source, zone)
    return best


def modulator_alias_rejection(filt: AnalogFilter | None, rate_hz: float, f_high_hz: float,
                              decimation: Decimation) -> LossAt | None:
    """Least analog loss over the content that folds through the modulator (within the decimation
    filter's stopband edge of a multiple m >= 1 of f_mod); None when f_mod is not known [DER]."""
    _, near = _near_modulator(rate_hz, f_high_hz, decimation)
    return flt.least_loss_on_bands(filt, near) if near else None


# ---------------------------------------------------------------------------- D/A images


@dataclass(frozen=True)
class ImageRejection:
    """The least suppression of any image below its tone: ``db`` at ``image_hz``, the image of the
    in-band tone at ``tone_hz``."""

    db: float
    image_hz: float
    tone_hz: float


def _hold_db(image_hz: np.ndarray, tone_hz: np.ndarray) -> np.ndarray:
    """Suppression of an image at g of a tone at f by a zero-order hold: 20 log10(g / f), from
    |sinc(g/fs)| / |sinc(f/fs)| = f / g when g = k fs +/- f, since |sin(pi g/fs)| = |sin(pi f/fs)|
    [MT-017], [DER]."""
    with np.errstate(divide="ignore"):
        return np.asarray(20.0 * np.log10(image_hz / tone_hz), dtype=np.float64)


def image_rejection(filt: AnalogFilter | None, rate_hz: float, f_high_hz: float,
                    zero_order_hold: bool) -> ImageRejection:
    """Least suppression, in dB below its tone, of any image of any tone in 0..f_high.

    A tone at f has images at g = k fs +/- f (k >= 1) [MT-017]; the image sits
    hold(g, f) + A(g) below the tone, hold(g, f) = 20 log10(g / f) with a zero-order hold (0
    without).  Without a hold this is the least filter loss over the fold bands
    (:func:`generator.dsp.filters.least_loss_on_bands`).  With one, on each band k the hold term
    rises towards k fs (f -> 0) and falls away from it; the least total is searched on every
    monotone piece of A(g) inside each half band (its ends, and a bounded Brent search where the
    two terms move in opposite directions), band after band until the hold term alone, plus the
    least loss A can still reach, exceeds the best found [DER].  An ideal sinc compensation scales
    a tone and its images alike, so it does not change this figure.
    """
    if not zero_order_hold:
        got = flt.least_loss_on_bands(filt, flt.fold_bands(rate_hz, f_high_hz))
        tone = f_high_hz if math.isinf(got.frequency_hz) else abs(math.remainder(got.frequency_hz, rate_hz))
        return ImageRejection(got.loss_db, got.frequency_hz, tone)
    if filt is None:
        g = rate_hz - f_high_hz
        return ImageRejection(float(_hold_db(np.array([g]), np.array([f_high_hz]))[0]), g, f_high_hz)
    from scipy import optimize

    shape = flt.prototype_shape(filt.family, filt.order, filt.ripple_db, filt.stopband_db)
    turns = np.array(shape.x[1:]) * filt.corner_hz
    turn_loss = np.array(shape.loss[1:])

    def total(g: np.ndarray, k: int) -> np.ndarray:
        return _hold_db(g, np.abs(g - k * rate_hz)) + np.asarray(flt.attenuation_db(filt, g))

    def floor_from(g: float) -> float:
        """Least loss A can reach at or beyond g: its value there, later turning points, the limit."""
        later = turn_loss[turns > g]
        return float(min(float(flt.attenuation_db(filt, g)), shape.limit, *(later.tolist() or [math.inf])))

    best = ImageRejection(math.inf, math.nan, math.nan)
    k = 1
    while k <= 100_000:
        centre = k * rate_hz
        lowest_hold = float(_hold_db(np.array([centre - f_high_hz]), np.array([f_high_hz]))[0])
        if lowest_hold + floor_from(centre - f_high_hz) >= best.db:
            break
        for lo, hi in ((centre - f_high_hz, centre), (centre, centre + f_high_hz)):
            cuts = np.concatenate([[lo], turns[(turns > lo) & (turns < hi)], [hi]])
            for a, b in itertools.pairwise(cuts):
                # the hold term is infinite at the centre (a tone at DC has no image there): stay off it
                a_, b_ = (a, min(b, centre - 1e-12 * centre)) if hi == centre else (max(a, centre * (1 + 1e-12)), b)
                if not a_ < b_:
                    continue
                grid = np.linspace(a_, b_, 17)
                values = total(grid, k)
                i = int(np.argmin(values))
                g_best, v_best = float(grid[i]), float(values[i])
                if 0 < i < len(grid) - 1:
                    res = optimize.minimize_scalar(lambda g, k=k: float(total(np.array([g]), k)[0]),
                                                   bounds=(float(grid[i - 1]), float(grid[i + 1])), method="bounded",
                                                   options={"xatol": 1e-10 * float(grid[i])})
                    if res.success and float(res.fun) < v_best:
                        g_best, v_best = float(res.x), float(res.fun)
                if v_best < best.db:
                    best = ImageRejection(v_best, g_best, abs(g_best - centre))
        k += 1
    return best
