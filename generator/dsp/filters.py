"""Analog anti-aliasing filters: design, response, least order, cascaded stages.

Every filter is designed once as a prototype at a normalised corner of 1 rad/s with the
analog prototypes of scipy.signal (``analog=True``: an analog filter must never be sized as a
digital one, whose bilinear pre-warping changes the transition ratio) and then scaled to
``corner_hz``.  What "corner" means depends on the family:

=============  ==============================================================================
family         corner
=============  ==============================================================================
butterworth    the -3.01 dB frequency
bessel         the -3.01 dB frequency (designed with ``norm='mag'``; scipy's default
               ``norm='phase'`` does not put -3 dB at the corner)
chebyshev1     the passband (ripple) edge: the highest frequency with loss <= ``ripple_db``
elliptic       the passband (ripple) edge, as chebyshev1
chebyshev2     the stopband edge: the lowest frequency from which loss >= ``stopband_db``
=============  ==============================================================================

Magnitude, phase and group delay are evaluated from the poles and zeros in the log domain,
log|H(jw)| = log k + sum log|jw - z_i| - sum log|jw - p_i|, on the normalised frequency
w = f / corner, so that no overflow, NaN or warning escapes for rates from 1 Hz to 10 GHz,
orders 1 to 20 and attenuations up to a few hundred dB.

References
----------
[WT]  A. B. Williams, F. J. Taylor, *Electronic Filter Design Handbook* (McGraw-Hill).
[ZUM] H. Zumbahlen (ed.), *Linear Circuit Design Handbook* (Analog Devices), ch. 8.
[A&S] M. Abramowitz, I. A. Stegun, *Handbook of Mathematical Functions*, 17.6 (the AGM and K(m)).
[SCIPY] scipy.signal: butter, bessel, cheby1, cheby2, ellip, buttord, cheb1ord, cheb2ord,
      ellipord (analog=True).
[OS]  A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*, ch. 4: content at
      k fs +/- f is indistinguishable from f after sampling.
[DER] derived here from the definitions above.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from functools import lru_cache
from typing import overload

import numpy as np
from numpy.typing import NDArray

FAMILIES = ("butterworth", "bessel", "chebyshev1", "chebyshev2", "elliptic")
MAX_ORDER = 20
IGNORED_RIPPLE_DB = 0.1
IGNORED_STOPBAND_DB = 80.0
"""The ripple a butterworth, bessel or chebyshev2 and the stopband a butterworth, bessel or
chebyshev1 carry: their response ignores it, but it is part of the filter's identity (its memo
keys, its JSON).  The schema's defaults for ``ripple`` and ``stopband_attenuation`` (dsp reads no
schema: a test keeps the two equal), so a designed filter equals the one read back from a file."""
# Attenuation is reported up to this ceiling: beyond it a number says nothing physical (and at
# an exact transmission zero of chebyshev2/elliptic the loss is infinite).
MAX_ATTENUATION_DB = 400.0
_TINY = 1e-300


@dataclass(frozen=True)
class AnalogFilter:
    """An analog low-pass filter: its parameters and its poles/zeros in rad/s, scaled to the corner."""

    family: str
    order: int
    corner_hz: float
    ripple_db: float
    stopband_db: float
    zeros: tuple[complex, ...]
    poles: tuple[complex, ...]
    gain: float

    @property
    def corner_rad_s(self) -> float:
        return 2.0 * math.pi * self.corner_hz


@dataclass(frozen=True)
class OrderDesign:
    """The least order of one family meeting a mask, and the corner (per the family's definition) it implies."""

    family: str
    order: int
    corner_hz: float
    ripple_db: float
    stopband_db: float

    def as_filter(self) -> AnalogFilter:
        return design(self.family, self.order, self.corner_hz, self.ripple_db, self.stopband_db)


@dataclass(frozen=True)
class Stage:
    """One stage of a cascade: a real pole (``q`` is None) or a complex pole pair.

    ``f0_hz`` = |p| / 2 pi; ``q`` = |p| / (2 |Re p|); ``notch_hz`` is the frequency of the stage's
    pair of imaginary-axis zeros (chebyshev2, elliptic), if any.
    """

    f0_hz: float
    q: float | None
    notch_hz: float | None = None


def _check_family(family: str) -> None:
    if family not in FAMILIES:
        raise ValueError(f"unknown filter family {family!r}; expected one of {', '.join(FAMILIES)}")


def _design_prototype(
    family: str, order: int, ripple_db: float, stopband_db: float
) -> tuple[NDArray[np.complex128], NDArray[np.complex128], float]:
    """Zeros, poles and gain of the family's prototype with its corner at 1 rad/s [SCIPY]."""
    _check_family(family)
    if not 1 <= order <= MAX_ORDER:
        raise ValueError(f"filter order {order} outside 1..{MAX_ORDER}")
    if family in ("chebyshev1", "elliptic") and not ripple_db > 0:
        raise ValueError("passband ripple must be positive")
    if family in ("chebyshev2", "elliptic") and not stopband_db > 0:
        raise ValueError("stopband attenuation must be positive")
    if family == "elliptic" and stopband_db <= ripple_db:
        raise ValueError("stopband attenuation must exceed the passband ripple")
    from scipy import signal  # imported when first needed: scipy takes about a second to import

    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        if family == "butterworth":
            z, p, k = signal.butter(order, 1.0, analog=True, output="zpk")
        elif family == "bessel":
            z, p, k = signal.bessel(order, 1.0, analog=True, norm="mag", output="zpk")
        elif family == "chebyshev1":
            z, p, k = signal.cheby1(order, ripple_db, 1.0, analog=True, output="zpk")
        elif family == "chebyshev2":
            z, p, k = signal.cheby2(order, stopband_db, 1.0, analog=True, output="zpk")
        else:
            z, p, k = signal.ellip(order, ripple_db, stopband_db, 1.0, analog=True, output="zpk")
    z = np.asarray(z, dtype=np.complex128)
    p = np.asarray(p, dtype=np.complex128)
    if not (np.all(np.isfinite(z)) and np.all(np.isfinite(p)) and math.isfinite(float(k)) and k > 0):
        raise ValueError(f"{family} prototype of order {order} could not be designed")
    return z, p, float(k)

Prototype = tuple[NDArray[np.complex128], NDArray[np.complex128], float]


@lru_cache(maxsize=4096)
def _prototype(family: str, order: int, ripple_db: float, stopband_db: float) -> Prototype:
    """The prototype of :func:`_design_prototype`, designed once per process: a handful of
    (family, order, ripple, stopband) combinations serve thousands of channels."""
    return _design_prototype(family, order, ripple_db, stopband_db)


@lru_cache(maxsize=65536)
def design(
    family: str, order: int, corner_hz: float, ripple_db: float = IGNORED_RIPPLE_DB,
    stopband_db: float = IGNORED_STOPBAND_DB,
) -> AnalogFilter:
    """Design an analog low-pass filter of ``family``, ``order``, with its corner at ``corner_hz``.

    The corner per family is defined in the module docstring (-3 dB for butterworth and
    bessel, ripple edge for chebyshev1 and elliptic, stopband edge for chebyshev2) [WT], [SCIPY].
    Poles and zeros are the prototype's scaled by wc = 2 pi corner_hz; gain is scaled by
    wc^(n_poles - n_zeros) (infinite only for absurd corners and orders; the response functions
    never use it).  ``ripple_db`` applies to chebyshev1/elliptic, ``stopband_db`` to
    chebyshev2/elliptic.  Raises ValueError for an unknown family, an order outside 1..20, or
    non-positive corner, ripple or stopband.
    """
    if not (math.isfinite(corner_hz) and corner_hz > 0):
        raise ValueError(f"filter corner must be a positive frequency, got {corner_hz}")
    z, p, k = _prototype(family, order, float(ripple_db), float(stopband_db))
    wc = 2.0 * math.pi * corner_hz
    log_gain = math.log(k) + (len(p) - len(z)) * math.log(wc)
    gain = math.exp(log_gain) if log_gain < 709.0 else math.inf
    return AnalogFilter(
        family=family,
        order=order,
        corner_hz=corner_hz,
        ripple_db=float(ripple_db),
        stopband_db=float(stopband_db),
        zeros=tuple(complex(v) * wc for v in z),
        poles=tuple(complex(v) * wc for v in p),
        gain=gain,
    )


def _normalised(filt: AnalogFilter) -> tuple[NDArray[np.complex128], NDArray[np.complex128], float]:
    return _prototype(filt.family, filt.order, filt.ripple_db, filt.stopband_db)


def _loss_normalised(
    z: NDArray[np.complex128], p: NDArray[np.complex128], k: float, x: NDArray[np.float64]
) -> NDArray[np.float64]:
    """-20 log10 |H(jx)| in the log domain, x in units of the corner (rad/s per rad/s)."""
    jx = 1j * x[..., None]
    with np.errstate(all="ignore"):
        log_num = np.sum(np.log(np.maximum(np.abs(jx - z), _TINY)), axis=-1) if z.size else 0.0
        log_den = np.sum(np.log(np.maximum(np.abs(jx - p), _TINY)), axis=-1)
    loss = -(20.0 / math.log(10.0)) * (math.log(k) + log_num - log_den)
    # Peak passband gain is 0 dB by construction; clip rounding below it and the infinite loss
    # at exact transmission zeros.
    return np.asarray(np.clip(loss, 0.0, MAX_ATTENUATION_DB), dtype=np.float64)


@overload
def attenuation_db(filt: AnalogFilter, f_hz: float) -> float: ...
@overload
def attenuation_db(filt: AnalogFilter, f_hz: NDArray[np.float64]) -> NDArray[np.float64]: ...
def attenuation_db(filt: AnalogFilter, f_hz: float | NDArray[np.float64]) -> float | NDArray[np.float64]:
    """Loss of the filter at ``f_hz`` in dB (>= 0; 0 dB = peak passband gain).

    A(f) = -20 log10 |H(j 2 pi f)|, H(s) = k prod(s - z_i) / prod(s - p_i) [WT], evaluated as
    a sum of logarithms at w = f / corner on the prototype, capped at MAX_ATTENUATION_DB.
    For butterworth this is 10 log10(1 + (f/fc)^(2n)) [WT], [ZUM].
    """
    z, p, k = _normalised(filt)
    x = np.abs(np.asarray(f_hz, dtype=np.float64)) / filt.corner_hz
    loss = _loss_normalised(z, p, k, x)
    return float(loss) if np.ndim(f_hz) == 0 else loss


@overload
def phase_rad(filt: AnalogFilter, f_hz: float) -> float: ...
@overload
def phase_rad(filt: AnalogFilter, f_hz: NDArray[np.float64]) -> NDArray[np.float64]: ...
def phase_rad(filt: AnalogFilter, f_hz: float | NDArray[np.float64]) -> float | NDArray[np.float64]:
    """Unwrapped phase of H(j 2 pi f) in radians (0 at DC, falling with frequency).

    phi(w) = sum arg(jw - z_i) - sum arg(jw - p_i) [WT]: each left-half-plane pole contributes a
    continuous angle in (-pi/2, pi/2), so the sum needs no unwrapping; an imaginary-axis zero
    adds its true jump of pi where the response changes sign.
    """
    z, p, _ = _normalised(filt)
    x = np.asarray(f_hz, dtype=np.float64) / filt.corner_hz
    jx = 1j * x[..., None]
    num = np.sum(np.angle(jx - z), axis=-1) if z.size else 0.0
    # Zeros on the axis come in conjugate pairs; at DC their angles cancel exactly.
    phase = num - np.sum(np.angle(jx - p), axis=-1)
    return float(phase) if np.ndim(f_hz) == 0 else np.asarray(phase, dtype=np.float64)


@overload
def group_delay_s(filt: AnalogFilter, f_hz: float) -> float: ...
@overload
def group_delay_s(filt: AnalogFilter, f_hz: NDArray[np.float64]) -> NDArray[np.float64]: ...
def group_delay_s(filt: AnalogFilter, f_hz: float | NDArray[np.float64]) -> float | NDArray[np.float64]:
    """Group delay -d(phi)/d(w) in seconds.

    From the poles p = s + j w_p: tau(w) = sum -s / ((w - w_p)^2 + s^2), minus the same sum over
    zeros off the imaginary axis (zeros on it add none) [DER from pole positions, as in
    tests/REFERENCES.md R2.5]; DC value for butterworth: 1 / (2 pi fc sin(pi / 2n)) (R2.2).
    """
    z, p, _ = _normalised(filt)
    x = np.asarray(f_hz, dtype=np.float64) / filt.corner_hz
    xv = x[..., None]
    tau = np.sum(-p.real / ((xv - p.imag) ** 2 + p.real**2), axis=-1)
    zo = z[np.abs(z.real) > 0]
    if zo.size:
        tau = tau + np.sum(zo.real / ((xv - zo.imag) ** 2 + zo.real**2), axis=-1)
    tau = tau / filt.corner_rad_s
    return float(tau) if np.ndim(f_hz) == 0 else np.asarray(tau, dtype=np.float64)


def stages(filt: AnalogFilter) -> tuple[Stage, ...]:
    """Second-order (and one first-order) stages of the filter, by ascending Q.

    Each complex pole pair p, p* is a stage with f0 = |p| / 2 pi and Q = |p| / (2 |Re p|); a
    real pole is a first-order stage (Q None) [WT], [ZUM].  Zero pairs on the imaginary axis are
    given to the stages in the same order (lowest notch to lowest-Q stage).
    """
    wc = filt.corner_rad_s
    z, p, _ = _normalised(filt)
    out: list[tuple[float, float | None]] = []
    for pole in p:
        if abs(pole.imag) <= 1e-9 * abs(pole):
            out.append((float(abs(pole)) * wc / (2 * math.pi), None))
        elif pole.imag > 0:
            out.append((float(abs(pole)) * wc / (2 * math.pi), float(abs(pole) / (2.0 * abs(pole.real)))))
    out.sort(key=lambda s: (-1.0 if s[1] is None else s[1], s[0]))
    notches = sorted(float(abs(v.imag)) * wc / (2 * math.pi) for v in z if v.imag > 0)
    result: list[Stage] = []
    pairs = iter(notches)
    for f0, q in out:
        notch = next(pairs, None) if q is not None else None
        result.append(Stage(f0, q, notch))
    return tuple(result)


def _meets(family: str, order: int, corner: float, ripple: float, stop: float,
           f_pass: float, f_stop: float, ap: float, as_: float) -> bool:
    filt = design(family, order, corner, ripple, stop)
    tol = 1e-7
    return bool(attenuation_db(filt, f_pass) <= ap + tol and attenuation_db(filt, f_stop) >= as_ - tol * max(1.0, as_))


@lru_cache(maxsize=16384)
def _solve_normalised_loss(family: str, order: int, ripple: float, stop: float, loss_db: float) -> float | None:
    """:func:`_find_normalised_loss`, solved once per process."""
    return _find_normalised_loss(family, order, ripple, stop, loss_db)


def _find_normalised_loss(family: str, order: int, ripple: float, stop: float, loss_db: float) -> float | None:
    """Normalised frequency x where a monotonic-passband prototype's loss equals ``loss_db``."""
    z, p, k = _prototype(family, order, ripple, stop)

    def g(logx: float) -> float:
        return float(_loss_normalised(z, p, k, np.array([math.exp(logx)]))[0]) - loss_db

    from scipy import optimize

    lo, hi = math.log(1e-12), math.log(1e12)
    if g(lo) > 0 or g(hi) < 0:
        return None
    return math.exp(float(optimize.brentq(g, lo, hi, xtol=1e-13, rtol=1e-13)))


@lru_cache(maxsize=16384)
def _least_order_normalised(family: str, ratio: float, ap: float, as_: float) -> tuple[int, float] | None:
    """:func:`_find_least_order_normalised`, found once per process by (family, ratio, Ap, As)."""
    return _find_least_order_normalised(family, ratio, ap, as_)


def _agm(a: float, b: float) -> float:
    """Arithmetic-geometric mean of a, b > 0 (quadratic convergence) [A&S 17.6]."""
    for _ in range(64):
        if abs(a - b) <= 1e-16 * a:
            break
        a, b = (a + b) / 2.0, math.sqrt(a * b)
    return a


def ellipk(m: float) -> float:
    """Complete elliptic integral of the first kind, parameter m = k^2 in [0, 1]:
    K(m) = pi / (2 AGM(1, sqrt(1 - m))) [A&S 17.6.1]; infinite at m = 1."""
    if not 0.0 <= m <= 1.0:
        raise ValueError(f"elliptic parameter {m} outside [0, 1]")
    return math.inf if m == 1.0 else math.pi / (2.0 * _agm(1.0, math.sqrt(1.0 - m)))


def ellipkm1(p: float) -> float:
    """K(1 - p) = pi / (2 AGM(1, sqrt(p))) [A&S 17.6.1], accurate where 1 - p would round to 1
    (p of 1e-18 is an elliptic mask of 0.001 dB ripple and 140 dB rejection)."""
    if not 0.0 <= p <= 1.0:
        raise ValueError(f"elliptic parameter {p} outside [0, 1]")
    return math.inf if p == 0.0 else math.pi / (2.0 * _agm(1.0, math.sqrt(p)))


def order_estimate(family: str, ratio: float, ap: float, as_: float) -> tuple[float, float]:
    """Real (unrounded) order for a low-pass mask with f_pass = 1, f_stop = ``ratio``, and the
    frequency where a chebyshev2 of the rounded-up order loses ``ap`` (1.0 for the others).

    Closed forms [WT], [ZUM], the ones scipy's ``buttord``/``cheb1ord``/``cheb2ord``/``ellipord``
    evaluate: with ep2 = 10^(Ap/10) - 1, es2 = 10^(As/10) - 1, butterworth
    n = log10(es2/ep2) / (2 log10 r); chebyshev n = acosh(sqrt(es2/ep2)) / acosh(r) (chebyshev2:
    the loss is Ap at cosh(acosh(sqrt(es2/ep2)) / N)); elliptic n = K(m) K(1 - m1) / (K(1 - m) K(m1)),
    m = 1/r^2, m1 = ep2/es2.  Computed here because importing scipy.signal costs about a second,
    which a rebuild that meets one new mask should not pay (the tests hold these to scipy's).
    """
    ln10 = math.log(10.0)
    ep2 = math.expm1(0.1 * ap * ln10)
    es2 = math.expm1(0.1 * as_ * ln10)
    if family == "butterworth":
        return math.log10(es2 / ep2) / (2.0 * math.log10(ratio)), 1.0
    if family in ("chebyshev1", "chebyshev2"):
        v = math.acosh(math.sqrt(es2 / ep2))
        real = v / math.acosh(ratio)
        if family == "chebyshev1":
            return real, 1.0
        return real, math.cosh(v / max(1, math.ceil(real)))
    if family == "elliptic":
        m, m1 = 1.0 / ratio**2, ep2 / es2
        return ellipk(m) * ellipkm1(m1) / (ellipkm1(m) * ellipk(m1)), 1.0
    raise ValueError(f"no closed-form order for {family!r}")


def _find_least_order_normalised(family: str, ratio: float, ap: float, as_: float) -> tuple[int, float] | None:
    """Least order and corner for f_pass = 1, f_stop = ratio; None when above MAX_ORDER."""
    if family == "bessel":
        for n in range(1, MAX_ORDER + 1):
            x = _solve_normalised_loss("bessel", n, IGNORED_RIPPLE_DB, IGNORED_STOPBAND_DB, ap)
            if x is None:
                continue
            corner = 1.0 / x  # passband loss exactly ap at f_pass
            if _meets("bessel", n, corner, IGNORED_RIPPLE_DB, IGNORED_STOPBAND_DB, 1.0, ratio, ap, as_):
                return n, corner
        return None
    try:
        real, wn_f = order_estimate(family, ratio, ap, as_)
    except (ValueError, ArithmeticError):
        return None
    if not (math.isfinite(real) and math.isfinite(wn_f) and wn_f > 0) or real > MAX_ORDER + 1:
        return None
    n_raw = max(1, math.ceil(real))
    ripple = ap if family in ("chebyshev1", "elliptic") else IGNORED_RIPPLE_DB
    stop = as_ if family in ("chebyshev2", "elliptic") else IGNORED_STOPBAND_DB

    def corner_for(n: int) -> float:
        if family == "butterworth":  # passband met exactly: fc = fp / ep2^(1/2n) [WT]
            return float(1.0 / (10.0 ** (ap / 10.0) - 1.0) ** (1.0 / (2 * n)))
        if family == "chebyshev2":  # stopband edge placed so the passband loss is exactly ap
            x = _solve_normalised_loss("chebyshev2", n, ripple, stop, ap)
            return 1.0 / x if x else float(wn_f)
        return 1.0  # chebyshev1, elliptic: corner = ripple edge = f_pass

    # the real order rounded up; one that sits on an integer can come out one too high, and
    # numerics may leave one too low: check against the designed response.
    n = int(n_raw)
    if n > 1 and n - 1 <= MAX_ORDER and _meets(family, n - 1, corner_for(n - 1), ripple, stop, 1.0, ratio, ap, as_):
        n -= 1
    while n <= MAX_ORDER and not _meets(family, n, corner_for(n), ripple, stop, 1.0, ratio, ap, as_):
        n += 1
    if n > MAX_ORDER:
        return None
    return n, corner_for(n)


def least_order(
    family: str, f_pass_hz: float, f_stop_hz: float, pass_loss_db: float, stop_atten_db: float
) -> OrderDesign | None:
    """Least order of ``family``: loss <= ``pass_loss_db`` at ``f_pass_hz``, >= ``stop_atten_db`` at ``f_stop_hz``.

    Starts from the real order of :func:`order_estimate` (the closed forms of scipy's
    ``buttord``/``cheb1ord``/``cheb2ord``/``ellipord``, analog) [WT], [ZUM]: butterworth
    n >= log10(es2/ep2) / (2 log10 r); chebyshev n >= acosh(sqrt(es2/ep2)) / acosh(r); elliptic
    n >= K(m) K(1-m1) / (K(1-m) K(m1)), with r = f_stop/f_pass, ep2 = 10^(Ap/10) - 1,
    es2 = 10^(As/10) - 1, m = 1/r^2, m1 = ep2/es2.
    Bessel has no closed form: each order is tried, its corner set so the passband loss is
    exactly Ap.  The order is then confirmed on the designed response (an exact-integer real
    order is not rounded up).  The corner follows the family's definition: butterworth at
    f_pass / ep2^(1/2n) (passband met exactly), chebyshev1 and elliptic at f_pass, chebyshev2
    at the stopband edge that meets Ap exactly, bessel at its -3 dB point.
    Returns None when more than 20 poles would be needed.  Raises ValueError when the stopband
    does not lie above the passband or a loss is not positive.
    """
    _check_family(family)
    if not (f_pass_hz > 0 and math.isfinite(f_pass_hz) and math.isfinite(f_stop_hz)):
        raise ValueError("pass and stop frequencies must be positive and finite")
    if not f_stop_hz > f_pass_hz:
        raise ValueError(f"stopband {f_stop_hz} Hz must lie above the passband {f_pass_hz} Hz")
    if not (pass_loss_db > 0 and stop_atten_db > pass_loss_db):
        raise ValueError("need 0 < passband loss < stopband attenuation")
    found = _least_order_normalised(family, f_stop_hz / f_pass_hz, float(pass_loss_db), float(stop_atten_db))
    if found is None:
        return None
    n, corner = found
    ripple = float(pass_loss_db) if family in ("chebyshev1", "elliptic") else IGNORED_RIPPLE_DB
    stop = float(stop_atten_db) if family in ("chebyshev2", "elliptic") else IGNORED_STOPBAND_DB
    return OrderDesign(family, n, corner * f_pass_hz, ripple, stop)


# ------------------------------------------------------------------ least loss over fold bands


@dataclass(frozen=True)
class Shape:
    """A prototype's loss curve cut into monotone pieces (corner at x = 1).

    ``x`` holds 0 and every point where the loss turns (the roots of d/dx ln|H(jx)|: passband
    ripple peaks and troughs, stopband ripple troughs) or is infinite (a transmission zero on
    the imaginary axis), ascending; ``loss`` the loss at each; ``limit`` the loss as x grows
    without bound (``MAX_ATTENUATION_DB`` when the filter has more poles than zeros, else
    -20 log10 k, the stopband floor of an even-order chebyshev2 or elliptic).  Between two
    neighbours of ``x``, and from the last one on, the loss is monotonic.
    """

    x: tuple[float, ...]
    loss: tuple[float, ...]
    limit: float


@dataclass(frozen=True)
class LossAt:
    """A filter's loss over a set of frequencies at its least (or largest), and the frequency where
    it lies (``math.inf`` when the least value is the limit approached as f grows without bound)."""

    loss_db: float
    frequency_hz: float


def _slope_over_x(z: NDArray[np.complex128], p: NDArray[np.complex128], x: NDArray[np.float64]) -> NDArray[np.float64]:
    """(d/dx ln|H(jx)|) / x, whose sign is the sign of the slope of the gain for x > 0.

    Each root r = a + jb with b >= 0 stands for itself and its conjugate: from
    |jx - r|^2 = a^2 + (x - b)^2, a conjugate pair contributes 2 x (x^2 + a^2 - b^2) /
    ((a^2 + (x - b)^2)(a^2 + (x + b)^2)) to d/dx ln|jx - r||jx - r*|, a real root x / (a^2 + x^2)
    [DER].  Divided by x, these keep their precision where the slope itself is vanishingly small
    (far below the corner), so rounding cannot fake a turning point; zeros add, poles subtract;
    infinite at a zero on the axis.
    """
    xv = x[:, None]

    def part(roots: NDArray[np.complex128]) -> NDArray[np.float64]:
        up = roots[roots.imag > 1e-12 * np.maximum(np.abs(roots), 1e-300)]
        real = roots[np.abs(roots.imag) <= 1e-12 * np.maximum(np.abs(roots), 1e-300)]
        total = np.zeros(x.shape)
        with np.errstate(all="ignore"):
            if up.size:
                a2, b = up.real**2, up.imag
                total = total + np.sum(2.0 * (xv**2 + a2 - b**2) / ((a2 + (xv - b) ** 2) * (a2 + (xv + b) ** 2)),
                                       axis=-1)
            if real.size:
                total = total + np.sum(1.0 / (real.real**2 + xv**2), axis=-1)
        return np.asarray(total, dtype=np.float64)

    return np.asarray(part(z) - part(p), dtype=np.float64) if z.size else -part(p)


@lru_cache(maxsize=4096)
def prototype_shape(family: str, order: int, ripple_db: float, stopband_db: float) -> Shape:
    """:class:`Shape` of the prototype: the turning points of its loss, found as the sign changes
    of :func:`_slope_over_x` on a grid (300 points a decade over the span of the poles and zeros, and
    97 points across every pole's resonance, Im p +/- 6 |Re p|, where the narrowest ripples lie),
    each refined by bisection; transmission zeros on the axis are turning points as they are.
    """
    z, p, k = _prototype(family, order, ripple_db, stopband_db)
    roots = np.concatenate([z, p])
    mags = np.abs(roots[np.abs(roots) > 0])
    lo, hi = float(mags.min()) * 1e-4, float(mags.max()) * 1e4
    axis_zeros = sorted({float(abs(v.imag)) for v in z if abs(v.real) <= 1e-12 * max(1.0, abs(v)) and v.imag > 0})
    pieces = [np.geomspace(lo, hi, int(300 * math.log10(hi / lo)) + 1)]
    for r in roots:
        if r.imag > 0:
            pieces.append(r.imag + np.linspace(-6.0, 6.0, 97) * max(abs(r.real), 1e-9 * abs(r)))
    for w in axis_zeros:
        pieces.append(np.array([w * (1 - 1e-9), w * (1 + 1e-9)]))
    grid = np.unique(np.concatenate(pieces))
    grid = grid[grid > 0]
    d = _slope_over_x(z, p, grid)
    change = np.nonzero((np.sign(d[:-1]) * np.sign(d[1:]) < 0) & np.isfinite(d[:-1]) & np.isfinite(d[1:]))[0]
    lo_x, hi_x, lo_d = grid[change], grid[change + 1], d[change]
    if axis_zeros:  # a bracket around a zero on the axis changes sign through infinity, not through 0
        around = np.array(axis_zeros)
        keep = ~np.any((lo_x[:, None] <= around) & (around <= hi_x[:, None]), axis=1)
        lo_x, hi_x, lo_d = lo_x[keep], hi_x[keep], lo_d[keep]
    for _ in range(64):  # bisection on every bracket at once, to the last bits of a double
        mid = 0.5 * (lo_x + hi_x)
        d_mid = _slope_over_x(z, p, mid)
        same = np.sign(d_mid) == np.sign(lo_d)
        lo_x, lo_d = np.where(same, mid, lo_x), np.where(same, d_mid, lo_d)
        hi_x = np.where(same, hi_x, mid)
    turns: list[float] = [*axis_zeros, *(float(v) for v in 0.5 * (lo_x + hi_x))]
    # A maximally flat passband has a slope that rounding alone turns about: keep a turning point
    # only where the loss has moved by more than a nanodecibel (merging pieces that differ by
    # less changes no least loss by more than that) [DER].
    kept_x, kept_loss = [0.0], [float(_loss_normalised(z, p, k, np.array([0.0]))[0])]
    for x in sorted(set(turns)):
        loss_x = MAX_ATTENUATION_DB if x in axis_zeros else float(_loss_normalised(z, p, k, np.array([x]))[0])
        if x in axis_zeros or abs(loss_x - kept_loss[-1]) > 1e-9:
            kept_x.append(x)
            kept_loss.append(loss_x)
    xs, loss = np.array(kept_x), np.array(kept_loss)
    limit = MAX_ATTENUATION_DB if len(p) > len(z) else float(min(max(-20.0 * math.log10(k), 0.0), MAX_ATTENUATION_DB))
    return Shape(tuple(float(v) for v in xs), tuple(float(v) for v in loss), limit)


Bands = tuple[float, float, float, int, float]
"""(period T, a, b, m_first, m_last): the intervals [m T + a, m T + b] for m_first <= m <= m_last
(``m_last`` may be ``math.inf``)."""


def least_loss_on_bands(filt: AnalogFilter | None, bands: list[Bands]) -> LossAt:
    """The least loss of ``filt`` over every interval of ``bands`` (in Hz), and where it lies.

    Exact to the precision of the turning points: on each monotone piece of the loss
    (:func:`prototype_shape`) the least value over the intervals meeting it lies at the lowest
    point they cover when the loss rises there, and at the highest when it falls (on the last,
    unbounded piece: the limit as f grows without bound) [DER].  So the answer costs a few
    evaluations per piece however many intervals there are.  Without a filter the loss is 0 dB
    everywhere and the answer is the lowest frequency covered.
    """
    best = LossAt(math.inf, math.nan)
    if filt is None:
        lows = [m0 * t + a for t, a, _, m0, m1 in bands if m0 <= m1]
        return LossAt(0.0, max(min(lows), 0.0)) if lows else best
    shape = prototype_shape(filt.family, filt.order, filt.ripple_db, filt.stopband_db)
    fc = filt.corner_hz
    xs = (*shape.x, math.inf)
    points: list[float] = []  # candidate frequencies, evaluated together below
    for i in range(len(xs) - 1):
        lo, hi = xs[i] * fc, xs[i + 1] * fc
        rising = (shape.loss[i + 1] if i + 1 < len(shape.loss) else shape.limit) >= shape.loss[i]
        for t, a, b, m0, m1 in bands:
            if m0 > m1:
                continue
            if rising:
                m = max(m0, math.ceil((lo - b) / t))
                f = max(lo, m * t + a)
                if m > m1 or f > hi:
                    continue
            else:
                m_top = m1 if math.isinf(hi) else min(m1, math.floor((hi - a) / t))
                if math.isinf(m_top):
                    if shape.limit < best.loss_db:
                        best = LossAt(shape.limit, math.inf)
                    continue
                m = int(m_top)
                f = min(hi, m * t + b)
                if m < m0 or f < lo:
                    continue
            points.append(f)
    if points:
        z, p, k = _normalised(filt)
        losses = _loss_normalised(z, p, k, np.array(points) / fc)
        for f, loss in sorted(zip(points, losses.tolist(), strict=True)):
            if loss < best.loss_db:
                best = LossAt(loss, f)
    return best


def fold_bands(rate_hz: float, half_width_hz: float) -> list[Bands]:
    """Every band that folds onto 0..``half_width_hz`` when sampled at ``rate_hz``: k fs - w .. k fs + w
    for k >= 1 [OS ch. 4]; as :data:`Bands`."""
    return [(rate_hz, -half_width_hz, half_width_hz, 1, math.inf)]


def largest_loss_between(filt: AnalogFilter, f_low_hz: float, f_high_hz: float) -> LossAt:
    """The largest loss of ``filt`` over f_low .. f_high and where it lies (the worst deviation
    from the filter's peak gain inside a band): the ends and every turning point between them
    (:func:`prototype_shape`) [DER]."""
    shape = prototype_shape(filt.family, filt.order, filt.ripple_db, filt.stopband_db)
    z, p, k = _normalised(filt)
    fc = filt.corner_hz
    points = [f_low_hz, f_high_hz, *(x * fc for x in shape.x if f_low_hz < x * fc < f_high_hz)]
    loss = _loss_normalised(z, p, k, np.array(points) / fc)
    i = int(np.argmax(loss))
    return LossAt(float(loss[i]), float(points[i]))


def design_for_flatness(family: str, order: int, f_pass_hz: float, pass_loss_db: float,
                        stop_atten_db: float) -> OrderDesign | None:
    """``family`` at ``order``, cornered so its loss at ``f_pass_hz`` is exactly ``pass_loss_db``
    (the corner :func:`least_order` gives its designs) [WT]: butterworth at f_pass / ep2^(1/2n),
    ep2 = 10^(Ap/10) - 1; chebyshev1 and elliptic at f_pass with a ripple of Ap; bessel and
    chebyshev2 (stopband ``stop_atten_db``) solved on their monotonic passband.  None when the
    passband never reaches that loss."""
    ap = float(pass_loss_db)
    ripple = ap if family in ("chebyshev1", "elliptic") else IGNORED_RIPPLE_DB
    stop = float(stop_atten_db) if family in ("chebyshev2", "elliptic") else IGNORED_STOPBAND_DB
    if family == "elliptic" and not stop > ripple:
        return None
    if family == "butterworth":
        corner = 1.0 / math.expm1(ap / 10.0 * math.log(10.0)) ** (1.0 / (2 * order))
    elif family in ("bessel", "chebyshev2"):
        x = _solve_normalised_loss(family, order, ripple, stop, ap)
        if x is None:
            return None
        corner = 1.0 / x
    else:
        corner = 1.0
    return OrderDesign(family, order, corner * f_pass_hz, ripple, stop)


def frequency_for_attenuation(filt: AnalogFilter, atten_db: float) -> float | None:
    """Lowest frequency from which the filter's loss stays at or above ``atten_db``.

    Found on a logarithmic grid of the normalised response (running minimum from the top down)
    and refined with Brent's method, once per prototype and attenuation (it scales with the
    corner); None when the filter never gets there (a chebyshev2 or elliptic whose stopband
    floor is below ``atten_db``).
    """
    if atten_db <= 0:
        return 0.0
    if filt.family in ("chebyshev2", "elliptic") and atten_db > filt.stopband_db + 1e-9:
        return None
    x = _attenuation_point(filt.family, filt.order, filt.ripple_db, filt.stopband_db, float(atten_db))
    return None if x is None else x * filt.corner_hz


@lru_cache(maxsize=16384)
def _attenuation_point(family: str, order: int, ripple: float, stop: float, atten_db: float) -> float | None:
    """:func:`_find_attenuation_point` once per prototype and attenuation (it scales with the corner)."""
    return _find_attenuation_point(design(family, order, 1.0, ripple, stop), atten_db)


def _find_attenuation_point(filt: AnalogFilter, atten_db: float) -> float | None:
    """:func:`frequency_for_attenuation` for a corner of 1."""
    z, p, k = _normalised(filt)
    x = np.logspace(-3, 8, 2201)
    loss = _loss_normalised(z, p, k, x)
    floor_from_here = np.minimum.accumulate(loss[::-1])[::-1]
    ok = np.nonzero(floor_from_here >= atten_db - 1e-9)[0]
    if ok.size == 0:
        return None
    i = int(ok[0])
    if i == 0:
        return float(x[0])

    def g(v: float) -> float:
        return float(_loss_normalised(z, p, k, np.array([v]))[0]) - atten_db

    from scipy import optimize

    lo, hi = float(x[i - 1]), float(x[i])
    return float(optimize.brentq(g, lo, hi, xtol=1e-14, rtol=1e-12)) if g(lo) < 0 < g(hi) else hi


def corner_for_droop(filt: AnalogFilter, f_hz: float, loss_db: float) -> float | None:
    """Corner at which the same family and order loses exactly ``loss_db`` at ``f_hz``.

    For monotonic passbands (butterworth, bessel, chebyshev2) the normalised loss curve is
    solved for x and the corner is f / x; for chebyshev1 and elliptic the passband ripple edge
    is the corner, so the answer is ``f_hz`` when the ripple itself is within ``loss_db`` and
    None otherwise (then the ripple must be reduced).
    """
    if filt.family in ("chebyshev1", "elliptic"):
        return f_hz if filt.ripple_db <= loss_db + 1e-12 else None
    x = _solve_normalised_loss(filt.family, filt.order, filt.ripple_db, filt.stopband_db, loss_db)
    return f_hz / x if x else None


def stop_edge_for_order(
    family: str, f_pass_hz: float, order: int, pass_loss_db: float, stop_atten_db: float
) -> float | None:
    """Lowest stopband edge at which ``order`` poles of ``family`` meet the mask (bisection on :func:`least_order`).

    The least order falls as the stopband edge rises, so the edge where it first drops to
    ``order`` is found by bisection on log(f_stop / f_pass) between 1 and 1e9; None if even
    that wide a transition needs more poles.
    """
    def fits(log_r: float) -> bool:
        d = least_order(family, f_pass_hz, f_pass_hz * math.exp(log_r), pass_loss_db, stop_atten_db)
        return d is not None and d.order <= order

    lo, hi = 1e-9, math.log(1e9)
    if not fits(hi):
        return None
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if fits(mid):
            hi = mid
        else:
            lo = mid
    return f_pass_hz * math.exp(hi)
