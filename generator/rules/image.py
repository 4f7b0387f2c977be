"""Rules about image channels: spatial sampling and pixel shape."""

from __future__ import annotations

from collections.abc import Iterator

from ..analysis import ChannelResult
from ..analysis.image import SQUARE_TOLERANCE, magnification_for_detail, pitch_for_detail
from ..model import System
from ..quantities import format_percent, format_quantity
from . import Hit, beyond, channel_rule


@channel_rule(
    "spatial-nyquist",
    "error",
    "Required detail finer than the pixel pitch can sample",
    """A sensor samples the image at its pixel pitch p, so it represents spatial frequencies up to
    f_N = 1/(2 p) (the sampling theorem in space). Required `detail` above f_N cannot be captured:
    it aliases as moire onto coarser, false patterns. Fix: a finer pitch (p <= 1/(2 detail)), or
    optical magnification of at least detail / f_N.""",
    kinds=("image",),
)
def spatial_nyquist(result: ChannelResult, system: System) -> Iterator[Hit]:
    im = result.image
    detail = result.channel.signal.detail_cycles_per_m
    if im is None or detail is None or not beyond(detail, im.spatial_nyquist_cycles_per_m):
        return
    pitch_max = pitch_for_detail(detail)
    yield Hit(
        f"required detail {format_quantity(detail, 'cycles/m')} is above the spatial Nyquist frequency "
        f"{format_quantity(im.spatial_nyquist_cycles_per_m, 'cycles/m')} of the "
        f"{format_quantity(im.pixel_pitch_m, 'm')} pitch and will alias as moire: use a pitch of at most "
        f"{format_quantity(pitch_max, 'm')}, or optics magnifying at least "
        f"{magnification_for_detail(im, detail):.3g}x onto the sensor",
        "signal.detail",
    )


@channel_rule(
    "non-square-pixels",
    "warning",
    "Spec assumes square pixels but the pitches differ",
    """With `square_pixels = true` the analysis downstream takes one scale for both axes. The pitches
    are active width / pixels across and active height / pixels down (a line sensor's height is its
    pixel height); when they differ by more than 0.5 % of the larger, distances and shapes come out
    stretched. Fix: correct `pixels` or `active_area`, or drop the assumption and scale each axis.""",
    kinds=("image",),
)
def non_square_pixels(result: ChannelResult, system: System) -> Iterator[Hit]:
    im = result.image
    if im is None or not result.channel.signal.square_pixels or im.square_pixels:
        return
    px, py = im.pixel_pitch_x_m, im.pixel_pitch_y_m
    diff = abs(px - py) / max(px, py)
    yield Hit(
        f"square pixels are assumed but the pitch is {format_quantity(px, 'm')} across and "
        f"{format_quantity(py, 'm')} down ({format_percent(diff)} apart, more than "
        f"{format_percent(SQUARE_TOLERANCE)}): correct pixels or active_area, or scale each axis on its own",
        "signal.square_pixels",
    )
