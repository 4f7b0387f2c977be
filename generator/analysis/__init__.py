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
from dataclasses import dataclass, field, replace
from typing import Any

from ..model import Channel, Spec
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


@dataclass(frozen=True)
class ChannelResult:
    """Everything computed for one channel."""

    channel: Channel
    sampling: SamplingResult | None = None
    amplitude: AmplitudeResult | None = None
    output: OutputResult | None = None
    image: ImageResult | None = None
    budget: ChannelBudget | None = None

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
        for r in self.channels:
            if r.channel.id == channel_id:
                return r
        raise KeyError(channel_id)

    @property
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
    """Compute every figure that follows from one channel's requirement."""
    budget = budgets.channels.get(channel.id) if budgets is not None else None
    return ChannelResult(
        channel=channel,
        sampling=analyze_sampling(channel, spec.system),
        amplitude=analyze_amplitude(channel, spec.system),
        output=analyze_output(channel, spec.system),
        image=analyze_image(channel, spec.system),
        budget=budget,
    )


def analyze(spec: Spec, known: Mapping[str, ChannelResult] | None = None) -> SystemAnalysis:
    """Analyse every channel of a spec, then the budgets of what they share.

    ``known`` maps channel ids to results computed earlier (the build cache); one is reused only
    for the very channel object it was computed from, under the same system (the caller's key
    guarantees that), and gets this run's budget, since budgets span channels."""
    budgets = analyze_budgets(spec)
    results = []
    for ch in spec.channels:
        old = known.get(ch.id) if known is not None else None
        if old is not None and old.channel is ch:
            results.append(replace(old, budget=budgets.channels.get(ch.id)))
        else:
            results.append(analyze_channel(ch, spec, budgets))
    return SystemAnalysis(spec, tuple(results), budgets)
