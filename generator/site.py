"""The published site: render every page and swap the finished folder into place.

Layout of a built site (every link relative, so it works from ``file://`` and any sub-path)::

    index.html            overview: totals, budgets, the channel table
    channels/<id>.html    one page per channel
    budgets.html  findings.html  rules.html  book.html
    book/<name>.html      above render.BOOK_SPLIT channels: one book page per converter (channels
                          without one grouped by kind); book.html is then the book's index
    data/spec.json        the JSON contract (the same document as ``check --format json``)
    assets/               site.css, site.js and plotly.min.js (copied once from the plotly package)
    .specfold-site        marker: this folder was made by specfold and may be replaced

Safety of the output folder
---------------------------
The site is written into a sibling temporary folder; only when every file is written is the
old folder renamed aside, the new one renamed in, and the old one deleted.  Any failure before
the swap deletes the temporary folder and leaves the previous site as it was.  The builder
refuses a folder that is not empty unless it holds the marker (a folder holding only a
``.gitignore`` counts as empty, and that ``.gitignore`` is carried into the new site), refuses
the specs folder and any folder that contains it, a repository or project root, the home folder
and the file-system root, and never deletes anything else.  Symbolic links in an old site are
removed as links and never followed (a linked marker or ``.gitignore`` does not count).

A build killed outright cannot clean up: its temporary folder carries ``.specfold-building``
with the builder's process id, and the next build removes such folders once that process is
gone; an ``.old-`` folder (the old site is deleted marker last) is removed too, or put back when
the kill fell between the two renames of the swap.

Determinism: channels and findings come sorted, chart ids are fixed, JSON is written with
fixed separators, and no page carries a time stamp, so two builds are byte-identical.

Incremental builds
------------------
The site carries its build cache (:mod:`generator.cache`).  A build whose tool and inputs keys
match the current site's manifest changes nothing and returns at once.  Otherwise only changed
files are read, parsed and analysed, channel rules run only on the channels that changed, budgets,
system rules and waivers run again (they span channels), spec.json is
assembled from the kept figures text, the shared pages are rendered again, and a channel page or
book section whose key is unchanged is hard-linked (or copied) from the current site, as is an
unchanged cache shard.  The manifest and cache move with the site in the same swap, so they
always describe the folder they sit in.

On a large system the work after the checks is shared with forked workers: one writes spec.json
and the cache while the parent renders the shared pages, and with many pages to render a worker
per CPU renders channel pages in coarse chunks.
"""

from __future__ import annotations

import ctypes
import gc
import hashlib
import importlib.resources
import multiprocessing
import multiprocessing.pool
import os
import shutil
import signal
import sys
import tempfile
from collections.abc import Callable, Iterator, Mapping
from contextlib import ExitStack, contextmanager, suppress
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import jinja2

from . import render
from .analysis import ChannelResult, SystemAnalysis, analyze
from .cache import (
    MANIFEST,
    Cached,
    Reuse,
    input_keys,
    known_stats,
    manifest_findings,
    manifest_text,
    read_manifest,
    signing_key,
    tool_key,
    unchanged,
    write_inputs,
    write_shards,
    write_shared,
)
from .dsp import memo
from .errors import SpecError, os_error_text
from .files import alive, carry, halt_point, inside, regular_file, walk, write
from .load import load_spec
from .propose import flagged_channels, propose
from .report import to_json
from .rules import Finding, all_rules, channel_rule_table, run_rules

MARKER = ".specfold-site"
MARKER_TEXT = "This folder is a site built by specfold; the next build replaces all of it.\n"
BUILDING_MARKER = ".specfold-building"
"""Written first into a temporary build folder, holding the builder's process id: a folder left by a
killed build carries it, so a later build may remove that folder and nothing else."""
KEPT = (".gitignore",)
"""Files carried from the old output folder into the new one (and allowed in an unmarked one)."""

