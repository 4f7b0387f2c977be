"""Reconstruction of a D/A output: the zero-order hold's droop, images, their rejection.

A D/A converter that holds each sample for one period 1/fs multiplies the spectrum of the
sample stream by the hold's response |H(f)| = |sin(pi f/fs) / (pi f/fs)| = |sinc(f/fs)|
(numpy's normalised sinc).  The stream itself carries images of every tone f at k fs +/- f.

Sign convention: functions named ``*_gain_db`` or ``*_droop_db`` return a gain in dB (0 or
negative; -0.35 means 0.35 dB of loss); functions named ``*_attenuation_db`` return a
positive number of dB of suppression.

References
----------
[MT-017] W. Kester, "Oversampling interpolating DACs", Analog Devices tutorial MT-017
      (sin(x)/x roll-off of the zero-order hold, images at k fs +/- f).
[OS]  A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*, ch. 4
      (zero-order-hold reconstruction).
[MT-001] W. Kester, "Taking the mystery out of the infamous formula, SNR = 6.02N + 1.76 dB",
      Analog Devices tutorial MT-001.
"""

from __future__ import annotations

import itertools
import math
from functools import lru_cache

import numpy as np

from . import filters as flt


def hold_gain(f_hz: float, rate_hz: float) -> float:
    """Linear magnitude of a zero-order hold at ``f_hz``: |sinc(f/fs)| [MT-017], [OS].

    ``numpy.sinc(x)`` is sin(pi x)/(pi x), so this is |sin(pi f/fs)/(pi f/fs)|; 1 at DC,
    2/pi = 0.63662 at fs/2, 0 at every multiple of fs.
    """
    return float(abs(np.sinc(f_hz / rate_hz)))


def hold_droop_db(f_hz: float, rate_hz: float) -> float:
    """Zero-order-hold gain at ``f_hz`` in dB: 20 log10 |sinc(f/fs)| (0 or negative) [MT-017].

    -3.9224 dB at fs/2, -0.14335 dB at 0.1 fs.  Minus infinity at a multiple of fs.
    """
    g = hold_gain(f_hz, rate_hz)
    return 20.0 * math.log10(g) if g > 0.0 else -math.inf


def compensated_droop_db(f_hz: float, rate_hz: float) -> float:
    """Residual hold droop after an ideal inverse-sinc correction of the sample stream: 0 dB.

    An ideal digital pre-emphasis 1/|sinc(f/fs)| over 0..fs/2 cancels the hold's loss exactly
    in band [MT-017]; a real correction filter leaves a small ripple its data sheet states.
    ``f_hz`` and ``rate_hz`` are kept for symmetry with :func:`hold_droop_db`.
    """
    del f_hz, rate_hz
    return 0.0


def image_frequencies(f_hz: float, rate_hz: float, orders: int = 2) -> list[float]:
    """Images of a tone f in the held output: k fs - f and k fs + f for k = 1..orders [MT-017].

    Returned in ascending order of k, minus before plus: 20 kHz at 44.1 kHz gives
    24.1, 64.1, 68.2, 108.2 kHz.
    """
    out: list[float] = []
    for k in range(1, orders + 1):
        out.extend((k * rate_hz - f_hz, k * rate_hz + f_hz))
    return out


def first_image(f_hz: float, rate_hz: float) -> float:
    """Lowest image of a tone at f: fs - f [MT-017]."""
    return rate_hz - f_hz


def image_level_after_hold_db(f_hz: float, rate_hz: float) -> float:
    """Level of the first image (fs - f) relative to the tone f after a zero-order hold, in dB.

    |sinc((fs - f)/fs)| / |sinc(f/fs)| = f/(fs - f), because sin(pi (1 - x)) = sin(pi x);
    so the level is 20 log10(f/(fs - f)), negative for f < fs/2 [MT-017], derived.  An ideal
    inverse-sinc correction does not change it: the digital correction has the same gain at
    fs - f as at f.  -1.6197 dB for 20 kHz at 44.1 kHz.
    """
    return 20.0 * math.log10(f_hz / (rate_hz - f_hz))


def hold_image_attenuation_db(f_hz: float, rate_hz: float) -> float:
    """Suppression of the first image below the tone by the hold alone: 20 log10((fs - f)/f) >= 0."""
    return -image_level_after_hold_db(f_hz, rate_hz)


