"""Sampling: Nyquist frequency, oversampling ratio, folding of out-of-band frequencies.

References
----------
[SH]  C. E. Shannon, "Communication in the presence of noise", Proc. IRE 37 (1949);
      H. Nyquist, "Certain topics in telegraph transmission theory", AIEE Trans. 47 (1928).
[OS]  A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*, ch. 4.
[MT-002] W. Kester, "What the Nyquist criterion means to your sampled data system design",
      Analog Devices tutorial MT-002.
[MT-001] W. Kester, "Taking the mystery out of the infamous formula, SNR = 6.02N + 1.76 dB",
      Analog Devices tutorial MT-001.
[AES17] AES17 / IEC 61606: dBFS referenced to a full-scale sine.
[DER] derived here from the definitions above.
"""

from __future__ import annotations

import math


def nyquist_frequency(rate_hz: float) -> float:
    """Highest frequency a rate can represent unambiguously: f_N = fs / 2 [SH], [OS]."""
    return rate_hz / 2.0


def rate_over_nyquist(rate_hz: float, f_high_hz: float) -> float:
    """How far the rate exceeds the Nyquist rate of the band: fs / (2 f_high) [MT-002] (not a
    delta-sigma converter's oversampling ratio f_mod / fs)."""
    return rate_hz / (2.0 * f_high_hz)


def first_alias(rate_hz: float, f_high_hz: float) -> float:
    """Lowest input frequency that folds onto the top of the band: fs - f_high [MT-002]."""
    return rate_hz - f_high_hz


def alias_frequency(f_hz: float, rate_hz: float) -> float:
    """Where a tone at ``f_hz`` appears after sampling at ``rate_hz``.

    f_a = |f - fs * round(f / fs)|, 0 <= f_a <= fs / 2 [OS] (sec. 4.2), [MT-002].
    Computed with ``math.remainder`` so that frequencies many zones up keep full precision.
    """
    return abs(math.remainder(f_hz, rate_hz))


def nyquist_zone(f_hz: float, rate_hz: float) -> int:
    """Nyquist zone of ``f_hz``: z = floor(2 f / fs) + 1; zone 1 is 0..fs/2 [MT-002]."""
    half_periods = 2.0 * (f_hz / rate_hz)
    # zones past 2^62 are all alike to a reader; the cap keeps floor() finite
    return math.floor(min(half_periods, 2.0**62)) + 1


def is_inverted(f_hz: float, rate_hz: float) -> bool:
    """Content from even Nyquist zones arrives spectrally inverted [MT-002]."""
    return nyquist_zone(f_hz, rate_hz) % 2 == 0


def level_dbfs(amplitude_volts: float, full_scale_amplitude_volts: float) -> float:
    """Sine-referenced dBFS of a sine of amplitude ``amplitude_volts`` at the converter.

    dBFS = 20 log10(A / A_FS), A_FS the amplitude of the largest sine the range holds (half its
    width: 10 V on ±10 V, 2.5 V on 0..5 V): 0 dBFS is a full-scale sine [AES17].  Zero amplitude
    is reported as -400 dBFS rather than minus infinity.
    """
    if amplitude_volts <= 0 or full_scale_amplitude_volts <= 0:
        return -400.0
    return max(20.0 * math.log10(amplitude_volts / full_scale_amplitude_volts), -400.0)


def digital_filter_region(f_hz: float, period_hz: float, passband_hz: float, stopband_hz: float) -> str:
    """Where ``f_hz`` falls with respect to a digital filter that repeats every ``period_hz``.

    The decimation filter of a delta-sigma converter runs at the modulator rate, so its
    response repeats around every multiple of it [MT-002 sec. on oversampling], [DER].  With
    d = |f - period * round(f / period)|: "pass" when d <= passband, "stop" when
    d >= stopband, else "transition".  ``period_hz`` = inf means no repetition.
    """
    d = abs(f_hz) if math.isinf(period_hz) else abs(math.remainder(f_hz, period_hz))
    if d <= passband_hz:
        return "pass"
    if d >= stopband_hz:
        return "stop"
    return "transition"


def modulator_fold(f_hz: float, modulator_rate_hz: float) -> float:
    """Where the modulator's own sampling puts ``f_hz``: |f - f_mod round(f / f_mod)| [OS], [DER]."""
    if math.isinf(modulator_rate_hz):
        return abs(f_hz)
    return abs(math.remainder(f_hz, modulator_rate_hz))