TEMPLATES = Path(__file__).resolve().parent.parent / "site_templates"
STATIC = ("site.css", "site.js")
PLOTLY_ASSET = "assets/plotly.min.js"
POOL_MIN_PAGES = 300
"""Fewer channel pages than this to render are rendered in-process (a pool would not pay off)."""
POOL_CHUNK = 100

Progress = Callable[[int, int, str], None]
"""``progress(done, total, what)``, called as pages are written; the CLI draws it."""


@dataclass(frozen=True)
class BuildSummary:
    output: Path
    pages: int
    channels: int
    findings: list[Finding]


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


# ---------------------------------------------------------------------------------------------
# Pages
# ---------------------------------------------------------------------------------------------


SITE_PROPOSALS_LIMIT = 50
"""Most flagged channels the site designs proposals for.  Each proposal searches rates and filters
(about 45 ms a channel, measured at 10,000 channels), which for hundreds of flagged channels would
add half a minute to every build; past the limit the overview says how many are flagged and
``specfold propose`` does it."""


def _context(analysis: SystemAnalysis, findings: list[Finding]) -> render.Context:
    # Proposals only for channels with findings a rate or filter can affect: cheap on a healthy spec.
    flagged = flagged_channels(analysis.spec, findings)
    paths = render.channel_paths([r.channel.id for r in analysis.channels])
    if len(flagged) > SITE_PROPOSALS_LIMIT:
        return render.Context(analysis, findings, paths, proposals_deferred=len(flagged))
    known = {r.channel.id: r for r in analysis.channels}
    proposals = {p.channel_id: p for p in propose(analysis.spec, flagged, known=known)} if flagged else {}
    return render.Context(analysis, findings, paths, proposals=proposals)


def pages(analysis: SystemAnalysis, findings: list[Finding], env: jinja2.Environment) -> Iterator[tuple[str, str]]:
    """Every page as (relative path, text), lazily, so a large system never sits in memory."""
    ctx = _context(analysis, findings)
    sections = render.book_sections(analysis)
    yield from shared_pages(ctx, env, sections)
    for result in analysis.channels:
        yield ctx.paths[result.channel.id], channel_html(result, ctx, env)
    for section in sections:
        yield section.path, section_html(section, ctx, env)


def channel_html(result: ChannelResult, ctx: render.Context, env: jinja2.Environment) -> str:
    view = render.channel_page(result, ctx)
    return env.get_template("channel.html").render(page=view, frame=view.frame)


def section_html(section: render.BookSection, ctx: render.Context, env: jinja2.Environment) -> str:
    view = render.book_section_page(ctx, section)
    return env.get_template("book.html").render(page=view, frame=view.frame)


SHARED_PAGES = ("index.html", "budgets.html", "findings.html", "rules.html", "book.html")
"""The pages that span all channels: rendered again on every build that changes anything."""


def shared_page(rel: str, ctx: render.Context, env: jinja2.Environment,
                sections: tuple[render.BookSection, ...] = ()) -> str:
    """One of :data:`SHARED_PAGES`.  With ``sections`` (a split book) ``book.html`` is the book's
    index; the sections are rendered like channel pages."""

    def page(template: str, view: Any) -> str:
        return env.get_template(template).render(page=view, frame=view.frame)

    if rel == "index.html":
        return page("overview.html", render.overview_page(ctx))
    if rel == "budgets.html":
        return page("budgets.html", render.budgets_page(ctx))
    if rel == "findings.html":
        return page("findings.html", render.findings_page(ctx, all_rules()))
    if rel == "rules.html":
        return page("rules.html", render.rules_page(ctx, all_rules()))
    if rel == "book.html":
        return page("book_index.html", render.book_index_page(ctx, sections)) if sections else page(
            "book.html", render.book_page(ctx))
    raise ValueError(f"no shared page {rel!r}")


def shared_pages(ctx: render.Context, env: jinja2.Environment,
                 sections: tuple[render.BookSection, ...] = ()) -> Iterator[tuple[str, str]]:
    """Every one of :data:`SHARED_PAGES` as (relative path, text)."""
    for rel in SHARED_PAGES:
        yield rel, shared_page(rel, ctx, env, sections)


