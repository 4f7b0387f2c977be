"""Quantization, jitter and noise-budget numerics against published values and a numpy simulation.

Expected values come from tests/REFERENCES.md (R5 quantization, R6 jitter and noise sums, R9
thermal noise and dB levels); the source key of each table is named beside its check: [MT-001],
[MT-003], [MT-007], [AN-756] are Analog Devices tutorials / app notes, [1241] IEEE Std 1241-2010,
[JN] Johnson and Nyquist 1928, [RAZ] Razavi (kT/C), [AES17] dBFS, [DER] derived algebra, [NP] numpy
computation.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from generator.dsp import quantization as q

RTOL = 1e-4  # the tables are printed to about five significant digits


# --------------------------------------------------------------------------- section 3: LSB

# FSR, N, q, q/sqrt(12), FSR/(2^N - 1)   [1241], [MT-001]; the last column is the other convention [CP]
LSB_TABLE = [
    (20.0, 16, 305.176e-6, 88.0967e-6, 305.1804e-6),
    (5.0, 12, 1220.7e-6, 352.387e-6, 1221.001e-6),
    (10.0, 14, 610.352e-6, 176.193e-6, 610.3888e-6),
    (2.5, 24, 0.149012e-6, 0.0430159e-6, 0.1490116e-6),
]


@pytest.mark.parametrize(("fsr", "bits", "lsb", "noise", "end_point"), LSB_TABLE)
def test_lsb_and_quantization_noise(fsr: float, bits: int, lsb: float, noise: float, end_point: float) -> None:
    # tests/REFERENCES.md R5.1 [1241], [MT-001]: LSB, q / sqrt(12) and the 2^N - 1 convention
    assert_allclose(q.lsb(fsr, bits), lsb, rtol=RTOL)
    assert_allclose(q.quantization_noise_rms(q.lsb(fsr, bits)), noise, rtol=RTOL)
    assert_allclose(q.lsb_end_point(fsr, bits), end_point, rtol=1e-6)


def test_noise_is_0_288675_lsb() -> None:
    # [MT-001]: q / sqrt(12) = 0.288675 LSB rms
    assert_allclose(q.quantization_noise_rms(1.0), 0.288675, rtol=1e-6)


# -------------------------------------------------------------------------- section 3: SQNR

# N, 6.02N + 1.76, exact 20 log10(2^N sqrt(1.5)), difference   [MT-001]
SQNR_TABLE = [
    (8, 49.92, 49.9257, 0.00571),
    (12, 74.0, 74.0081, 0.00811),
    (14, 86.04, 86.0493, 0.00931),
    (16, 98.08, 98.0905, 0.0105),
    (18, 110.12, 110.132, 0.0117),
    (20, 122.16, 122.173, 0.0129),
    (24, 146.24, 146.255, 0.0153),
]


@pytest.mark.parametrize(("bits", "rounded", "exact", "diff"), SQNR_TABLE)
def test_sqnr_uses_exact_constants(bits: int, rounded: float, exact: float, diff: float) -> None:
    # tests/REFERENCES.md R5.2 [MT-001]: SQNR with exact constants against the rounded 6.02N + 1.76
    assert_allclose(q.sqnr_db(bits), exact, rtol=RTOL)
    # the exact form sits above the rounded handbook value by the tabulated difference
    assert_allclose(q.sqnr_db(bits) - rounded, diff, atol=2e-4)


def test_exact_constants() -> None:
    # tests/REFERENCES.md R5.2 [MT-001]: 20 log10 2 = 6.0206 dB/bit, 10 log10 1.5 = 1.760913 dB
    assert_allclose(q.DB_PER_BIT, 6.0206, rtol=1e-5)
    assert_allclose(q.SINE_LOADING_DB, 1.760913, rtol=1e-6)


# -------------------------------------------------------------------------- section 3: ENOB

# SINAD, ENOB with exact constants   [MT-003]
ENOB_TABLE = [(70.0, 11.334), (74.0, 11.999), (92.0, 14.988), (98.0, 15.985)]


@pytest.mark.parametrize(("sinad", "bits"), ENOB_TABLE)
def test_enob(sinad: float, bits: float) -> None:
    # tests/REFERENCES.md R5.3 [MT-003]: ENOB with the exact constants
    assert_allclose(q.enob(sinad), bits, atol=6e-4)


def test_enob_below_full_scale() -> None:
    # tests/REFERENCES.md R5.3 [MT-003]: 68 dB at -1 dBFS -> SINAD referred to full scale 69 dB -> 11.168
    assert_allclose(q.enob(68.0 + 1.0), 11.168, atol=6e-4)


def test_enob_inverts_sqnr() -> None:
    # [MT-003] ENOB of an ideal N-bit converter's full-scale SQNR is N (definition, both constants exact)
    for bits in (8, 12, 16, 24):
        assert_allclose(q.enob(q.sqnr_db(bits)), bits, rtol=1e-12)


# ----------------------------------------------------------------- section 3: processing gain

# fs, BW, PG dB, PG bits   [MT-001]
PG_TABLE = [
    (1e6, 10e3, 16.99, 2.822),
    (48e3, 20e3, 0.79181, 0.1315),
    (6.144e6, 20e3, 21.864, 3.632),
    (51.2e3, 20e3, 1.0721, 0.1781),
]


@pytest.mark.parametrize(("rate", "bw", "gain_db", "gain_bits"), PG_TABLE)
def test_processing_gain(rate: float, bw: float, gain_db: float, gain_bits: float) -> None:
    # tests/REFERENCES.md R5.4 [MT-001]: processing gain in dB and in bits
    assert_allclose(q.processing_gain_db(rate, bw), gain_db, rtol=2e-4)
    assert_allclose(q.processing_gain_db(rate, bw) / q.DB_PER_BIT, gain_bits, rtol=5e-4)


def test_noise_density_example() -> None:
    # tests/REFERENCES.md R5.5 [MT-001], [DER]: FSR 20 V, N = 16, fs = 100 kS/s -> 393.98 nV/rtHz = -145.08 dBFS/Hz
    density = q.quantization_noise_density(q.lsb(20.0, 16), 100e3)
    assert_allclose(density, 393.98e-9, rtol=RTOL)
    assert_allclose(q.dbfs(density, 20.0), -145.08, atol=0.005)
    # the same number as -SQNR - 10 log10(fs/2) [DER]
    assert_allclose(q.dbfs(density, 20.0), -q.sqnr_db(16) - q.power_db(100e3 / 2), rtol=1e-9)


# ----------------------------------------------------------------------- section 4: jitter

# f, t_j rms, SNR_j   [MT-007], [MT-008], [AN-756]
JITTER_TABLE = [
    (1e6, 1e-12, 104.036),
    (20e3, 1e-9, 78.0158),
    (10e6, 10e-12, 64.0364),
    (100e6, 100e-15, 84.0364),
    (20e3, 100e-12, 98.0158),
]


@pytest.mark.parametrize(("f", "tj", "snr"), JITTER_TABLE)
def test_jitter_snr(f: float, tj: float, snr: float) -> None:
    # tests/REFERENCES.md R6.1 [MT-007], [AN-756]: SNR limited by aperture jitter
    assert_allclose(q.jitter_snr_db(f, tj), snr, rtol=RTOL)


def test_max_jitter_for_16_bits() -> None:
    # tests/REFERENCES.md R6.2 [DER] from [MT-007]: SNR 98.0905 dB at 20 kHz -> 99.144 ps
    assert_allclose(q.max_jitter(98.0905, 20e3), 99.144e-12, rtol=RTOL)
    assert_allclose(q.jitter_snr_db(20e3, q.max_jitter(98.0905, 20e3)), 98.0905, rtol=1e-12)


def test_jitter_noise_matches_snr() -> None:
    # [AN-756]: the error rms of a sine is 2 pi f t_j times its rms, so the ratio is SNR_j
    noise = q.jitter_noise_rms(q.sine_rms(10.0), 20e3, 1e-9)
    assert_allclose(q.snr_db(q.sine_rms(10.0), noise), 78.0158, rtol=RTOL)


# -------------------------------------------------------------------- section 4: power sums

# components dB, SNR_tot   [MT-003], [AN-756]
POWER_SUM_TABLE = [
    ((98.091, 78.016, 100.0), 77.9462),
    ((74.0, 74.0), 70.9897),
    ((98.091, 104.04), 97.1064),
    ((74.008, 64.036), 63.6199),
]


@pytest.mark.parametrize(("parts", "total"), POWER_SUM_TABLE)
def test_power_sum(parts: tuple[float, ...], total: float) -> None:
    # tests/REFERENCES.md R6.3 [MT-003], [AN-756]: power sum of independent noise
    assert_allclose(q.power_sum_snr_db(parts), total, rtol=RTOL)


def test_power_sum_equals_rss_of_volts() -> None:
    # [MT-003]: v = sqrt(sum v_i^2) is the same statement in volts
    signal = 1.0
    volts = [signal / q.amplitude_ratio(s) for s in (98.091, 78.016, 100.0)]
    assert_allclose(q.snr_db(signal, q.rss(volts)), 77.9462, rtol=RTOL)
    assert q.power_sum_snr_db([]) == math.inf


# --------------------------------------------------------------- section 7: thermal noise, dB

# R, B, T, v rms, dBV   [JN], [SI]
THERMAL_TABLE = [
    (1000.0, 20e3, 300.0, 575.64e-9, -124.8),
    (1000.0, 1.0, 300.0, 4.0704e-9, -167.81),
    (50.0, 1.0, 290.0, 0.89486e-9, -180.96),
    (10000.0, 20e3, 300.0, 1.8203e-6, -114.8),
]


@pytest.mark.parametrize(("r", "b", "t", "v", "level"), THERMAL_TABLE)
def test_thermal_noise(r: float, b: float, t: float, v: float, level: float) -> None:
    # tests/REFERENCES.md R9.1 [JN], [SI]: Johnson noise and its level in dBV
    assert_allclose(q.thermal_noise_rms(r, b, t), v, rtol=RTOL)
    assert_allclose(q.dbv(q.thermal_noise_rms(r, b, t)), level, atol=0.01)


def test_thermal_density_times_root_bandwidth() -> None:
    # tests/REFERENCES.md R9.1 [JN], [DER]: 4.0704 nV/rtHz over 20 kHz is the 575.64 nV of the first row
    assert_allclose(q.noise_from_density(4.0704e-9, 20e3), 575.64e-9, rtol=RTOL)


@pytest.mark.parametrize(("c", "v"), [(1e-12, 64.358e-6), (10e-12, 20.352e-6), (100e-12, 6.4358e-6)])
def test_ktc_noise(c: float, v: float) -> None:
    # tests/REFERENCES.md R9.2 [RAZ]: kT/C at 300 K
    assert_allclose(q.ktc_noise_rms(c, 300.0), v, rtol=RTOL)


def test_full_scale_sine_levels() -> None:
    # tests/REFERENCES.md R9.3 [AES17], [DER]: 0 dBFS of a ±10 V ADC is 7.0711 V rms = 16.99 dBV
    rms = q.sine_rms(10.0)
    assert_allclose(rms, 7.0711, rtol=RTOL)
    assert_allclose(q.dbv(rms), 16.99, atol=0.005)
    assert_allclose(q.dbfs(rms, 20.0), 0.0, atol=1e-12)
    # a full-scale square wave (rms = peak) reads +3.01 dBFS [AES17]
    assert_allclose(q.dbfs(10.0, 20.0), 3.0103, atol=1e-4)


def test_bits_for_lsb() -> None:
    # [1241]: q = FSR / 2^N, so 305.2 µV on 20 V needs 16 bits and anything finer needs 17 [DER]
    assert q.bits_for_lsb(20.0, 20.0 / 2**16) == 16
    assert q.bits_for_lsb(20.0, 305.0e-6) == 17
    assert q.bits_for_lsb(20.0, 305.2e-6) == 16


# ------------------------------------------------------------------------ numpy simulation


def _quantize_sine_snr(bits: int) -> float:
    """Measured SNR of a full-scale sine through an ideal mid-rise quantizer.

    As in tests/REFERENCES.md R5.6 [NP]: code = floor(x / q) clipped to [-2^(N-1), 2^(N-1) - 1],
    output (code + 0.5) q; coherent sampling, 65536 points, 1031 cycles (prime), phase 0.1 rad;
    SNR = 10 log10(P_x / P_err) in the time domain.
    """
    n_points, cycles, fsr = 65536, 1031, 2.0
    step = q.lsb(fsr, bits)
    t = np.arange(n_points)
    x = (fsr / 2) * np.sin(2 * np.pi * cycles * t / n_points + 0.1)
    code = np.clip(np.floor(x / step), -(2 ** (bits - 1)), 2 ** (bits - 1) - 1)
    err = (code + 0.5) * step - x
    return float(10 * np.log10(np.mean(x**2) / np.mean(err**2)))


@pytest.mark.parametrize("bits", [8, 12, 16, 20])
def test_simulated_sqnr_matches_formula(bits: int) -> None:
    # numpy simulation [NP] against SQNR = 6.0206 N + 1.7609 dB [MT-001]; tolerance 0.25 dB for N >= 8
    # (tests/REFERENCES.md R5.6: the largest deviation for these N is 0.139 dB)
    measured = _quantize_sine_snr(bits)
    assert abs(measured - q.sqnr_db(bits)) < 0.25, (bits, measured)


@pytest.mark.parametrize(("bits", "table"), [(8, 49.787), (12, 73.972), (16, 98.059), (20, 122.17)])
def test_simulation_reproduces_published_run(bits: int, table: float) -> None:
    # tests/REFERENCES.md R5.6 [NP], time-domain SNR: same quantizer, same record
    assert abs(_quantize_sine_snr(bits) - table) < 0.006


def test_simulated_sinad_and_enob_by_fft() -> None:
    # numpy simulation [NP]: FFT SINAD (bin 1031 against all bins but DC) for N = 12 is 73.974 dB in
    # tests/REFERENCES.md R5.6, ENOB 12 by R5.3 [MT-003]
    n_points, cycles, bits = 65536, 1031, 12
    step = q.lsb(2.0, bits)
    t = np.arange(n_points)
    x = np.sin(2 * np.pi * cycles * t / n_points + 0.1)
    y = (np.clip(np.floor(x / step), -(2 ** (bits - 1)), 2 ** (bits - 1) - 1) + 0.5) * step
    power = np.abs(np.fft.rfft(y)) ** 2
    sinad = 10 * np.log10(power[cycles] / (power[1:].sum() - power[cycles]))
    assert abs(sinad - 73.974) < 0.01
    assert abs(q.enob(float(sinad)) - 12.0) < 0.02


def test_power_sum_survives_contributions_beyond_float_range() -> None:
    # -10 log10(10^(1e4/10) + 10^(-9.8)) = -1e4 dB to double precision (algebra: the larger term dominates)
    assert q.power_sum_snr_db([-1e4, 98.0]) == pytest.approx(-1e4, rel=1e-12)
    # and the ordinary case still matches tests/REFERENCES.md R6.3 [MT-003]: 74 + 74 -> 70.9897 dB
    assert q.power_sum_snr_db([74.0, 74.0]) == pytest.approx(70.9897, rel=1e-5)
