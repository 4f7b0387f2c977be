"""The build cache: a rebuild reuses what did not change and still equals a fresh build, byte for byte.

The reference for every check is a fresh build (``fresh=True``, no cache) of the same tree into
another folder: whatever the cache does, the published site must not differ from it.  Every test
keeps its cache in a folder of its own (``cache=``), so nothing leaks between tests.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from generator import load, rules, views
from generator.analysis import analyze
from generator.build import pages, site
from generator.cli import main
from generator.load import load_spec
from generator.rules import run_rules

from .bench.synth import write_system
from .conftest import DEMO


def _files(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _fresh(specs: Path, out: Path) -> dict[str, bytes]:
    site.build(specs, out, fresh=True, cache="off")
    return _files(out)


def _spy(monkeypatch: pytest.MonkeyPatch, owner: Any, name: str, label: Callable[..., str | None]) -> list[str]:
    """``label(*args)`` of every later call of ``owner.name`` (None: not recorded); calls go through."""
    seen: list[str] = []
    real = getattr(owner, name)

    def spying(*args: Any, **kwargs: Any) -> Any:
        if (mark := label(*args)) is not None:
            seen.append(mark)
        return real(*args, **kwargs)

    monkeypatch.setattr(owner, name, spying)
    return seen


@pytest.fixture
def specs(tmp_path: Path) -> Path:
    dest = tmp_path / "specs"
    shutil.copytree(DEMO, dest)
    return dest


def _build(specs: Path, out: Path, **kw: Any) -> site.BuildSummary:
    return site.build(specs, out, cache=str(specs.parent / "cache"), **kw)


def _edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def test_an_unchanged_rebuild_touches_nothing(specs: Path, tmp_path: Path) -> None:
    out = tmp_path / "site"
    _build(specs, out)
    stamps = {p: p.stat().st_mtime_ns for p in out.rglob("*") if p.is_file()}
    inode = out.stat().st_ino
    summary = _build(specs, out)
    assert out.stat().st_ino == inode  # the folder was not swapped
    assert {p: p.stat().st_mtime_ns for p in out.rglob("*") if p.is_file()} == stamps
    fresh = analyze(load_spec(specs))
    assert summary.channels == len(fresh.channels)
    assert summary.findings == run_rules(fresh)  # the summary's findings are those of a real check


def test_the_published_folder_holds_only_the_site(specs: Path, tmp_path: Path) -> None:
    out = tmp_path / "site"
    _build(specs, out)
    assert not [p for p in out.rglob("*") if "cache" in p.name or p.suffix == ".pickle"]
    assert (tmp_path / "cache" / "channels").is_dir() and (tmp_path / "cache" / "sites").is_dir()


def test_one_edited_channel_is_the_only_page_rendered_again(specs: Path, tmp_path: Path,
                                                           monkeypatch: pytest.MonkeyPatch) -> None:
    out = tmp_path / "site"
    _build(specs, out)
    before = {p.name: p.stat().st_ino for p in (out / "channels").iterdir()}
    _edit(specs / "channels" / "TQ-SHAFT.md", "+++\n\n", "+++\n\nTorque sensor re-zeroed after the blade change.\n\n")
    parsed = _spy(monkeypatch, load, "parse_toml", lambda text, first=1: "parsed")
    rendered = _spy(monkeypatch, pages, "_channel_page", lambda site, env, r: r.channel.id)
    checked = _spy(monkeypatch, rules, "channel_rule_findings", lambda r, system: r.channel.id)
    _build(specs, out)
    after = {p.name: p.stat().st_ino for p in (out / "channels").iterdir()}
    assert sorted(before) == sorted(after)
    assert {name for name in after if after[name] == before[name]} == set(after) - {"TQ-SHAFT.html"}  # carried
    assert rendered == ["TQ-SHAFT"] and checked == ["TQ-SHAFT"]
    assert parsed == ["parsed"]  # the edited file alone: system.toml's key and every other file's held
    assert "re-zeroed" in (out / "channels" / "TQ-SHAFT.html").read_text(encoding="utf-8")
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


def test_a_band_edit_reaches_its_figures_and_the_json(specs: Path, tmp_path: Path) -> None:
    out = tmp_path / "site"
    _build(specs, out)
    _edit(specs / "channels" / "ACC-MB-01.md", '"5 kHz"', '"6 kHz"')
    _build(specs, out)
    doc = json.loads((out / pages.SPEC_JSON).read_text(encoding="utf-8"))
    acc = next(c for c in doc["channels"] if c["id"] == "ACC-MB-01")
    assert acc["figures"]["band_high_hz"] == 6000.0
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


def test_a_system_change_renders_every_page_again(specs: Path, tmp_path: Path,
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    out = tmp_path / "site"
    _build(specs, out)
    _edit(specs / "system.toml", 'revision = "B"', 'revision = "C"')
    sheets = _spy(monkeypatch, views, "channel_sheet", lambda r: r.channel.id)
    _build(specs, out)
    assert len(set(sheets)) == 17  # every channel's figures and page computed again
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


def test_a_finding_on_another_channel_reaches_a_carried_page(specs: Path, tmp_path: Path) -> None:
    # group-skew spans channels: editing one member changes the findings shown on the others
    out = tmp_path / "site"
    _build(specs, out)
    _edit(specs / "channels" / "STR-BLD-2.md", 'match = "blade-roots"\n', "")
    _build(specs, out)
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


@pytest.mark.parametrize("damage", ["garbage", "empty", "wrong shape", "deleted"])
def test_a_damaged_cache_means_a_full_build(specs: Path, tmp_path: Path, damage: str) -> None:
    out = tmp_path / "site"
    _build(specs, out)
    cache = tmp_path / "cache"
    for path in sorted(cache.rglob("*.json")):
        if damage == "garbage":
            path.write_bytes(b"\x00{not json")
        elif damage == "empty":
            path.write_text("", encoding="utf-8")
        elif damage == "wrong shape":
            doc = json.loads(path.read_text(encoding="utf-8"))
            for entry in doc.get("entries", {}).values():
                entry["channel"]["signal"] = "nonsense"
            if "pages" in doc:
                doc["pages"] = {rel: ["x", 1, 2, 3, 4] for rel in doc["pages"]}
            path.write_text(json.dumps(doc), encoding="utf-8")
    if damage == "deleted":
        shutil.rmtree(cache)
    _build(specs, out)
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


def test_a_page_changed_in_the_site_is_rendered_again(specs: Path, tmp_path: Path) -> None:
    # a page edited (or replaced) in the published folder is not the file the cache vouches for
    out = tmp_path / "site"
    _build(specs, out)
    page = out / "channels" / "ACC-MB-01.html"
    page.write_text(page.read_text(encoding="utf-8").replace("</h1>", " tampered</h1>"), encoding="utf-8")
    _edit(specs / "channels" / "TQ-SHAFT.md", "+++\n\n", "+++\n\nA note.\n\n")  # so the build has work
    _build(specs, out)
    assert "tampered" not in page.read_text(encoding="utf-8")
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


def test_check_uses_the_same_cache(specs: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                   capsys: pytest.CaptureFixture[str]) -> None:
    cache = str(tmp_path / "cache")
    assert main(["check", str(specs), "--format", "json", "--cache", cache]) == 0
    first = capsys.readouterr().out
    parsed = _spy(monkeypatch, load, "parse_toml", lambda text, first=1: "parsed")
    assert main(["check", str(specs), "--format", "json", "--cache", cache]) == 0
    assert capsys.readouterr().out == first
    assert parsed == []  # no file parsed again
    out = tmp_path / "site"
    site.build(specs, out, cache=cache)  # a build after a check takes the channels from it too
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


def test_a_split_book_renders_only_the_section_of_the_edited_channel(specs: Path, tmp_path: Path,
                                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(views, "BOOK_SPLIT", 5)  # the demo's 17 channels stand in for a large system
    out = tmp_path / "site"
    _build(specs, out)
    before = {p.name: p.stat().st_ino for p in (out / "book").iterdir()}
    _edit(specs / "channels" / "TMP-MB-01.md", "+++\n\n", "+++\n\nChecked.\n\n")
    _build(specs, out)
    after = {p.name: p.stat().st_ino for p in (out / "book").iterdir()}
    changed = {name for name in after if after[name] != before.get(name)}
    assert changed == {"conv-adc-sar.html"}
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


def test_worker_processes_write_the_same_site(specs: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(pages, "POOL_MIN_PAGES", 2)
    out = tmp_path / "site"
    _build(specs, out, fresh=True)
    assert _files(out) == _fresh(specs, tmp_path / "fresh")


def test_a_finding_that_names_every_channel_does_not_list_them_on_each_page(tmp_path: Path) -> None:
    # one link over capacity names every channel on it; a channel page says so once, without the list
    # (the findings page has it): the pages stay as large as before, whatever the channel count
    specs = write_system(34, tmp_path / "synth")
    out = tmp_path / "site"
    system = specs / "system.toml"
    system.write_text(system.read_text(encoding="utf-8").replace('capacity = "100 Mbit/s"', 'capacity = "1 Mbit/s"'),
                      encoding="utf-8")
    site.build(specs, out, cache="off")
    page = next((out / "channels").rglob("ACC-GBX-01-0.html")).read_text(encoding="utf-8")
    assert "link-capacity" in page
    assert page.count("ACC-GBX-02-0") == 0  # the other channels of the finding are not listed here
    findings = (out / "findings.html").read_text(encoding="utf-8")
    assert "ACC-GBX-02-0" in findings


def test_synthetic_trees_load_and_check_without_errors(tmp_path: Path) -> None:
    # the benchmark's generator: 40 channels = two full bays and part of a third
    specs = write_system(40, tmp_path / "synth")
    analysis = analyze(load_spec(specs))
    assert len(analysis.channels) == 40
    kinds = {r.channel.kind for r in analysis.channels}
    assert kinds == {"input", "output", "image"}
    assert len(analysis.spec.system.converters) == 9 and len(analysis.spec.system.links) == 3
    errors = [f for f in run_rules(analysis) if f.severity == "error" and not f.waived]
    assert errors == []
