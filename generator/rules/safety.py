"""Safety cautions: channels at hazardous voltage or driving powered actuators.

These are notes (severity info), never failures: specfold checks numbers, and the people who
install and work on the system follow their site's rules.  The limits below are the usual
extra-low-voltage limits for dry, touchable circuits (common practice: 30 V rms, 42.4 V peak,
60 V DC); a rms working voltage is compared with 30 V, any peak with 42.4 V (stricter than the
60 V DC limit, so a DC signal is covered too).
"""

from __future__ import annotations

from collections.abc import Iterator

from ..analysis import ChannelResult
from ..model import System
from ..quantities import format_quantity
from . import Hit, beyond, channel_rule

ELV_RMS_V = 30.0  # common practice
ELV_PEAK_V = 42.4  # common practice (30 V rms x sqrt 2)


def _reasons(result: ChannelResult) -> tuple[list[str], str]:
    """Why the channel needs a caution, and the first key to point at."""
    ch = result.channel
    reasons: list[str] = []
    paths: list[str] = []
    wv = ch.safety.working_voltage
    if wv is not None and beyond(wv, ELV_RMS_V):
        reasons.append(f"working voltage {format_quantity(wv, 'V')} rms (above {format_quantity(ELV_RMS_V, 'V')} rms)")
        paths.append("safety.working_voltage")
    peak = ch.signal.peak
    if ch.kind == "input" and ch.unit.dim == "V" and peak is not None and beyond(peak, ELV_PEAK_V):
        reasons.append(f"measured voltage up to {format_quantity(peak, 'V')} peak "
                       f"(above {format_quantity(ELV_PEAK_V, 'V')} peak)")
        paths.append("signal.peak")
    if ch.kind == "output":
        fs = ch.conversion.full_scale
        drive = None if fs is None else fs.peak * ch.conversion.gain
        if drive is not None and beyond(drive, ELV_PEAK_V):
            reasons.append(f"drive up to {format_quantity(drive, 'V')} peak "
                           f"(above {format_quantity(ELV_PEAK_V, 'V')} peak)")
            paths.append("conversion.gain" if "conversion.gain" in ch.lines else "conversion")
        if ch.safety.powered_actuator:
            reasons.append("it commands a powered actuator")
            paths.append("safety.powered_actuator")
    return reasons, (paths[0] if paths else "")


@channel_rule(
    "caution",
    "info",
    "Hazardous voltage or powered actuator",
    """A note, not a failure: shown where a channel's quantity is a voltage above the usual
    extra-low-voltage limits (common practice: 30 V rms, 42.4 V peak, 60 V DC) -- a `working_voltage`
    above 30 V rms, an input in volts whose `peak` exceeds 42.4 V, or an output whose drive (full-scale
    peak x gain) exceeds 42.4 V -- or where an output commands a powered actuator (`powered_actuator`).
    The measurement or drive needs equipment rated for it, isolation and interlocks; local codes and
    licensed practice govern.""",
    kinds=("input", "output", "image"),
)
def caution(result: ChannelResult, system: System) -> Iterator[Hit]:
    reasons, path = _reasons(result)
    if not reasons:
        return
    ch = result.channel
    what = "drive" if ch.kind == "output" else "measurement"
    reasons[0] = reasons[0][:1].upper() + reasons[0][1:]
    message = (f"{'; '.join(reasons)}. The {what} needs equipment rated for it, isolation and "
               "interlocks, and work on it needs the site's safe-work procedures; local codes and licensed "
               "practice govern, not this tool")
    if ch.safety.note:
        message += f". Site note: {ch.safety.note}"
    yield Hit(message, path)
