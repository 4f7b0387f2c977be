"""Sampling numerics: folding, zones, SQNR, dBFS and the delta-sigma decimation model.

Source keys as in tests/REFERENCES.md: [OS] Oppenheim & Schafer ch. 4; [MT-001],
[MT-002] Analog Devices tutorials; [NP] a numpy simulation here; [WT] Williams & Taylor;
[AES17] dBFS; [DER] derived; [MEM] typical delta-sigma filter edges, from memory.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from generator.dsp import filters as flt
from generator.dsp import quantization
from generator.dsp import sampling as dsp

# f, fs, zone, inverted, f_a  -- tests/REFERENCES.md R1.2 [OS], [MT-002]
FOLDS = [
    (7e3, 10e3, 2, True, 3e3),
    (9.9e3, 10e3, 2, True, 100.0),
    (25e3, 44.1e3, 2, True, 19.1e3),
    (48.5e3, 44.1e3, 3, False, 4.4e3),
    (50.0, 48.0, 3, False, 2.0),
    (1.2e6, 1e6, 3, False, 200e3),
    (144.123e3, 48e3, 7, False, 123.0),
    (60.0, 1e3, 1, False, 60.0),
    (15e3, 10e3, 4, True, 5e3),
    (100e3, 51.2e3, 4, True, 2.4e3),
]


@pytest.mark.parametrize(("f", "fs", "zone", "inverted", "fa"), FOLDS)
def test_fold_table(f: float, fs: float, zone: int, inverted: bool, fa: float) -> None:
    assert_allclose(dsp.alias_frequency(f, fs), fa, rtol=1e-9, atol=1e-9)
    assert dsp.nyquist_zone(f, fs) == zone
    assert dsp.is_inverted(f, fs) is inverted


@pytest.mark.parametrize(("f", "fs", "zone", "inverted", "fa"), FOLDS)
def test_fold_by_fft_of_sampled_tone(f: float, fs: float, zone: int, inverted: bool, fa: float) -> None:
    # [NP]: cos(2 pi f t) sampled at fs, Hann window, 2^18 points; the peak is within one bin of f_a
    n = 2**18
    t = np.arange(n) / fs
    x = np.cos(2 * np.pi * f * t) * np.hanning(n)
    spectrum = np.abs(np.fft.rfft(x))
    peak_hz = np.argmax(spectrum) * fs / n
    assert abs(peak_hz - dsp.alias_frequency(f, fs)) <= fs / n


def test_fold_keeps_precision_many_zones_up() -> None:
    # 10 GHz + 1 Hz at 1 kHz lands at 1 Hz [OS], many zones up
    assert_allclose(dsp.alias_frequency(1e10 + 1.0, 1e3), 1.0, rtol=1e-6)


def test_nyquist_and_first_alias() -> None:
    # tests/REFERENCES.md R2.1 [MT-002]: fs - f_max = 28 kHz and 31.2 kHz; R1.1 [SH]: f_N = fs / 2
    assert dsp.first_alias(48e3, 20e3) == 28e3
    assert_allclose(dsp.first_alias(51.2e3, 20e3), 31.2e3)
    assert dsp.nyquist_frequency(48e3) == 24e3


@pytest.mark.parametrize(("bits", "sqnr"), [(8, 49.9257), (12, 74.0081), (16, 98.0905), (24, 146.255)])
def test_sqnr_exact_constants(bits: int, sqnr: float) -> None:
    # tests/REFERENCES.md R5.2 [MT-001]: 20 log10(2^N sqrt(1.5))
    assert_allclose(quantization.sqnr_db(bits), sqnr, rtol=1e-5)


def test_level_dbfs_is_sine_referenced() -> None:
    # [AES17]: a sine whose peak is the full-scale peak is 0 dBFS; half of it is -6.0206 dBFS
    assert dsp.level_dbfs(10.0, 10.0) == 0.0
    assert_allclose(dsp.level_dbfs(5.0, 10.0), -20 * math.log10(2), rtol=1e-12)
    assert dsp.level_dbfs(0.0, 10.0) == -400.0


# ---------------------------------------------------------------------------------------------
# Delta-sigma, tests/REFERENCES.md R3 [DER], [MEM], [WT]
# ---------------------------------------------------------------------------------------------

def test_delta_sigma_rates_and_digital_edges() -> None:
    fs, osr, f_high = 48e3, 128, 20e3
    f_mod = osr * fs
    assert_allclose(f_mod, 6.144e6)  # modulator rate [DER]
    assert_allclose(f_mod - f_high, 6.124e6)  # first analog alias onto the band top [DER]
    passband, stopband = 0.4535 * fs, 0.5465 * fs  # edges [MEM]
    assert_allclose(passband, 21.768e3)
    assert_allclose(stopband, 26.232e3)
    # 20 kHz sits in the passband, 22 kHz does not
    assert dsp.digital_filter_region(20e3, f_mod, passband, stopband) == "pass"
    assert dsp.digital_filter_region(22e3, f_mod, passband, stopband) == "transition"
    # near fs the decimation filter rejects; near f_mod its response repeats and passes again
    assert dsp.digital_filter_region(fs - f_high, f_mod, passband, stopband) == "stop"
    assert dsp.digital_filter_region(f_mod - f_high, f_mod, passband, stopband) == "pass"
    assert_allclose(dsp.modulator_fold(f_mod - f_high, f_mod), f_high)


@pytest.mark.parametrize(("order", "corner", "atten"), [(1, 100e3, 35.742), (2, 100e3, 71.481), (1, 50e3, 41.762)])
def test_delta_sigma_analog_filter_at_modulator_alias(order: int, corner: float, atten: float) -> None:
    # tests/REFERENCES.md R3 [WT]: RC and 2nd-order butterworth at 6.124 MHz
    filt = flt.design("butterworth", order, corner)
    assert_allclose(flt.attenuation_db(filt, 6.124e6), atten, rtol=1e-4)
