"""The published site: render every page and swap the finished folder into place.

Layout of a built site (every link relative, so it works from ``file://`` and any sub-path)::

    index.html            overview: totals, budgets, the channel table
    channels/<id>.html    one page per channel
    budgets.html  findings.html  rules.html  book.html
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
"""

from __future__ import annotations

import importlib.resources
import os
import shutil
import tempfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import jinja2

from . import render
from .analysis import SystemAnalysis, analyze
from .errors import SpecError
from .load import load_spec
from .propose import flagged_channels, propose
from .report import to_json
from .rules import Finding, all_rules, run_rules

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


def pages(analysis: SystemAnalysis, findings: list[Finding], env: jinja2.Environment) -> Iterator[tuple[str, str]]:
    """Every page as (relative path, text), lazily, so a large system never sits in memory."""
    # Proposals only for channels with findings a rate or filter can affect: cheap on a healthy spec.
    flagged = flagged_channels(analysis.spec, findings)
    proposals = {p.channel_id: p for p in propose(analysis.spec, flagged)} if flagged else {}
    ctx = render.Context(analysis, findings, render.channel_paths([r.channel.id for r in analysis.channels]),
                         proposals=proposals)
    rules = all_rules()

    def page(template: str, view: Any) -> str:
        return env.get_template(template).render(page=view, frame=view.frame)

    yield "index.html", page("overview.html", render.overview_page(ctx))
    yield "budgets.html", page("budgets.html", render.budgets_page(ctx))
    yield "findings.html", page("findings.html", render.findings_page(ctx, rules))
    yield "rules.html", page("rules.html", render.rules_page(ctx, rules))
    yield "book.html", page("book.html", render.book_page(ctx))
    channel_template = env.get_template("channel.html")
    for result in analysis.channels:
        view = render.channel_page(result, ctx)
        yield ctx.paths[result.channel.id], channel_template.render(page=view, frame=view.frame)


def page_count(analysis: SystemAnalysis) -> int:
    return 5 + len(analysis.channels)


# ---------------------------------------------------------------------------------------------
# The output folder
# ---------------------------------------------------------------------------------------------


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


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
    if _inside(spec_root, out):
        raise SpecError(f"refusing to build into {output}: it is (or contains) the specs folder {specs}; "
                        "choose another output folder, e.g. -o output")
    if (out / ".git").exists() or (out / "pyproject.toml").exists():
        raise SpecError(f"refusing to build into {output}: it is the root of a repository or project "
                        "(it holds .git or pyproject.toml); choose a folder inside it, e.g. -o output")
    if output.is_symlink():
        raise SpecError(f"refusing to build into {output}: it is a symbolic link; name the real folder")
    if out.exists() and not out.is_dir():
        raise SpecError(f"refusing to build into {output}: it is a file, not a folder")
    if out.is_dir() and not _regular_file(out / MARKER):
        foreign = sorted(p.name for p in out.iterdir() if p.name not in KEPT)
        if foreign:
            shown = ", ".join(foreign[:3]) + (" ..." if len(foreign) > 3 else "")
            raise SpecError(f"refusing to build into {output}: it holds files specfold did not make ({shown}) "
                            f"and no {MARKER} marker; empty it or choose another folder")
    if not out.parent.is_dir():
        raise SpecError(f"cannot build into {output}: its parent folder {out.parent} does not exist")


def _regular_file(path: Path) -> bool:
    """A plain file, not a symbolic link to one: links in an old site are never followed."""
    return path.is_file() and not path.is_symlink()


def _remove_tree(folder: Path) -> None:
    """Delete a folder this tool made, its marker last, so a half-deleted one is still recognised.

    ``shutil.rmtree`` removes symbolic links inside as links and never descends through them.
    """
    for entry in sorted(folder.iterdir()):
        if entry.name in (MARKER, BUILDING_MARKER):
            continue
        if entry.is_dir() and not entry.is_symlink():
            shutil.rmtree(entry)
        else:
            entry.unlink()
    shutil.rmtree(folder)


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True  # someone else's process: leave its folder alone
    return True


