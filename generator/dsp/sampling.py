"""Sampling: Nyquist frequency, oversampling ratio, folding of out-of-band frequencies.

References
----------
[SH]  C. E. Shannon, "Communication in the presence of noise", Proc. IRE 37 (1949);
      H. Nyquist, "Certain topics in telegraph transmission theory", AIEE Trans. 47 (1928).
[OS]  A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*, ch. 4.
[MT-002] W. Kester, "What the Nyquist criterion means to your sampled data system design",
      Analog Devices tutorial MT-002.
"""

from __future__ import annotations

import math


def nyquist_frequency(rate_hz: float) -> float:
    """Highest frequency a rate can represent unambiguously: f_N = fs / 2 [SH], [OS]."""
    return rate_hz / 2.0


def oversampling_ratio(rate_hz: float, f_high_hz: float) -> float:
    """How far the rate exceeds the Nyquist rate of the band: OSR = fs / (2 f_high) [MT-002]."""
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
    return math.floor(2.0 * f_hz / rate_hz) + 1


def is_inverted(f_hz: float, rate_hz: float) -> bool:
    """Content from even Nyquist zones arrives spectrally inverted [MT-002]."""
    return nyquist_zone(f_hz, rate_hz) % 2 == 0
