"""Loading, analysing and checking a spec tree through the channel store: what ``specfold check``
runs, and the first half of :func:`generator.build.site.build`.  Imports nothing of the site
(templates, Markdown, charts), so ``check`` starts quickly."""

from __future__ import annotations

import gc
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from ..analysis import SystemAnalysis, analyze
from ..load import load_spec
from ..report import figures_text
from ..rules import Finding, channel_rule_table, run_rules
from ..source import digest
from .store import TEMPLATES, ChannelStore, cache_folder, tool_key


@dataclass(frozen=True)
class Checked:
    """A spec tree loaded, analysed and checked, with what the channel store kept for it."""

    analysis: SystemAnalysis
    findings: list[Finding]
    per_channel: dict[str, tuple[Finding, ...]]  # channel-rule findings before waivers, by channel id
    figures: dict[str, str]  # figures as JSON text, by channel id: kept ones (others are added as written)
    sheets: dict[str, str]  # digests of the channel pages' own views the store kept, by channel id

    @property
    def inputs(self) -> str:
        """Digest of every input file's key (:func:`inputs_key`)."""
        return inputs_key(self.analysis.spec.keys)


def inputs_key(keys: Mapping[str, str]) -> str:
    """One digest of every input file's key (:attr:`generator.model.Spec.keys`)."""
    return digest(*(f"{rel} {key}" for rel, key in sorted(keys.items())))


def channel_store(specs: Path, cache: str | None = None, fresh: bool = False) -> ChannelStore:
    """The channel store for ``specs`` (``fresh``: one that keeps nothing, but is saved)."""
    return ChannelStore(cache_folder(specs, cache), tool_key([TEMPLATES]), read=not fresh)


@contextmanager
def settled_memory() -> Iterator[None]:
    """Python's cyclic collector paused while the spec is loaded and checked, then everything alive
    moved out of its reach (``gc.freeze``) until the block ends.

    Loading and checking build one large graph of objects that lives until the command ends; every
    automatic collection meanwhile walks all of it again: 3 s of an 11 s check at 10,000 channels
    (measured), and later collections, in the parent and in forked workers, would walk it again."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        gc.freeze()
        if enabled:
            gc.enable()


def check(specs: Path | str, store: ChannelStore, on_file: Callable[[], None] | None = None) -> Checked:
    """Load, analyse and check ``specs``; a channel file the store knows is taken from it as loaded,
    with its channel-rule findings and figures, instead of being parsed, analysed and checked."""
    with settled_memory():
        spec = load_spec(specs, on_file, cached=store)
        analysis = analyze(spec)
        per_channel = channel_rule_table(analysis, store.findings(spec.channels))
        findings = run_rules(analysis, per_channel=per_channel)
    return Checked(analysis, findings, per_channel, store.figures(spec.channels), store.sheets(spec.channels))


def keep(store: ChannelStore, checked: Checked, sheets: dict[str, str] | None = None) -> None:
    """Save what this run worked out into the channel store (figures computed where missing)."""
    figures = {r.channel.id: checked.figures.get(r.channel.id) or figures_text(r) for r in checked.analysis.channels}
    spec = checked.analysis.spec
    store.save(spec.keys, spec.system, spec.channels, figures, checked.per_channel,
               sheets if sheets is not None else checked.sheets)


