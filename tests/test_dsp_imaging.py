"""Image-sensor geometry and frame size, checked against the worked example in tests/REFERENCES.md R8."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose

from generator.dsp import imaging as im

W, H, N = 2048, 1536, 12
WIDTH, HEIGHT = 7.0656e-3, 5.2992e-3


def test_pixel_pitch_and_spatial_nyquist() -> None:
    # source: tests/REFERENCES.md R8.4, image-sensor example (3.45 µm pitch [MEM], arithmetic [DER])
    assert_allclose(im.pixel_pitch(WIDTH, W), 3.45e-6, rtol=1e-9)
    assert_allclose(im.pixel_pitch(HEIGHT, H), 3.45e-6, rtol=1e-9)
    assert_allclose(im.spatial_nyquist(3.45e-6) / 1e3, 144.928, rtol=1e-5)  # cycles/mm


def test_frame_bits_bytes_and_stream() -> None:
    # source: tests/REFERENCES.md R8.4 [DER]: 37,748,736 bit = 4,718,592 B packed; 6,291,456 B in
    # 16-bit containers; 1.13246 Gbit/s at 30 fps (exact integers where the table says so)
    packed = im.frame_bits(W, H, N)
    assert packed == 37_748_736
    assert packed // 8 == 4_718_592
    assert im.frame_bits(W, H, 16) // 8 == 6_291_456
    assert_allclose(im.stream_rate(packed, 30.0), 1.13246e9, rtol=1e-5)


def test_box_aperture_at_nyquist() -> None:
    # source: tests/REFERENCES.md R8.5 [HOL], [DER]: |sinc(f p)| = 0.63662 at 1/(2p)
    p = 3.45e-6
    assert_allclose(im.box_aperture_mtf(im.spatial_nyquist(p), p), 0.63662, rtol=1e-5)


def test_box_aperture_matches_numpy_transform() -> None:
    # numpy simulation [NP]: the Fourier magnitude of a sampled box of width p, normalised to DC,
    # at spatial frequency f, is |sinc(f p)| (textbook transform pair)
    p = 1.0
    x = np.linspace(-p / 2, p / 2, 20001)
    for f in (0.1, 0.5, 0.8):
        response = abs(np.trapezoid(np.exp(-2j * np.pi * f * x), x)) / p
        assert_allclose(im.box_aperture_mtf(f, p), response, rtol=1e-6)
