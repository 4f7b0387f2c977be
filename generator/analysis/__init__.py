"""Model -> per-channel figures and system budgets.

Each concern lives in its own module and returns a frozen result with a
``figures()`` method giving JSON-ready numbers keyed by name-with-SI-unit:

- :mod:`.sampling`  rates, folding and the anti-aliasing filter (input channels)
- :mod:`.amplitude` range usage, LSB, quantization, jitter and sensor noise, the noise budget
- :mod:`.output`    hold droop, images and drive level (output channels)
- :mod:`.image`     pixel pitch, spatial Nyquist and frame size (image channels)
- :mod:`.budgets`   data rates per channel; converter, clock, link, store and group budgets

Every figure is declared once, on the result field that carries it, with
:func:`figure_field`: its key, label, display unit, formula and source; the
README table, the JSON contract and the channel pages all read that registry.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

from ..model import Channel, Spec, System
from .amplitude import AmplitudeResult, analyze_amplitude
from .budgets import Budgets, ChannelBudget, analyze_budgets
from .figures import FIGURES, FigureInfo, FigureValue, figure_field
from .image import ImageResult, analyze_image
from .output import OutputResult, analyze_output
from .sampling import SamplingResult, analyze_sampling

__all__ = [
    "FIGURES",
    "Budgets",
    "ChannelResult",
    "FigureInfo",
    "FigureValue",
    "SystemAnalysis",
    "analyze",
    "analyze_channel",
    "figure_field",
]


_PARTS = ("sampling", "amplitude", "output", "image")


@dataclass(frozen=True)
class ChannelResult:
    """Everything computed for one channel.

    Its parts are computed when first asked for: a build that takes an unchanged channel's figures
    and findings from its cache never computes them, unless a page showing them is drawn again.
    """

    channel: Channel
    system: System
    budget: ChannelBudget | None = None

    @classmethod
    def of(cls, channel: Channel, system: System, budget: ChannelBudget | None = None,
           **parts: object) -> ChannelResult:
        """A result whose named parts (``sampling=...``) are given rather than computed."""
        result = cls(channel, system, budget)
        for name, value in parts.items():
            if name not in _PARTS:
                raise TypeError(f"ChannelResult has no part {name!r}")
            result.__dict__[name] = value  # what cached_property would have stored
        return result

    @cached_property
    def sampling(self) -> SamplingResult | None:
        return analyze_sampling(self.channel, self.system)

    @cached_property
    def amplitude(self) -> AmplitudeResult | None:
        return analyze_amplitude(self.channel, self.system)

    @cached_property
    def output(self) -> OutputResult | None:
        return analyze_output(self.channel, self.system)

    @cached_property
    def image(self) -> ImageResult | None:
        return analyze_image(self.channel, self.system)

    @property
    def figures(self) -> dict[str, FigureValue]:
        out: dict[str, FigureValue] = {}
        for part in (self.sampling, self.amplitude, self.output, self.image, self.budget):
            if part is not None:
                out.update(part.figures())
        return out


@dataclass(frozen=True)
class SystemAnalysis:
    """The whole spec, analysed."""

    spec: Spec
    channels: tuple[ChannelResult, ...]
    budgets: Budgets = field(default_factory=lambda: Budgets({}, (), (), (), (), ()))

    def result(self, channel_id: str) -> ChannelResult:
        return self.by_id[channel_id]  # KeyError for an unknown id

    @cached_property
    def by_id(self) -> Mapping[str, ChannelResult]:
        return {r.channel.id: r for r in self.channels}

    def totals(self) -> dict[str, Any]:
        kinds = {"input": 0, "output": 0, "image": 0}
        for r in self.channels:
            kinds[r.channel.kind] += 1
        b = self.budgets
        return {
            "channels": len(self.channels),
            "channels_by_kind": kinds,
            "data_rate_bps": sum(x.data_rate_bps for x in b.channels.values()),
            "payload_rate_bps": sum(x.payload_rate_bps for x in b.channels.values()),
            "converter_load": {c.id: c.load for c in b.converters},
            "link_utilisation": {lk.id: lk.utilisation for lk in b.links},
            "store_utilisation": {s.id: s.utilisation for s in b.stores},
        }


def analyze_channel(channel: Channel, spec: Spec, budgets: Budgets | None = None) -> ChannelResult:
    """Every figure that follows from one channel's requirement (computed as they are asked for)."""
    return ChannelResult(channel, spec.system, budgets.channels.get(channel.id) if budgets is not None else None)


def analyze(spec: Spec) -> SystemAnalysis:
    """Analyse every channel of a spec, then the budgets of what they share.

    Each channel's own figures are computed when first asked for (:class:`ChannelResult`); the
    budgets, which span channels, at once."""
    budgets = analyze_budgets(spec)
    return SystemAnalysis(spec, tuple(analyze_channel(ch, spec, budgets) for ch in spec.channels), budgets)
