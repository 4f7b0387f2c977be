"""Every file of the site, each with the digest of what it shows, rendered only when that changed.

Layout of a built site (every link relative, so it works from ``file://`` and any sub-path)::

    index.html            overview: totals, budgets, the channel table
    channels/<id>.html    one page per channel
    budgets.html  findings.html  rules.html  book.html
    book/<name>.html      above views.BOOK_SPLIT channels: one book page per converter (channels
                          without one grouped by kind); book.html is then the book's index
    data/spec.json        the JSON contract (the same document as ``check --format json``)
    assets/               site.css, site.js and plotly.min.js (copied once from the plotly package)
    .specfold-site        marker: this folder was made by specfold and may be replaced

A page's *view digest* is a digest of the whole view data its template lays out, so an unchanged
digest means an unchanged page: the page is then carried (hard-linked) from the current site when
the page store vouches for the file there (:class:`generator.build.store.PageStore`).  A channel
page's view is built from two parts (:mod:`generator.views`): its *sheet*, which follows from the
channel's file alone and whose digest the channel store keeps, and its *live* part (status,
findings, proposal), which is cheap to build every time.  So a rebuild knows which pages changed
without analysing the channels that did not.

Determinism: channels and findings come sorted, chart ids are fixed, JSON is written with fixed
separators, and no page carries a time stamp, so two builds are byte-identical.  With many pages
to render, forked workers render the channel pages in chunks (the one speed-up the benchmark
keeps: a full build of 10,000 channels on two cores).
"""

from __future__ import annotations

import ctypes
import importlib.resources
import multiprocessing
import multiprocessing.pool
import os
import shutil
import signal
import sys
from collections.abc import Callable, Mapping, Sequence
from contextlib import suppress
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import jinja2

from .. import views
from ..analysis import ChannelResult, SystemAnalysis
from ..errors import SpecError
from ..files import carry, halt_point, write
from ..propose import flagged_channels, propose
from ..report import to_json
from ..rules import Finding, all_rules
from ..source import digest
from .store import TEMPLATES, PageStore

STATIC = ("site.css", "site.js")
PLOTLY_ASSET = "assets/plotly.min.js"
SPEC_JSON = "data/spec.json"
SHARED_PAGES = ("index.html", "budgets.html", "findings.html", "rules.html", "book.html")
POOL_MIN_PAGES = 300
"""Fewer channel pages than this to render are rendered in-process (a pool would not pay off)."""
POOL_CHUNK = 100

SITE_PROPOSALS_LIMIT = 50
"""Most flagged channels the site designs proposals for.  Each proposal searches rates and filters
(about 45 ms a channel), which for hundreds of flagged channels would add half a minute to every
build; past the limit the overview says how many are flagged and ``specfold propose`` does it."""

Progress = Callable[[int, int, str], None]
"""``progress(done, total, what)``, called as pages are written; the CLI draws it."""


def environment(templates: Path = TEMPLATES) -> jinja2.Environment:
    """The one template environment: autoescaped, and an undefined name fails the build."""
    if not (templates / "base.html").is_file():
        raise SpecError(f"the site templates are missing: {templates} has no base.html; reinstall specfold")
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(templates)),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )


def plotly_bundle() -> Path:
    """plotly.min.js as shipped inside the installed plotly package."""
    path = Path(str(importlib.resources.files("plotly") / "package_data" / "plotly.min.js"))
    if not path.is_file():
        raise SpecError(f"plotly.min.js not found at {path}; reinstall plotly")
    return path


def context(analysis: SystemAnalysis, findings: list[Finding]) -> views.Context:
    """What every page builder needs, with the design proposals for the flagged channels (for up to
    :data:`SITE_PROPOSALS_LIMIT` of them)."""
    flagged = flagged_channels(analysis.spec, findings)
    paths = views.channel_paths([r.channel.id for r in analysis.channels])
    if len(flagged) > SITE_PROPOSALS_LIMIT:
        return views.Context(analysis, findings, paths, proposals_deferred=len(flagged))
    proposals = {p.channel_id: p for p in propose(analysis.spec, flagged)} if flagged else {}
    return views.Context(analysis, findings, paths, proposals=proposals)