def page_count(analysis: SystemAnalysis) -> int:
    return len(SHARED_PAGES) + len(analysis.channels) + len(render.book_sections(analysis))


# ---------------------------------------------------------------------------------------------
# The output folder
# ---------------------------------------------------------------------------------------------


def check_output(output: Path, specs: Path) -> None:
    """Refuse an output folder the builder must not replace (a SpecError saying why)."""
    out = output.resolve()
    spec_root = specs.resolve()
    if out == Path(out.anchor):
        raise SpecError(f"refusing to build into {output}: it is the root of the file system; "
                        "choose a folder of its own, e.g. -o output")
    if out == Path.home().resolve():
        raise SpecError(f"refusing to build into {output}: it is your home folder; "
                        "choose a folder of its own, e.g. -o output")
    if inside(spec_root, out):
        raise SpecError(f"refusing to build into {output}: it is (or contains) the specs folder {specs}; "
                        "choose another output folder, e.g. -o output")
    if (out / ".git").exists() or (out / "pyproject.toml").exists():
        raise SpecError(f"refusing to build into {output}: it is the root of a repository or project "
                        "(it holds .git or pyproject.toml); choose a folder inside it, e.g. -o output")
    if output.is_symlink():
        raise SpecError(f"refusing to build into {output}: it is a symbolic link; name the real folder")
    if out.exists() and not out.is_dir():
        raise SpecError(f"refusing to build into {output}: it is a file, not a folder")
    if out.is_dir() and not regular_file(out / MARKER):
        foreign = sorted(p.name for p in out.iterdir() if p.name not in KEPT)
        if foreign:
            shown = ", ".join(foreign[:3]) + (" ..." if len(foreign) > 3 else "")
            raise SpecError(f"refusing to build into {output}: it holds files specfold did not make ({shown}) "
                            f"and no {MARKER} marker; empty it or choose another folder")
    if not out.parent.is_dir():
        raise SpecError(f"cannot build into {output}: its parent folder {out.parent} does not exist")


def _remove_tree(folder: Path) -> None:
    """Delete a folder this tool made, its site marker last, so a half-deleted one is still
    recognised (and removed) by the next build.

    ``shutil.rmtree`` removes symbolic links inside as links and never descends through them.
    """
    for entry in sorted(folder.iterdir()):
        if entry.name == MARKER:
            continue
        if entry.is_dir() and not entry.is_symlink():
            shutil.rmtree(entry)
        else:
            entry.unlink()
    halt_point("site")  # the old site emptied but for its marker
    (folder / MARKER).unlink(missing_ok=True)
    folder.rmdir()


def sibling_prefix(out: Path) -> str:
    """``.NAME.``: how the temporary siblings of the output folder ``out`` begin.

    A name near the file system's 255-byte limit leaves no room for ``.NAME.building-XXXXXXXX``; it
    is then shortened to its first 100 bytes and a digest of the whole name, still unique to it.
    """
    name = out.name
    if len(name.encode("utf-8")) <= 200:
        return f".{name}."
    head = name.encode("utf-8")[:100].decode("utf-8", "ignore")
    return f".{head}~{hashlib.sha256(name.encode('utf-8')).hexdigest()[:16]}."


