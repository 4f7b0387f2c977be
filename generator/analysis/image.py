"""Image channels (area and line sensors): pitch, spatial Nyquist, aperture response, frame size.

A line sensor (one row of pixels) samples space only along its line; across it, the image is
sampled by the motion of the scene at the line rate.  Its "vertical pitch" is therefore the
pixel height (the active area's height) and its spatial Nyquist frequency is that along the line.
"""

from __future__ import annotations

import math

from ..dsp import imaging as dsp
from ..model import Channel, System
from .figures import Figures, figure_field, result_class

# Pitches closer than this (relative) count as square: data-sheet areas are often rounded.
SQUARE_TOLERANCE = 0.005

@result_class
class ImageResult(Figures):
    """Pitch, spatial Nyquist, aperture response and frame size of an image channel; every figure is
    always there (null when it does not apply)."""

    frame_rate_hz: float | None = figure_field("frame_rate_hz", "Frame (or line) rate", "Hz", "as specified",
                                               "requirement")
    pixel_pitch_m: float = figure_field(
        "pixel_pitch_m", "Pixel pitch (the coarser axis; along the line for a line sensor)", "m",
        "max(width / pixels across, height / pixels down)", "Holst, CCD Arrays (from memory)")
    pixel_pitch_x_m: float = figure_field("pixel_pitch_x_m", "Pixel pitch across", "m",
                                          "active width / pixels across", "Holst, CCD Arrays (from memory)")
    pixel_pitch_y_m: float = figure_field("pixel_pitch_y_m", "Pixel pitch down (pixel height for a line sensor)",
                                          "m", "active height / pixels down", "Holst, CCD Arrays (from memory)")
    spatial_nyquist_cycles_per_m: float = figure_field(
        "spatial_nyquist_cycles_per_m", "Spatial Nyquist frequency", "cycles/m", "1 / (2 p), p = pixel_pitch",
        "Shannon 1949, in space; Holst (from memory)")
    spatial_nyquist_x_cycles_per_m: float = figure_field(
        "spatial_nyquist_x_cycles_per_m", "Spatial Nyquist frequency across", "cycles/m", "1 / (2 p_x)",
        "Shannon 1949, in space")
    spatial_nyquist_y_cycles_per_m: float | None = figure_field(  # None for a line sensor
        "spatial_nyquist_y_cycles_per_m", "Spatial Nyquist frequency down (area sensors)", "cycles/m",
        "1 / (2 p_y)", "Shannon 1949, in space")
    square_pixels: bool = figure_field("square_pixels", "Pixels are square", "",
                                       "|p_x - p_y| <= 0.5 % of the larger", "definition")
    pixel_aperture_mtf_at_nyquist: float = figure_field(
        "pixel_aperture_mtf_at_nyquist", "Full-fill pixel aperture response at spatial Nyquist", "",
        "|sinc(f_N p)| = 2/pi", "box aperture; Holst (from memory)")
    pixel_aperture_mtf_at_detail: float | None = figure_field(
        "pixel_aperture_mtf_at_detail", "Full-fill pixel aperture response at the required detail", "",
        "|sinc(detail p)|", "box aperture; Holst (from memory)")
    frame_bits: int | None = figure_field("frame_bits", "Bits per frame (or line), packed", "bit", "W x H x N",
                                          "arithmetic")
    frame_bits_stored: int | None = figure_field(
        "frame_bits_stored", "Bits per frame (or line) in storage containers", "bit", "W x H x container_bits",
        "arithmetic")


def analyze_image(channel: Channel, system: System) -> ImageResult | None:
    """Pitch, spatial Nyquist, aperture response and frame size of an image channel."""
    pixels, area = channel.sensor.pixels, channel.sensor.active_area_m
    if channel.kind != "image" or pixels is None or area is None or min(pixels) < 1 or min(area) <= 0.0:
        return None
    w, h = pixels
    line = h == 1
    px = dsp.pixel_pitch(area[0], w)
    py = dsp.pixel_pitch(area[1], h)  # for a line sensor: the pixel height
    nyq_x = dsp.spatial_nyquist(px)
    nyq_y = None if line else dsp.spatial_nyquist(py)
    pitch = px if line else max(px, py)
    nyquist = dsp.spatial_nyquist(pitch)
    detail = channel.signal.detail_cycles_per_m
    conv = channel.conversion
    bits = None if conv.bits is None else dsp.frame_bits(w, h, conv.bits)
    stored = None if conv.container_bits is None else dsp.frame_bits(w, h, conv.container_bits)
    rate = conv.rate
    return ImageResult(
        frame_rate_hz=rate,
        pixel_pitch_m=pitch,
        pixel_pitch_x_m=px,
        pixel_pitch_y_m=py,
        spatial_nyquist_cycles_per_m=nyquist,
        spatial_nyquist_x_cycles_per_m=nyq_x,
        spatial_nyquist_y_cycles_per_m=nyq_y,
        square_pixels=math.isclose(px, py, rel_tol=SQUARE_TOLERANCE),
        # full fill: the aperture is the pitch along the axis that sets the Nyquist frequency
        pixel_aperture_mtf_at_nyquist=dsp.box_aperture_mtf(nyquist, pitch),
        pixel_aperture_mtf_at_detail=None if detail is None else dsp.box_aperture_mtf(detail, pitch),
        frame_bits=bits,
        frame_bits_stored=stored,
    )


# ------------------------------------------------------------------ what would fix it (rule messages)


def pitch_for_detail(detail_cycles_per_m: float) -> float:
    """Coarsest pixel pitch whose spatial Nyquist frequency 1 / (2 p) reaches the detail:
    p = 1 / (2 detail) (the sampling theorem in space; Holst, from memory)."""
    return 1.0 / (2.0 * detail_cycles_per_m)


def magnification_for_detail(im: ImageResult, detail_cycles_per_m: float) -> float:
    """Optical magnification that brings the detail down to the sensor's spatial Nyquist frequency:
    detail / f_N."""
    return detail_cycles_per_m / im.spatial_nyquist_cycles_per_m