def view_digest(*parts: Any) -> str:
    """Digest of view data: each part a digest already, or view data given by its ``repr``.

    Views are frozen dataclasses of strings, numbers, tuples and other views, whose generated
    ``repr`` names every field and quotes every string: equal views give equal text, different
    views different text.  (Measured: four times faster than encoding them as JSON.)"""
    return digest(*(p if isinstance(p, str) else repr(p) for p in parts))


# ---------------------------------------------------------------------------------------------
# The site's files
# ---------------------------------------------------------------------------------------------


@dataclass
class Site:
    """What one build writes: the context every page is built from, the sheet digests the channel
    store kept (channel id -> digest), and what the build learnt on the way."""

    ctx: views.Context
    kept_sheets: Mapping[str, str]
    kept_figures: dict[str, str]
    sheets: dict[str, str] = field(default_factory=dict)
    """Channel id -> digest of its sheet, for every channel (kept, or computed when rendered)."""
    written: dict[str, str] = field(default_factory=dict)
    """Path -> view digest of every file of the site."""

    @property
    def analysis(self) -> SystemAnalysis:
        return self.ctx.analysis

    def sheet(self, result: ChannelResult) -> views.ChannelSheet:
        sheet = views.channel_sheet(result)
        self.sheets[result.channel.id] = view_digest(sheet)
        return sheet


def _channel_page(site: Site, env: jinja2.Environment, result: ChannelResult) -> tuple[str, str, str]:
    """Render one channel page: (its path, its text, its view digest)."""
    sheet = site.sheet(result)
    live = views.channel_live(result.channel, site.ctx, "../")
    view = views.channel_page(sheet, live)
    html = env.get_template("channel.html").render(page=view, frame=view.frame)
    return site.ctx.paths[result.channel.id], html, view_digest(site.sheets[result.channel.id], live)


def _channel_view(site: Site, result: ChannelResult) -> str | None:
    """A channel page's view digest when its sheet's digest is kept (no analysis needed), else None."""
    kept = site.kept_sheets.get(result.channel.id)
    if kept is None:
        return None
    site.sheets[result.channel.id] = kept
    return view_digest(kept, views.channel_live(result.channel, site.ctx, "../"))


# ---------------------------------------------------------------------------------------------
# Forked workers
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Job:
    """What a forked worker renders from (inherited, never pickled)."""

    site: Site
    env: jinja2.Environment
    tmp: Path
    sections: tuple[views.BookSection, ...]


_JOB: _Job | None = None

PR_SET_PDEATHSIG = 1
"""prctl(2) option: the signal a Linux process gets when the thread that forked it ends."""


def _die_with_parent(parent: int) -> None:
    """Pool initializer: the worker is killed with the build (Linux), so a build killed outright
    leaves no worker writing into a folder the next build is clearing."""
    if sys.platform.startswith("linux"):
        with suppress(OSError, AttributeError):
            ctypes.CDLL(None).prctl(PR_SET_PDEATHSIG, signal.SIGKILL)
    if os.getppid() != parent:  # the build ended before the line above took effect
        os._exit(0)


def _render_chunk(tasks: list[tuple[str, int]]) -> list[tuple[str, int, str]]:
    """Render and write pages in a worker: ("channel", index) or ("section", index) tasks; returns
    (kind, index, digest) of each: a channel page's sheet digest (its view digest the parent has
    already, or computes from it), a section's nothing."""
    assert _JOB is not None
    site, env, tmp = _JOB.site, _JOB.env, _JOB.tmp
    out = []
    for kind, i in tasks:
        if kind == "channel":
            result = site.analysis.channels[i]
            rel, html, view = _channel_page(site, env, result)
            write(tmp, rel, html)
            out.append((kind, i, f"{site.sheets[result.channel.id]} {view}"))
        else:
            section = _JOB.sections[i]
            write(tmp, section.path, _book_html(site, env, [site.analysis.channels[k] for k in section.channels],
                                                section))
            out.append((kind, i, ""))
    return out


