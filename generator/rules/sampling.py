"""Rules about sampling and the anti-aliasing filter."""

from __future__ import annotations

from collections.abc import Iterator

from ..analysis import ChannelResult, SystemAnalysis
from ..quantities import format_quantity
from . import Hit, channel_rule


@channel_rule(
    "below-nyquist",
    "error",
    "Sample rate below twice the band",
    """A band reaching f_high can only be captured when fs >= 2 f_high (Nyquist 1928,
    Shannon 1949). Below that, the top of the band folds onto itself and no filter can
    separate it. Raise the rate, or narrow the band.""",
    kinds=("input", "output"),
)
def below_nyquist(result: ChannelResult, analysis: SystemAnalysis) -> Iterator[Hit]:
    s = result.sampling
    if s is None or s.rate_hz >= 2 * s.band_high_hz:
        return
    yield Hit(
        f"rate {format_quantity(s.rate_hz, 'Hz')} cannot carry a band up to "
        f"{format_quantity(s.band_high_hz, 'Hz')}: the Nyquist rate 2 x f_high is "
        f"{format_quantity(2 * s.band_high_hz, 'Hz')}; raise the rate to at least that (more, to leave the "
        f"filter room) or lower the band top to {format_quantity(s.nyquist_hz, 'Hz')}",
        "conversion.rate",
    )