def _clean_leftovers(out: Path) -> None:
    """Remove temporary siblings of ``out`` that a killed build left behind, and only those.

    A ``.NAME.building-*`` folder counts when it carries the building marker and the process named
    in it is gone; a ``.NAME.old-*`` folder when it carries the site marker (the old site is
    deleted marker last).  Anything else with a similar name is left as it is.
    """
    prefix = f".{out.name}."
    for entry in sorted(out.parent.iterdir()):
        if not entry.name.startswith(prefix) or entry.is_symlink() or not entry.is_dir():
            continue
        kind = entry.name[len(prefix):].split("-", 1)[0]
        if kind == "building" and _regular_file(entry / BUILDING_MARKER):
            text = (entry / BUILDING_MARKER).read_text(encoding="utf-8", errors="replace").strip()
            if text.isdigit() and _alive(int(text)):
                continue
            shutil.rmtree(entry, ignore_errors=True)
        elif kind == "old" and _regular_file(entry / MARKER):
            if not out.exists() and not out.is_symlink():
                os.replace(entry, out)  # killed between the two renames of a swap: the old site comes back
                continue
            shutil.rmtree(entry, ignore_errors=True)


def _write(root: Path, rel: str, data: str | bytes) -> None:
    target = (root / rel).resolve()
    if not _inside(target, root) or target == root:
        raise SpecError(f"refusing to write {rel!r}: it would land outside the site folder")
    target.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(data, str):
        target.write_text(data, encoding="utf-8", newline="\n")
    else:
        target.write_bytes(data)


def _fill(tmp: Path, analysis: SystemAnalysis, findings: list[Finding], env: jinja2.Environment,
          progress: Progress | None) -> int:
    """Write the whole site into ``tmp``; returns the number of HTML pages."""
    assets = tmp / "assets"
    assets.mkdir()
    for name in STATIC:
        shutil.copyfile(TEMPLATES / "static" / name, assets / name)
    shutil.copyfile(plotly_bundle(), tmp / PLOTLY_ASSET)
    _write(tmp, "data/spec.json", to_json(analysis, findings))
    total = page_count(analysis)
    done = 0
    for rel, text in pages(analysis, findings, env):
        _write(tmp, rel, text)
        done += 1
        if progress is not None:
            progress(done, total, rel)
    _write(tmp, MARKER, MARKER_TEXT)
    return done


def _swap(tmp: Path, out: Path) -> None:
    """Old site aside, new site in, old site gone; on a failed rename the old site comes back."""
    if not out.exists():
        os.replace(tmp, out)
        return
    for name in KEPT:
        if _regular_file(out / name) and not (tmp / name).exists():
            shutil.copy2(out / name, tmp / name)
    aside = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=out.parent))
    aside.rmdir()
    os.replace(out, aside)
    try:
        os.replace(tmp, out)
    except BaseException:
        os.replace(aside, out)
        raise
    _remove_tree(aside)


def write_site(analysis: SystemAnalysis, findings: list[Finding], output: Path, specs: Path,
               progress: Progress | None = None) -> int:
    """Render the site into a temporary sibling of ``output`` and swap it in; returns the page count."""
    check_output(output, specs)
    env = environment()
    out = output.resolve()
    _clean_leftovers(out)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.building-", dir=out.parent))
    try:
        (tmp / BUILDING_MARKER).write_text(f"{os.getpid()}\n", encoding="utf-8")
        count = _fill(tmp, analysis, findings, env, progress)
        _swap(tmp, out)
        (out / BUILDING_MARKER).unlink()
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return count


def build(specs: Path | str, output: Path | str, progress: Progress | None = None) -> BuildSummary:
    """Load, analyse and check ``specs``, then publish the site into ``output``."""
    specs_path, out_path = Path(specs), Path(output)
    check_output(out_path, specs_path)  # refuse early, before any work
    analysis = analyze(load_spec(specs_path))
    findings = run_rules(analysis)
    count = write_site(analysis, findings, out_path, specs_path, progress)
    return BuildSummary(out_path, count, len(analysis.channels), findings)
