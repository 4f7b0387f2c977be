"""``specfold build``: the whole pipeline in :func:`build`, with the build cache at its two points."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ..files import regular_file
from ..rules import Finding
from ..source import tree_keys
from . import output
from .pages import Progress, Site, context, write_site
from .pipeline import check, inputs_key, keep
from .store import TEMPLATES, ChannelStore, PageStore, cache_folder, tool_key


@dataclass(frozen=True)
class BuildSummary:
    output: Path
    pages: int
    channels: int
    findings: list[Finding]


def build(specs: Path | str, out: Path | str, progress: Progress | None = None, fresh: bool = False,
          cache: str | None = None) -> BuildSummary:
    """Publish ``specs`` as a site in ``out``.  ``fresh`` ignores the cache (and refills it);
    ``cache`` names the cache folder (``off``: none; default :func:`.store.cache_folder`)."""
    specs, out = Path(specs), Path(out)
    with output.located(out):
        output.check_output(out, specs)  # refuse early, before any work
        with output.output_lock(out.resolve()):
            output.clean_leftovers(out.resolve())  # a site a killed build moved aside comes back first
            folder, tool = cache_folder(specs, cache), tool_key([TEMPLATES])
            pages = PageStore(folder, out, tool, read=not fresh)                            # cache, point 2
            keys = tree_keys(specs)  # read and hashed, not parsed: an unchanged tree costs no more
            done = pages.unchanged(inputs_key(keys)) if keys is not None and pages.intact(out) else None
            if done is not None and regular_file(out / output.MARKER):
                return BuildSummary(out, *done)
            store = ChannelStore(folder, tool, read=not fresh)                              # cache, point 1
            checked = check(specs, store)
            site = Site(context(checked.analysis, checked.findings), checked.sheets, checked.figures)
            with output.replacing(out.resolve()) as tmp:
                count = write_site(site, tmp, out.resolve(), pages, progress)
            keep(store, checked, site.sheets)
            pages.save(out.resolve(), site.written, checked.inputs, count, len(checked.analysis.channels),
                       checked.findings)
    return BuildSummary(out, count, len(checked.analysis.channels), checked.findings)