def _in_pool(site: Site, env: jinja2.Environment, tmp: Path, sections: tuple[views.BookSection, ...],
             tasks: list[tuple[str, int]], weight: int,
             tick: Callable[[int], None] = lambda n: None) -> list[tuple[str, int, str]] | None:
    """Run ``tasks`` in forked workers when there is enough work (``weight``: channels to draw);
    None when it is better done in this process."""
    global _JOB
    workers = _workers(weight)
    if not workers:
        return None
    _JOB = _Job(site, env, tmp, sections)
    try:
        ctx = multiprocessing.get_context("fork")
        chunks = [tasks[k:k + POOL_CHUNK] for k in range(0, len(tasks), POOL_CHUNK)]
        out: list[tuple[str, int, str]] = []
        with ctx.Pool(workers, initializer=_die_with_parent, initargs=(os.getpid(),)) as pool:
            for rendered in pool.imap(_render_chunk, chunks):
                out.extend(rendered)
                tick(len(rendered))
        return out
    finally:
        _JOB = None


def _workers(todo: int) -> int:
    """Forked workers to render ``todo`` channel pages: one per CPU (at most 8) for many, else none."""
    if todo < POOL_MIN_PAGES or "fork" not in multiprocessing.get_all_start_methods():
        return 0
    cpus = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    return min(cpus, 8) if cpus > 1 else 0


# ---------------------------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------------------------


def write_site(site: Site, tmp: Path, old: Path, pages: PageStore, progress: Progress | None = None) -> int:
    """Write every file of ``site`` into the empty folder ``tmp``: each page whose view digest the
    page store vouches for is carried from the current site ``old``, every other one rendered.
    Returns the number of HTML pages; ``site.written`` gets every file's view digest."""
    env = environment()
    analysis = site.analysis
    sections = views.book_sections(analysis)
    total = len(SHARED_PAGES) + len(analysis.channels) + len(sections)
    done = 0

    def put(rel: str, view: str, render: Callable[[], str]) -> None:
        nonlocal done
        if not (pages.carried(rel, view, old) and carry(os.path.join(old, rel), os.path.join(tmp, rel))):
            write(tmp, rel, render())
        site.written[rel] = view
        if rel.endswith(".html"):
            done += 1
            if progress is not None:
                progress(done, total, rel)

    _assets(tmp, old, pages, site)
    todo: list[int] = []
    for i, result in enumerate(analysis.channels):
        view = _channel_view(site, result)
        rel = site.ctx.paths[result.channel.id]
        if view is not None and pages.carried(rel, view, old) and carry(os.path.join(old, rel), os.path.join(tmp, rel)):
            site.written[rel] = view
            done += 1
            if progress is not None:
                progress(done, total, rel)
        else:
            todo.append(i)
    def tick(n: int, what: str = "channels/") -> None:
        nonlocal done
        done += n
        if progress is not None:
            progress(done, total, what)

    tasks = [("channel", i) for i in todo]
    pooled = _in_pool(site, env, tmp, sections, tasks, len(todo), tick)
    if pooled is not None:
        for _, i, both in pooled:
            cid = analysis.channels[i].channel.id
            site.sheets[cid], site.written[site.ctx.paths[cid]] = both.split(" ")
    else:
        for i in todo:
            rel, html, view = _channel_page(site, env, analysis.channels[i])
            write(tmp, rel, html)
            site.written[rel] = view
            tick(1, rel)
    halt_point("site")  # the channel pages written
    drawn: list[int] = []  # sections to draw: those whose view changed
    for j, section in enumerate(sections):
        members = [analysis.channels[i] for i in section.channels]
        view = _book_digest(site, members, "../", section.label)
        site.written[section.path] = view
        if not (pages.carried(section.path, view, old)
                and carry(os.path.join(old, section.path), os.path.join(tmp, section.path))):
            drawn.append(j)
    tick(len(sections) - len(drawn), "book/")
    if _in_pool(site, env, tmp, sections, [("section", j) for j in drawn],
                sum(len(sections[j].channels) for j in drawn), lambda n: tick(n, "book/")) is None:
        for j in drawn:
            members = [analysis.channels[i] for i in sections[j].channels]
            write(tmp, sections[j].path, _book_html(site, env, members, sections[j]))
            tick(1, sections[j].path)
    for rel in SHARED_PAGES:
        template, view = _shared_view(site, rel, sections)
        if rel == "book.html" and not sections:
            put(rel, _book_digest(site, list(analysis.channels), "", ""),
                lambda: _book_html(site, env, list(analysis.channels), None))
        else:
            put(rel, view_digest(view), lambda t=template, v=view: env.get_template(t).render(  # type: ignore[misc]
                page=v, frame=v.frame))
    text = to_json(analysis, site.ctx.findings, memo=site.kept_figures)
    put(SPEC_JSON, digest(text), lambda: text)
    return done