def _clean_leftovers(out: Path) -> None:
    """Remove temporary siblings of ``out`` that a killed build left behind, and only those.

    A ``.NAME.building-*`` folder counts when it is empty (killed before its marker was written),
    when it carries the building marker and the process named in it is gone, or when it carries the
    site marker alone (complete, killed just before its swap);
    a ``.NAME.old-*`` folder when it carries the site marker (the old site is deleted marker last),
    and it is put back when ``out`` itself is missing (killed between the two renames of a swap).
    Anything else with a similar name is left as it is.  Runs under :func:`output_lock`, so no other
    build of this output is running.
    """
    prefix = sibling_prefix(out)
    for entry in sorted(out.parent.iterdir()):
        if not entry.name.startswith(prefix) or entry.is_symlink() or not entry.is_dir():
            continue
        kind = entry.name[len(prefix):].split("-", 1)[0]
        if kind == "building" and not any(entry.iterdir()):
            entry.rmdir()  # made, and killed before its marker: empty, so nothing of anyone's is lost
        elif kind == "building" and regular_file(entry / BUILDING_MARKER):
            text = (entry / BUILDING_MARKER).read_text(encoding="utf-8", errors="replace").strip()
            if text.isdigit() and alive(int(text)):
                continue
            shutil.rmtree(entry, ignore_errors=True)
        elif kind in ("building", "old") and regular_file(entry / MARKER):
            if kind == "old" and not out.exists() and not out.is_symlink():
                os.replace(entry, out)  # killed between the two renames of a swap: the old site comes back
                continue
            shutil.rmtree(entry, ignore_errors=True)


