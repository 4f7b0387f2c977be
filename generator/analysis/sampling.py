"""Sampling figures of input channels: rate, Nyquist, oversampling, first alias."""

from __future__ import annotations

from dataclasses import dataclass

from ..dsp import sampling as dsp
from ..model import Channel, System
from .figures import FigureValue, figure

SAMPLE_RATE = figure("sample_rate_hz", "Sample rate", "Hz", "fs", "as specified or inherited from the converter")
NYQUIST = figure("nyquist_hz", "Nyquist frequency", "Hz", "f_N = fs / 2", "Shannon 1949; Nyquist 1928")
BAND_LOW = figure("band_low_hz", "Band, low edge", "Hz", "as specified", "requirement")
BAND_HIGH = figure("band_high_hz", "Band, high edge", "Hz", "f_high, as specified", "requirement")
OSR = figure("oversampling_ratio", "Oversampling ratio", "", "OSR = fs / (2 f_high)", "ADI MT-002")
FIRST_ALIAS = figure("first_alias_hz", "First alias onto the band top", "Hz", "fs - f_high", "ADI MT-002")


@dataclass(frozen=True)
class SamplingResult:
    rate_hz: float
    band_low_hz: float
    band_high_hz: float
    nyquist_hz: float
    oversampling_ratio: float
    first_alias_hz: float

    def figures(self) -> dict[str, FigureValue]:
        return {
            SAMPLE_RATE: self.rate_hz,
            NYQUIST: self.nyquist_hz,
            BAND_LOW: self.band_low_hz,
            BAND_HIGH: self.band_high_hz,
            OSR: self.oversampling_ratio,
            FIRST_ALIAS: self.first_alias_hz,
        }


def analyze_sampling(channel: Channel, system: System) -> SamplingResult | None:
    """Sampling figures for an input or output channel with a band and a rate."""
    band = channel.signal.band
    rate = channel.conversion.rate
    if channel.kind == "image" or band is None or rate is None:
        return None
    low, high = band
    return SamplingResult(
        rate_hz=rate,
        band_low_hz=low,
        band_high_hz=high,
        nyquist_hz=dsp.nyquist_frequency(rate),
        oversampling_ratio=dsp.oversampling_ratio(rate, high),
        first_alias_hz=dsp.first_alias(rate, high),
    )
