"""Image sensors: pixel pitch, spatial Nyquist frequency, pixel aperture response, frame size.

A sensor samples the image in space the way a converter samples a signal in time: the pixel
pitch p is the sampling interval, so detail finer than 1/(2p) cycles per metre aliases (as
moire).  A pixel that collects light over its whole pitch (100 % fill) is a box aperture whose
response is |sinc(f p)|.

References
----------
[HOL] G. C. Holst, *CCD Arrays, Cameras and Displays* (pixel pitch, spatial Nyquist frequency,
      detector aperture MTF) [from memory].
[SH]  C. E. Shannon, Proc. IRE 37 (1949): the sampling theorem, here applied in space.
"""

from __future__ import annotations

import numpy as np


def pixel_pitch(extent_m: float, pixels: int) -> float:
    """Centre-to-centre pixel spacing along one axis: p = active extent / pixel count [HOL].

    7.0656 mm over 2048 pixels -> 3.45 µm.
    """
    return extent_m / pixels


def spatial_nyquist(pitch_m: float) -> float:
    """Highest spatial frequency a pitch can represent: f_N = 1/(2 p) cycles per metre [SH], [HOL].

    3.45 µm -> 144.928 cycles/mm.
    """
    return 1.0 / (2.0 * pitch_m)


def box_aperture_mtf(f_cycles_per_m: float, aperture_m: float) -> float:
    """Response of a uniform (box) pixel aperture of width a at spatial frequency f: |sinc(f a)| [HOL].

    ``numpy.sinc(x)`` is sin(pi x)/(pi x).  For a full-fill pixel (a = p) at the spatial
    Nyquist frequency 1/(2p) this is sinc(1/2) = 2/pi = 0.63662.
    """
    return float(abs(np.sinc(f_cycles_per_m * aperture_m)))


def frame_bits(width_px: int, height_px: int, bits: int) -> int:
    """Bits in one frame (or line) packed without padding: W x H x N (exact)."""
    return width_px * height_px * bits


def stream_rate(bits_per_frame: float, frame_rate_hz: float) -> float:
    """Data rate of a stream of frames: bits per frame x frame (or line) rate, in bit/s.

    2048 x 1536 x 12 bit at 30 fps -> 1.13246 Gbit/s.
    """
    return bits_per_frame * frame_rate_hz
