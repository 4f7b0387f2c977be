"""Zero-order-hold droop, images and their level, checked against published values and a simulation."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from generator.dsp import quantization
from generator.dsp import reconstruction as rec

# tests/REFERENCES.md R7.1 [MT-017], [OS], [NP]: hold droop |sinc(f/fs)| and 20 log10 of it.
DROOP_TABLE = [
    # (f, fs, gain, droop dB)
    (0.5, 1.0, 0.63662, -3.9224),  # fs/2
    (20e3, 44.1e3, 0.694402, -3.1678),  # CD-standard rate [IEC60908]
    (20e3, 48e3, 0.737913, -2.6399),
    (0.1, 1.0, 0.983632, -0.14335),
    (0.25, 1.0, 0.900316, -0.9121),
    (0.4, 1.0, 0.756827, -2.4201),
    (20e3, 352.8e3, 0.994722, -0.045965),  # 8x 44.1 kHz
]


@pytest.mark.parametrize(("f", "fs", "gain", "droop"), DROOP_TABLE)
def test_hold_droop_table(f: float, fs: float, gain: float, droop: float) -> None:
    # source: tests/REFERENCES.md R7.1 [MT-017], [OS], rel. tol. 1e-4
    assert_allclose(rec.hold_gain(f, fs), gain, rtol=1e-4)
    assert_allclose(rec.hold_droop_db(f, fs), droop, rtol=1e-4)


def test_hold_gain_at_nyquist_is_two_over_pi() -> None:
    # textbook: sin(pi/2)/(pi/2) = 2/pi (Oppenheim & Schafer ch. 4)
    assert_allclose(rec.hold_gain(24e3, 48e3), 2 / np.pi, rtol=1e-12)


# tests/REFERENCES.md R7.2 [MT-017], [DER]: images k fs +/- f for k = 1, 2 (kHz),
# first image relative to the tone after the hold, and the filter needed for the 16-bit floor.
IMAGE_TABLE = [
    (20e3, 44.1e3, [24.1, 64.1, 68.2, 108.2], -1.6197, 96.471),
    (20e3, 48e3, [28, 68, 76, 116], -2.9226, 95.168),
    (1e3, 48e3, [47, 49, 95, 97], -33.442, 64.649),
    (20e3, 192e3, [172, 212, 364, 404], -18.69, 79.401),
]


@pytest.mark.parametrize(("f", "fs", "images_khz", "level", "needed"), IMAGE_TABLE)
def test_images_and_their_level(f: float, fs: float, images_khz: list[float], level: float, needed: float) -> None:
    # source: tests/REFERENCES.md R7.2 [MT-017], [DER], rel. tol. 1e-4
    assert_allclose(np.array(rec.image_frequencies(f, fs)) / 1e3, images_khz, rtol=1e-9)
    assert rec.first_image(f, fs) == pytest.approx(images_khz[0] * 1e3)
    assert_allclose(rec.image_level_after_hold_db(f, fs), level, rtol=1e-4)
    assert_allclose(rec.hold_image_attenuation_db(f, fs), -level, rtol=1e-4)
    assert_allclose(rec.filter_needed_at_image_db(quantization.sqnr_db(16), f, fs), needed, rtol=1e-4)


def test_image_level_equals_ratio_of_two_sincs() -> None:
    # textbook identity sin(pi(1 - x)) = sin(pi x): |sinc(1 - x)| / |sinc(x)| = x / (1 - x)
    for x in (0.05, 0.2, 0.3125, 0.45):
        ratio = abs(np.sinc(1 - x)) / abs(np.sinc(x))
        assert_allclose(rec.image_level_after_hold_db(x, 1.0), 20 * np.log10(ratio), rtol=1e-9)


def test_dac_floor_is_exact_sqnr() -> None:
    # source: tests/REFERENCES.md R5.2 [MT-001], exact 20 log10(2^N sqrt(1.5))
    assert_allclose(quantization.sqnr_db(16), 98.0905, rtol=1e-5)
    assert_allclose(quantization.sqnr_db(12), 74.0081, rtol=1e-5)


@pytest.mark.parametrize(("cycles", "samples"), [(13, 64), (5, 64), (29, 64)])
def test_hold_droop_matches_numpy_simulation(cycles: int, samples: int) -> None:
    # numpy simulation [NP]: sample a unit sine coherently, hold each sample for 1/fs by repeating it
    # M times on a fine grid, and read the tone and its first image off an FFT of the held waveform.
    m = 256
    n = np.arange(samples)
    held = np.repeat(np.sin(2 * np.pi * cycles * n / samples + 0.3), m)
    spectrum = np.abs(np.fft.rfft(held)) * 2 / held.size
    x = cycles / samples
    assert_allclose(spectrum[cycles], rec.hold_gain(x, 1.0), rtol=1e-4)
    image = spectrum[samples - cycles]
    assert_allclose(20 * np.log10(image / spectrum[cycles]), rec.image_level_after_hold_db(x, 1.0), atol=1e-3)


def test_compensated_droop_is_zero_for_ideal_correction() -> None:
    # definition: an ideal inverse-sinc pre-emphasis cancels the hold's loss in band (ADI MT-017)
    assert rec.compensated_droop_db(20e3, 48e3) == 0.0


def test_max_hold_fraction_inverts_the_droop_table() -> None:
    # source: tests/REFERENCES.md R7.1 [MT-017], [DER]: 0.25 fs loses 0.9121 dB, 0.1 fs 0.14335 dB
    assert_allclose(rec.max_hold_fraction(0.9121), 0.25, rtol=1e-4)
    assert_allclose(rec.max_hold_fraction(0.14335), 0.1, rtol=1e-4)
    assert_allclose(rec.min_rate_for_droop(20e3, 2.6399), 48e3, rtol=1e-4)
    assert rec.max_hold_fraction(5.0) == 0.5  # more than the 3.9224 dB lost at fs/2