def _assets(tmp: Path, old: Path, pages: PageStore, site: Site) -> None:
    """site.css, site.js and the plotly bundle (carried when unchanged: it is 4.8 MB)."""
    for name in STATIC:
        source = TEMPLATES / "static" / name
        rel = f"assets/{name}"
        view = digest(source.read_bytes())
        if not (pages.carried(rel, view, old) and carry(os.path.join(old, rel), os.path.join(tmp, rel))):
            write(tmp, rel, source.read_bytes())
        site.written[rel] = view
    bundle = plotly_bundle()
    st = bundle.stat()
    view = digest("plotly", str(bundle), str(st.st_size), str(st.st_mtime_ns))
    if not (pages.carried(PLOTLY_ASSET, view, old)
            and carry(os.path.join(old, PLOTLY_ASSET), os.path.join(tmp, PLOTLY_ASSET))):
        (tmp / "assets").mkdir(exist_ok=True)
        shutil.copyfile(bundle, tmp / PLOTLY_ASSET)
    site.written[PLOTLY_ASSET] = view


def _shared_view(site: Site, rel: str, sections: Sequence[views.BookSection]) -> tuple[str, Any]:
    ctx = site.ctx
    if rel == "index.html":
        return "overview.html", views.overview_page(ctx)
    if rel == "budgets.html":
        return "budgets.html", views.budgets_page(ctx)
    if rel == "findings.html":
        return "findings.html", views.findings_page(ctx, all_rules())
    if rel == "rules.html":
        return "rules.html", views.rules_page(ctx, all_rules())
    if rel == "book.html":
        return ("book_index.html", views.book_index_page(ctx, sections)) if sections else ("book.html", None)
    raise ValueError(f"no shared page {rel!r}")


def _book_digest(site: Site, members: Sequence[ChannelResult], root: str, label: str) -> str:
    """A book page's view digest: what its frame, heading and totals show, and each sheet's digest
    (computing a sheet only where none is known yet) with the live part of that sheet."""
    system = site.analysis.spec.system
    parts: list[Any] = ["book", root, label, system.name, system.revision, system.description]
    if not label:
        parts.append(views.totals(site.ctx))
    for r in members:
        if r.channel.id not in site.sheets:
            site.sheet(r)
        parts += [site.sheets[r.channel.id], views.channel_live(r.channel, site.ctx, root)]
    return view_digest(*parts)


def _book_html(site: Site, env: jinja2.Environment, members: Sequence[ChannelResult],
               section: views.BookSection | None) -> str:
    root = "../" if section is not None else ""
    sheets = [views.book_sheet(r, views.channel_live(r.channel, site.ctx, root)) for r in members]
    view = (views.book_section_page(site.ctx, section, sheets) if section is not None
            else views.book_page(site.ctx, sheets))
    return env.get_template("book.html").render(page=view, frame=view.frame)