def filter_needed_at_image_db(target_db: float, f_hz: float, rate_hz: float) -> float:
    """Attenuation the anti-imaging filter must add at fs - f for the image to sit ``target_db``
    below the tone: target + 20 log10(f/(fs - f)) (derived from :func:`image_level_after_hold_db`).

    98.0905 dB (16-bit floor) for 20 kHz at 44.1 kHz -> 96.471 dB.
    """
    return target_db + image_level_after_hold_db(f_hz, rate_hz)


@lru_cache(maxsize=4096)
def max_hold_fraction(loss_db: float) -> float:
    """:func:`_solve_hold_fraction`, solved once per process for each loss."""
    return _solve_hold_fraction(float(loss_db))


def _solve_hold_fraction(loss_db: float) -> float:
    """Largest f/fs at which the hold loses no more than ``loss_db`` (> 0) dB.

    Solves -20 log10 |sinc(x)| = loss for x in (0, 0.5]; the loss rises monotonically over that
    range [MT-017].  Returns 0.5 when even fs/2 loses less (3.9224 dB at most).
    """
    if loss_db <= 0.0:
        return 0.0
    if loss_db >= -hold_droop_db(0.5, 1.0):
        return 0.5

    def excess(x: float) -> float:
        return -hold_droop_db(x, 1.0) - loss_db

    from scipy.optimize import brentq  # imported when first needed

    return float(brentq(excess, 1e-12, 0.5, xtol=1e-15, rtol=1e-12))


def min_rate_for_droop(f_hz: float, loss_db: float) -> float:
    """Least rate at which the hold loses at most ``loss_db`` at ``f_hz``: f / x_max, with x_max
    from :func:`max_hold_fraction`.  Infinite when ``loss_db`` <= 0."""
    x = max_hold_fraction(loss_db)
    return f_hz / x if x > 0.0 else math.inf


def largest_passband_loss(filt: flt.AnalogFilter | None, rate_hz: float, f_low_hz: float, f_high_hz: float,
                          hold: bool) -> flt.LossAt:
    """The largest loss of the output chain inside f_low .. f_high, and where it lies: the hold's
    loss -20 log10 |sinc(f/fs)| (when ``hold``, i.e. a zero-order hold without sinc compensation)
    plus the filter's loss A(f) [MT-017], [DER].

    The hold's loss rises with f below fs, so on each monotone piece of A
    (:func:`generator.dsp.filters.prototype_shape`) the sum is largest at the piece's top end where A
    rises too; where A falls a 17-point grid refined by bounded Brent search finds the interior
    maximum.
    """
    def total(f: np.ndarray) -> np.ndarray:
        h = -20.0 * np.log10(np.abs(np.sinc(f / rate_hz))) if hold else np.zeros_like(f)
        a = np.asarray(flt.attenuation_db(filt, f)) if filt is not None else np.zeros_like(f)
        return np.asarray(h + a, dtype=np.float64)

    cuts = [f_low_hz, f_high_hz]
    if filt is not None:
        shape = flt.prototype_shape(filt.family, filt.order, filt.ripple_db, filt.stopband_db)
        cuts += [x * filt.corner_hz for x in shape.x if f_low_hz < x * filt.corner_hz < f_high_hz]
    cuts = sorted(set(cuts))
    best = flt.LossAt(-math.inf, math.nan)
    from scipy import optimize

    for a, b in itertools.pairwise(cuts) if len(cuts) > 1 else [(cuts[0], cuts[0])]:
        grid = np.linspace(a, b, 17)
        values = total(grid)
        i = int(np.argmax(values))
        f_best, v_best = float(grid[i]), float(values[i])
        if 0 < i < len(grid) - 1:
            res = optimize.minimize_scalar(lambda f: -float(total(np.array([f]))[0]),
                                           bounds=(float(grid[i - 1]), float(grid[i + 1])), method="bounded",
                                           options={"xatol": 1e-10 * max(float(grid[i]), 1e-300)})
            if res.success and -float(res.fun) > v_best:
                f_best, v_best = float(res.x), -float(res.fun)
        if v_best > best.loss_db:
            best = flt.LossAt(v_best, f_best)
    return best