@contextmanager
def output_lock(out: Path) -> Iterator[None]:
    """Hold the build lock of the output folder ``out`` (resolved), or refuse with a SpecError.

    The lock is an advisory ``flock`` on the folder that holds ``out``: two builds into one output
    (a ``serve`` and a ``build``, two CI jobs) are serialised, and the second says so instead of
    racing the first for the swap.  Nothing is written for it, so a killed build leaves no lock
    behind: the kernel releases it with the process.  Where ``flock`` is missing it is a no-op.
    """
    try:
        import fcntl
    except ImportError:  # not POSIX: no lock, as before
        yield
        return
    fd = os.open(out.parent, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise SpecError(f"another specfold build is writing into {out.parent} right now; run this one "
                            "again when it has finished") from None
        yield
    finally:
        os.close(fd)  # releases the lock


# ---------------------------------------------------------------------------------------------
# Filling the temporary folder
# ---------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class _Job:
    """What a build writes, as a forked worker inherits it (never pickled)."""

    tmp: Path
    ctx: render.Context
    env: jinja2.Environment
    sections: tuple[render.BookSection, ...]
    figures: dict[str, str]
    reuse: Reuse | None
    cached: Cached
    per_channel: Mapping[str, tuple[Finding, ...]]


_JOB: _Job | None = None
"""The state a forked worker works from."""


def _render_one(i: int, job: _Job) -> str:
    """Render item ``i``: a channel page below the channel count, a book section above it."""
    n = len(job.ctx.analysis.channels)
    if i < n:
        result = job.ctx.analysis.channels[i]
        rel = job.ctx.paths[result.channel.id]
        write(job.tmp, rel, channel_html(result, job.ctx, job.env))
    else:
        section = job.sections[i - n]
        rel = section.path
        write(job.tmp, rel, section_html(section, job.ctx, job.env))
    return rel


def _render_chunk(indices: list[int]) -> tuple[int, dict[str, dict[object, object]]]:
    """Render a chunk in a worker; returns how many pages, and the worker's numerical memos (the
    charts' filter designs), which the parent keeps in the cache."""
    assert _JOB is not None
    for i in indices:
        _render_one(i, _JOB)
    return len(indices), memo.known()


def _data_and_shards(job: _Job) -> dict[str, str] | None:
    """Write data/spec.json, then, with a reuse, the cache's channel shards (they keep the figures
    text writing spec.json encodes); returns the shards' listing."""
    analysis = job.ctx.analysis
    write(job.tmp, "data/spec.json", to_json(analysis, job.ctx.findings, memo=job.figures))
    if job.reuse is None:
        return None
    return write_shards(job.tmp, job.reuse, analysis, job.figures, job.cached, job.per_channel)


def _side() -> dict[str, str] | None:
    """The side worker's task: :func:`_data_and_shards` of the inherited job."""
    assert _JOB is not None
    return _data_and_shards(_JOB)


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


def _pool(workers: int) -> multiprocessing.pool.Pool:
    """A pool of forked workers that end with this process."""
    return multiprocessing.get_context("fork").Pool(workers, initializer=_die_with_parent, initargs=(os.getpid(),))


def _forking(channels: int) -> bool:
    """Whether a build of this many channels shares its work with forked workers."""
    return channels >= POOL_MIN_PAGES and "fork" in multiprocessing.get_all_start_methods()


def _pool_size(todo: int) -> int:
    """Workers rendering channel pages: a worker per CPU (at most 8) for many pages, else none."""
    cpus = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    return min(cpus, 8) if todo >= POOL_MIN_PAGES and cpus > 1 else 0


def _fill(tmp: Path, analysis: SystemAnalysis, findings: list[Finding], env: jinja2.Environment,
          progress: Progress | None, reuse: Reuse | None = None, figures: dict[str, str] | None = None,
          cached: Cached | None = None, per_channel: Mapping[str, tuple[Finding, ...]] | None = None,
          ) -> tuple[int, dict[str, str], dict[str, Any] | None]:
    """Write the whole site into ``tmp``; returns the number of HTML pages, the page keys and the
    listing of the cache written (None without a reuse).

    ``figures`` is the memo of :func:`report.to_json` (channel id -> figures as JSON text);
    ``per_channel`` the channel-rule findings the cache keeps (:func:`rules.channel_rule_table`)."""
    global _JOB
    assets = tmp / "assets"
    assets.mkdir()
    for name in STATIC:
        shutil.copyfile(TEMPLATES / "static" / name, assets / name)
    old_bundle = reuse.old_site / PLOTLY_ASSET if reuse is not None and reuse.previous is not None else None
    if old_bundle is None or not carry(old_bundle, tmp / PLOTLY_ASSET):
        shutil.copyfile(plotly_bundle(), tmp / PLOTLY_ASSET)
    ctx = _context(analysis, findings)
    total = page_count(analysis)
    done = 0

    def tick(n: int, rel: str) -> None:
        nonlocal done
        done += n
        if progress is not None:
            progress(done, total, rel)

    sections = render.book_sections(analysis)
    (tmp / "channels").mkdir(exist_ok=True)
    if sections:
        (tmp / "book").mkdir(exist_ok=True)
    job = _Job(tmp, ctx, env, sections, figures if figures is not None else {}, reuse,
               cached if cached is not None else Cached(), per_channel if per_channel is not None else {})
    with ExitStack() as stack:
        side = None
        if _forking(len(analysis.channels)):
            # a side worker writes spec.json and the cache shards meanwhile
            _JOB = job
            stack.callback(_clear_job)
            side = stack.enter_context(_pool(1)).apply_async(_side)
        keys, todo = _carry_pages(job, tick)
        workers = _pool_size(len(todo)) if side is not None else 0
        pending = None
        if workers:
            chunks = [todo[k:k + POOL_CHUNK] for k in range(0, len(todo), POOL_CHUNK)]
            pool = stack.enter_context(_pool(workers))
            pending = pool.map_async(_render_chunk, chunks, chunksize=1)
        for rel in SHARED_PAGES:
            write(tmp, rel, shared_page(rel, ctx, env, sections))
            tick(1, rel)
        halt_point("site")  # the site half written
        if pending is None:
            for i in todo:
                tick(1, _render_one(i, job))
        else:
            for n, designs in pending.get():
                memo.remember(designs)
                tick(n, "channels/")
        shards = _data_and_shards(job) if side is None else side.get()
    listing = None
    if reuse is not None and shards is not None and (shared := write_shared(tmp, reuse, analysis)) is not None:
        listing = {"shared": shared, "shards": shards, "inputs": write_inputs(tmp, reuse)}
    write(tmp, MARKER, MARKER_TEXT)
    return done, keys, listing


def _clear_job() -> None:
    global _JOB
    _JOB = None


def _carry_pages(job: _Job, tick: Callable[[int, str], None]) -> tuple[dict[str, str], list[int]]:
    """Key every channel page and book section, carry the unchanged ones from the current site;
    returns the keys and the items still to render (channel indices, then sections after them)."""
    reuse, ctx, tmp = job.reuse, job.ctx, job.tmp
    channels = ctx.analysis.channels
    keys: dict[str, str] = {}
    todo: list[int] = []
    channel_keys: list[str | None] = []
    for i, result in enumerate(channels):
        rel = ctx.paths[result.channel.id]
        key = reuse.page_key(result, ctx, rel) if reuse is not None else None
        channel_keys.append(key)
        if key is not None:
            keys[rel] = key
        if reuse is not None and reuse.take(rel, key, tmp):
            reuse.reused += 1
            tick(1, rel)
        else:
            todo.append(i)
    for j, section in enumerate(job.sections):
        key = reuse.section_key(section, channel_keys) if reuse is not None else None
        if key is not None:
            keys[section.path] = key
        if reuse is not None and reuse.take(section.path, key, tmp):
            reuse.reused += 1
            tick(1, section.path)
        else:
            todo.append(len(channels) + j)
    return keys, todo


def _swap(tmp: Path, out: Path) -> None:
    """Old site aside, new site in, old site gone; on a failed rename the old site comes back."""
    if not out.exists():
        os.replace(tmp, out)
        return
    for name in KEPT:
        if regular_file(out / name) and not (tmp / name).exists():
            shutil.copy2(out / name, tmp / name)
    aside = Path(tempfile.mkdtemp(prefix=f"{sibling_prefix(out)}old-", dir=out.parent))
    aside.rmdir()
    os.replace(out, aside)
    halt_point("site")  # the old site aside, no site at the output's name
    try:
        os.replace(tmp, out)
    except BaseException:
        os.replace(aside, out)
        raise
    halt_point("site")  # the new site in place, the old one aside
    with suppress(OSError):  # the new site is in place; the next build removes what is left (it keeps the marker)
        _remove_tree(aside)


def write_site(analysis: SystemAnalysis, findings: list[Finding], output: Path, specs: Path,
               progress: Progress | None = None, reuse: Reuse | None = None, cached: Cached | None = None,
               per_channel: Mapping[str, tuple[Finding, ...]] | None = None) -> int:
    """Render the site into a temporary sibling of ``output`` and swap it in; returns the page count.

    With ``reuse``, unchanged channel pages come from the current site and the new site gets a
    manifest and a cache for the next build; ``cached`` is what this build took from the current
    site's cache (its figures are reused for the channels whose analysis was); ``per_channel``,
    each channel's channel-rule findings, goes into the new cache.
    """
    cached = cached if cached is not None else Cached()
    figures = cached.figures_for(analysis)
    # again, though build() did both first: the folder may have changed while the spec was analysed
    check_output(output, specs)
    env = environment()
    out = output.resolve()
    _clean_leftovers(out)
    tmp = Path(tempfile.mkdtemp(prefix=f"{sibling_prefix(out)}building-", dir=out.parent))
    try:
        halt_point("site")  # the temporary folder made, still empty
        (tmp / BUILDING_MARKER).write_text(f"{os.getpid()}\n", encoding="utf-8")
        halt_point("site")  # marked as this process's
        count, keys, listing = _fill(tmp, analysis, findings, env, progress, reuse, figures, cached, per_channel)
        halt_point("site")  # every page written, the site marker last
        if reuse is not None and reuse.inputs is not None:
            write(tmp, MANIFEST, manifest_text(reuse, keys, count, len(analysis.channels), findings, listing or {}))
            halt_point("site")  # the manifest written
        # the published site never carries the building marker: it goes before the swap, and a
        # complete folder killed right here is known by its site marker alone (_clean_leftovers)
        (tmp / BUILDING_MARKER).unlink()
        halt_point("site")
        _swap(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return count


def _intact(out: Path, previous: dict[str, Any]) -> bool:
    """Whether the current site is still what the manifest describes: no link anywhere in it (a
    tampered site must be rebuilt, never trusted) and every channel page it lists present."""
    pages = previous.get("pages")
    if not isinstance(pages, dict):
        return False
    present: set[str] = set()
    try:
        for parts, entry in walk(out, strict=True):
            if entry.is_symlink():
                return False
            present.add("/".join(parts))
    except OSError:
        return False
    return all(rel in present for rel in pages)


@contextmanager
def _collector_paused() -> Iterator[Callable[[], None]]:
    """Pause Python's cyclic garbage collector for a build; yields ``settled``, to be called once the
    spec is loaded, analysed and checked.

    Loading builds one large object graph that lives until the build ends, and every automatic full
    collection meanwhile walks all of it again (about a second at 10,000 channels, measured).
    ``settled`` moves everything alive into the permanent generation (``gc.freeze``) before the
    collector resumes: otherwise its first young collection would walk the millions of objects
    allocated while it was paused, and later full ones again.  Frozen objects are also kept
    unshared after the pool forks.  At the end they are unfrozen, so a long-lived process
    (``specfold serve``) collects as usual between builds.
    """
    was_enabled = gc.isenabled()
    gc.disable()

    def settled() -> None:
        gc.freeze()
        if was_enabled:
            gc.enable()

    try:
        yield settled
    finally:
        gc.unfreeze()
        if was_enabled:
            gc.enable()


def build(specs: Path | str, output: Path | str, progress: Progress | None = None,
          incremental: bool = True) -> BuildSummary:
    """Load, analyse and check ``specs``, then publish the site into ``output``.

    ``incremental=False`` ignores the current site's manifest and cache and renders every page
    (the new site still gets a manifest and a cache for the next build).
    """
    specs_path, out_path = Path(specs), Path(output)
    with _located(out_path):
        check_output(out_path, specs_path)  # refuse early, before any work
        with output_lock(out_path.resolve()):
            return _build(specs_path, out_path, progress, incremental)


@contextmanager
def _located(output: Path) -> Iterator[None]:
    """A file-system error while building (a full disk, a read-only or immutable folder, a name too
    long) as one sentence about the output folder: every such failure comes before the swap, so
    the previous site is still there."""
    try:
        yield
    except OSError as exc:
        raise SpecError(f"cannot build into {output}: {os_error_text(exc)}; the previous site, if any, "
                        "is as it was") from None


def _build(specs_path: Path, out_path: Path, progress: Progress | None, incremental: bool) -> BuildSummary:
    _clean_leftovers(out_path.resolve())  # first: a site a killed build had moved aside comes back, and is reused
    tool, key = tool_key(TEMPLATES, plotly_bundle()), signing_key()
    previous = read_manifest(out_path) if incremental and regular_file(out_path / MARKER) else None
    if previous is not None and not _intact(out_path, previous):
        previous = None  # a site with links in it, or pages missing, is neither trusted nor reused
    inputs = input_keys(specs_path, known_stats(out_path, previous, key))
    if previous is not None and unchanged(previous, tool, inputs):
        return BuildSummary(out_path, int(previous["count"]), int(previous["channels"]), manifest_findings(previous))
    reuse = Reuse(tool, inputs, previous, out_path.resolve(), key)
    with _collector_paused() as settled:
        cached = reuse.load_cache()
        memo.remember(cached.designs)
        spec = load_spec(specs_path, known={rel: r.channel for rel, r in cached.results.items()},
                         known_system=cached.system)
        analysis = analyze(spec, known={r.channel.id: r for r in cached.results.values()})
        per_channel = channel_rule_table(analysis, cached.findings_for(analysis))
        findings = run_rules(analysis, per_channel=per_channel)
        settled()
        count = write_site(analysis, findings, out_path, specs_path, progress, reuse, cached, per_channel)
    return BuildSummary(out_path, count, len(analysis.channels), findings)
