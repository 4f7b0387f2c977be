"""Quantization, aperture jitter and noise budgets: LSB, SQNR, processing gain, ENOB, dB helpers.

Conventions
-----------
* LSB (ideal code width) q = FSR / 2^N [1241], [MT-001].  Some data sheets divide by 2^N - 1
  instead (:func:`lsb_end_point`); the two differ by one part in 2^N and must not be mixed.
* SNR figures are ratios of rms values expressed in dB.  A sine of peak A has rms A / sqrt(2);
  "full-scale sine" means a sine whose peak-to-peak spans the full-scale range.
* The exact constants are used: 20 log10(2) = 6.0206 dB per bit and 10 log10(1.5) = 1.7609 dB,
  which handbooks round to 6.02 and 1.76.

References
----------
[MT-001] W. Kester, "Taking the mystery out of the infamous formula, SNR = 6.02N + 1.76 dB, and
      why you should care", Analog Devices tutorial MT-001.
[MT-003] W. Kester, "Understand SINAD, ENOB, SNR, THD, THD + N, and SFDR so you don't get lost in
      the noise floor", Analog Devices tutorial MT-003.
[MT-007] W. Kester, "Aperture time, aperture jitter, aperture delay time: removing the confusion",
      Analog Devices tutorial MT-007.
[AN-756] B. Brannon, "Sampled systems and the effects of clock phase noise and jitter",
      Analog Devices application note AN-756.
[1241] IEEE Std 1241-2010, terminology and test methods for analog-to-digital converters.
[JN]  J. B. Johnson, Phys. Rev. 32, 97 (1928); H. Nyquist, Phys. Rev. 32, 110 (1928).
[SI]  SI Brochure, 9th edition: Boltzmann constant k = 1.380649e-23 J/K, exact.
[RAZ] B. Razavi, *Design of Analog CMOS Integrated Circuits*, kT/C noise.
[AES17] AES17 / IEC 61606: dBFS, 0 dBFS being the rms of a full-scale sine.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

DB_PER_BIT = 20.0 * math.log10(2.0)
"""20 log10(2) = 6.0206 dB: the SQNR gained by each extra bit [MT-001]."""

SINE_LOADING_DB = 10.0 * math.log10(1.5)
"""10 log10(1.5) = 1.7609 dB: full-scale sine power (FSR²/8) over q²/12 per 2^(2N), [MT-001]."""

BOLTZMANN = 1.380649e-23
"""Boltzmann constant in J/K, exact since the 2019 SI [SI]."""


# ------------------------------------------------------------------------------------ dB helpers


def amplitude_db(ratio: float) -> float:
    """A ratio of amplitudes (rms or peak voltages) in dB: 20 log10(ratio)."""
    return 20.0 * math.log10(ratio)


def power_db(ratio: float) -> float:
    """A ratio of powers in dB: 10 log10(ratio)."""
    return 10.0 * math.log10(ratio)


def amplitude_ratio(db: float) -> float:
    """The amplitude ratio of a dB value: 10^(dB / 20)."""
    return math.pow(10.0, db / 20.0)


def sine_rms(peak: float) -> float:
    """Rms of a sine of the given peak: A / sqrt(2)."""
    return peak / math.sqrt(2.0)


def snr_db(signal_rms: float, noise_rms: float) -> float:
    """Signal-to-noise ratio of two rms amplitudes: 20 log10(signal / noise)."""
    return amplitude_db(signal_rms / noise_rms)


def dbv(volts_rms: float) -> float:
    """Level re 1 V rms: 20 log10(V / 1 V)."""
    return amplitude_db(volts_rms)


def dbfs(volts_rms: float, full_scale_range: float) -> float:
    """Sine-referenced dBFS [AES17]: 20 log10(V_rms / V_rms of a full-scale sine).

    The full-scale sine spans the range: its rms is FSR / (2 sqrt(2)).
    """
    return amplitude_db(volts_rms / sine_rms(full_scale_range / 2.0))


def rss(values: Iterable[float]) -> float:
    """Root of the sum of squares: the rms of uncorrelated contributions, sqrt(sum v_i²) [MT-003]."""
    return math.sqrt(math.fsum(v * v for v in values))


# ------------------------------------------------------------------------------ quantization


def lsb(full_scale_range: float, bits: int) -> float:
    """Ideal code width q = FSR / 2^N, in the unit of ``full_scale_range`` [1241], [MT-001].

    ``full_scale_range`` is the width of the range (20 V for ±10 V); ``bits`` >= 1.
    """
    return full_scale_range / 2.0**bits


def lsb_end_point(full_scale_range: float, bits: int) -> float:
    """The other convention some data sheets use: FSR / (2^N - 1) (end-point code width)."""
    return full_scale_range / (2.0**bits - 1.0)


def quantization_noise_rms(q: float) -> float:
    """Rms quantization error of a busy signal, uniform over one LSB: q / sqrt(12) [MT-001].

    The error power q²/12 spreads evenly over 0..fs/2 (Bennett's model).
    """
    return q / math.sqrt(12.0)


def sqnr_db(bits: int) -> float:
    """Quantization SNR of a full-scale sine over 0..fs/2 [MT-001].

    SQNR = 20 log10(2^N sqrt(1.5)) = N x 20 log10(2) + 10 log10(1.5) = 6.0206 N + 1.7609 dB,
    the exact form of the handbook's 6.02 N + 1.76 dB.
    """
    return bits * DB_PER_BIT + SINE_LOADING_DB


def quantization_noise_density(q: float, rate_hz: float) -> float:
    """One-sided quantization noise density, V/√Hz: e_n = (q / sqrt(12)) / sqrt(fs / 2) [MT-001]."""
    return quantization_noise_rms(q) / math.sqrt(rate_hz / 2.0)


def processing_gain_db(rate_hz: float, bandwidth_hz: float) -> float:
    """SNR gained by filtering white noise from 0..fs/2 down to a band B: 10 log10(fs / (2 B)) [MT-001].

    Meaningful only when the data are actually filtered to B and B < fs / 2.
    """
    return power_db(rate_hz / (2.0 * bandwidth_hz))


def enob(sinad_db: float) -> float:
    """Effective number of bits: ENOB = (SINAD - 1.7609) / 6.0206 [MT-003], exact constants.

    [1241] defines ENOB = log2(FSR / (NAD sqrt(12))), the same value for a full-scale sine.
    """
    return (sinad_db - SINE_LOADING_DB) / DB_PER_BIT


def bits_for_lsb(full_scale_range: float, wanted_lsb: float) -> int:
    """Fewest bits whose LSB = FSR / 2^N is no coarser than ``wanted_lsb``: ceil(log2(FSR / q))."""
    # as a difference of logs: the ratio itself can overflow for a tiny wanted LSB
    return max(1, math.ceil(math.log2(full_scale_range) - math.log2(wanted_lsb) - 1e-12))


# -------------------------------------------------------------------------------------- jitter


def jitter_snr_db(frequency_hz: float, jitter_s: float) -> float:
    """SNR of a full-scale sine at f limited by rms sampling jitter t_j [MT-007], [AN-756].

    SNR_j = -20 log10(2 pi f t_j).  The jitter error is proportional to the signal's slew,
    so the ratio holds at any amplitude of the sine.
    """
    return -amplitude_db(2.0 * math.pi * frequency_hz * jitter_s)


def jitter_noise_rms(signal_rms: float, frequency_hz: float, jitter_s: float) -> float:
    """Rms error a sine of rms ``signal_rms`` at f picks up from jitter t_j: 2 pi f t_j V_rms [AN-756]."""
    return signal_rms * 2.0 * math.pi * frequency_hz * jitter_s


def max_jitter(snr_target_db: float, frequency_hz: float) -> float:
    """Largest rms jitter that still meets an SNR at f: t_j = 10^(-SNR/20) / (2 pi f), from [MT-007]."""
    return amplitude_ratio(-snr_target_db) / (2.0 * math.pi * frequency_hz)


# ------------------------------------------------------------------------------ noise budgets


def power_sum_snr_db(snrs_db: Iterable[float]) -> float:
    """SNR of uncorrelated contributions together: -10 log10(sum 10^(-SNR_i / 10)) [MT-003], [AN-756].

    Each SNR_i must be relative to the same signal.  An empty list gives +inf.
    """
    # Summed relative to the largest term, so contributions far beyond a float's range (an SNR of
    # -1e4 dB from an absurd jitter) neither overflow nor vanish.
    exps = [-s / 10.0 for s in snrs_db]
    if not exps:
        return math.inf
    top = max(exps)
    if math.isinf(top):
        return -top * 10.0
    total = math.fsum(math.pow(10.0, e - top) for e in exps)
    return -10.0 * (top + math.log10(total))


def noise_from_density(density: float, bandwidth_hz: float) -> float:
    """Rms of white noise of one-sided density e_n over a bandwidth B: e_n sqrt(B)."""
    return density * math.sqrt(bandwidth_hz)


def thermal_noise_rms(resistance_ohm: float, bandwidth_hz: float, temperature_k: float) -> float:
    """Johnson noise of a resistor: v = sqrt(4 k T R B) [JN], k exact [SI]."""
    return math.sqrt(4.0 * BOLTZMANN * temperature_k * resistance_ohm * bandwidth_hz)


def ktc_noise_rms(capacitance_f: float, temperature_k: float) -> float:
    """Noise sampled onto a capacitor: v = sqrt(k T / C) [RAZ]."""
    return math.sqrt(BOLTZMANN * temperature_k / capacitance_f)
