"""Incremental builds: a rebuild reuses unchanged pages and still equals a fresh build, byte for byte.

The reference for every check is a fresh build (``incremental=False``) of the same tree into
another folder: whatever the cache does, the published site must not differ from it.
Also a smoke test that the benchmark's synthetic trees load and check without errors.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import pickle
import shutil
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from generator import cache, load, render, rules, site
from generator.analysis import analyze
from generator.load import load_spec
from generator.rules import run_rules

from .bench.synth import write_system
from .conftest import DEMO


def _pages(folder: Path) -> dict[str, bytes]:
    """Every published file, without the build cache."""
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file() and ".specfold-cache" not in p.parts}


def _fresh(specs: Path, out: Path) -> dict[str, bytes]:
    site.build(specs, out, incremental=False)
    return _pages(out)


def _spy(monkeypatch: pytest.MonkeyPatch, owner: Any, name: str, label: Callable[..., str | None]) -> list[str]:
    """``label(*args)`` of every later call of ``owner.name`` (None: not recorded); calls go through."""
    seen: list[str] = []
    real = getattr(owner, name)

    def spying(*args: Any) -> Any:
        if (mark := label(*args)) is not None:
            seen.append(mark)
        return real(*args)

    monkeypatch.setattr(owner, name, spying)
    return seen


def test_unchanged_rebuild_touches_nothing(tmp_path: Path) -> None:
    out = tmp_path / "site"
    site.build(DEMO, out)
    stamps = {p: p.stat().st_mtime_ns for p in out.rglob("*") if p.is_file()}
    inode = out.stat().st_ino
    summary = site.build(DEMO, out)
    assert out.stat().st_ino == inode  # the folder was not swapped
    assert {p: p.stat().st_mtime_ns for p in out.rglob("*") if p.is_file()} == stamps
    fresh = analyze(load_spec(DEMO))
    assert summary.channels == len(fresh.channels)
    assert summary.findings == run_rules(fresh)  # the summary's findings are those of a real check


def test_one_edited_channel_is_the_only_page_rendered_again(tmp_path: Path) -> None:
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    before = {p.name: p.stat().st_ino for p in (out / "channels").iterdir()}
    edited = specs / "channels" / "TQ-SHAFT.md"
    edited.write_text(edited.read_text(encoding="utf-8") + "\nTorque sensor re-zeroed after the blade change.\n",
                      encoding="utf-8")
    site.build(specs, out)
    after = {p.name: p.stat().st_ino for p in (out / "channels").iterdir()}
    assert sorted(before) == sorted(after)
    relinked = {name for name in after if after[name] == before[name]}
    assert relinked == set(after) - {"TQ-SHAFT.html"}  # hard links to the previous pages
    assert "re-zeroed" in (out / "channels" / "TQ-SHAFT.html").read_text(encoding="utf-8")
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")


def test_a_system_change_renders_every_page_again(tmp_path: Path) -> None:
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    system = specs / "system.toml"
    system.write_text(system.read_text(encoding="utf-8").replace('revision = "B"', 'revision = "C"'),
                      encoding="utf-8")
    site.build(specs, out)
    page = (out / "channels" / "ACC-MB-01.html").read_text(encoding="utf-8")
    assert "C" in page and _pages(out) == _fresh(specs, tmp_path / "fresh")


def test_a_finding_on_another_channel_reaches_a_reused_page(tmp_path: Path) -> None:
    # group-skew spans channels: editing one member changes the findings shown on the others
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    member = specs / "channels" / "STR-BLD-2.md"
    member.write_text(member.read_text(encoding="utf-8").replace('match = "blade-roots"\n', ""), encoding="utf-8")
    site.build(specs, out)
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")


def test_a_damaged_manifest_means_a_full_build(tmp_path: Path) -> None:
    out = tmp_path / "site"
    site.build(DEMO, out)
    (out / cache.MANIFEST).write_text("{not json", encoding="utf-8")
    site.build(DEMO, out)
    assert cache.read_manifest(out) is not None
    assert _pages(out) == _fresh(DEMO, tmp_path / "fresh")


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


def _split_small_books(monkeypatch: pytest.MonkeyPatch) -> None:
    # the demo's 17 channels stand in for a system large enough to get its book split
    monkeypatch.setattr(render, "BOOK_SPLIT", 5)


def test_a_split_book_reuses_every_section_but_the_edited_one(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    _split_small_books(monkeypatch)
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    sections = sorted(p.name for p in (out / "book").iterdir())
    # one page per converter of the demo, then the kinds with channels that have no converter
    assert sections[:3] == ["conv-adc-ds.html", "conv-adc-sar.html", "conv-dac-out.html"]
    index = (out / "book.html").read_text(encoding="utf-8")
    assert all(f'href="book/{name}"' in index for name in sections)
    sar = (out / "book" / "conv-adc-sar.html").read_text(encoding="utf-8")
    assert 'id="sheet-STR-BLD-1"' in sar and 'id="sheet-TQ-SHAFT"' not in sar
    assert 'href="../book.html"' in sar and 'href="../assets/site.css"' in sar
    before = {p.name: p.stat().st_ino for p in (out / "book").iterdir()}
    edited = specs / "channels" / "STR-BLD-1.md"
    edited.write_text(edited.read_text(encoding="utf-8").replace("bending strain", "strain, re-balanced"),
                      encoding="utf-8")
    site.build(specs, out)
    after = {p.name: p.stat().st_ino for p in (out / "book").iterdir()}
    assert {n for n in after if after[n] != before[n]} == {"conv-adc-sar.html"}
    assert "re-balanced" in (out / "book" / "conv-adc-sar.html").read_text(encoding="utf-8")
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")


def test_a_split_book_follows_system_and_cross_channel_changes(tmp_path: Path,
                                                               monkeypatch: pytest.MonkeyPatch) -> None:
    _split_small_books(monkeypatch)
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    member = specs / "channels" / "STR-BLD-2.md"
    member.write_text(member.read_text(encoding="utf-8").replace('match = "blade-roots"\n', ""), encoding="utf-8")
    site.build(specs, out)
    assert _pages(out) == _fresh(specs, tmp_path / "fresh1")
    system = specs / "system.toml"
    # a converter setting feeds the per-channel analysis of every channel on it: cached results must go
    system.write_text(system.read_text(encoding="utf-8").replace('jitter = "50 ps"', 'jitter = "400 ps"'),
                      encoding="utf-8")
    site.build(specs, out)
    assert _pages(out) == _fresh(specs, tmp_path / "fresh2")


def test_unchanged_files_are_not_parsed_again(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    parsed = _spy(monkeypatch, load, "_load_channel", lambda path, rel, *rest: rel)
    edited = specs / "channels" / "HYD-01.md"
    edited.write_text(edited.read_text(encoding="utf-8") + "\nAccumulator pre-charge checked.\n", encoding="utf-8")
    site.build(specs, out)
    assert parsed == ["channels/HYD-01.md"]
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")
    # a damaged cache file is never unpickled: every file is parsed again and the site is still right
    for shard in (out / cache.CACHE).glob("*.pickle"):
        shard.write_bytes(b"not a pickle")
    parsed.clear()
    edited.write_text(edited.read_text(encoding="utf-8") + "\nChecked again.\n", encoding="utf-8")
    site.build(specs, out)
    assert len(parsed) == 17
    assert _pages(out) == _fresh(specs, tmp_path / "fresh2")


def test_channel_rules_run_again_only_on_the_edited_channel(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # A channel rule sees only its channel's result and system.toml (the contract in rules/__init__),
    # so a rebuild takes the other channels' channel-rule findings from the cache.  Reference: a
    # check from scratch (load, analyze, run_rules with nothing kept).
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    checked = _spy(monkeypatch, rules, "channel_rule_findings", lambda result, system: result.channel.id)
    edited = specs / "channels" / "TACHO-HSS.md"  # a channel with a channel-rule finding of its own
    edited.write_text(edited.read_text(encoding="utf-8") + "\nMount torque checked.\n", encoding="utf-8")
    summary = site.build(specs, out)
    assert checked == ["TACHO-HSS"]
    fresh = run_rules(analyze(load_spec(specs)))
    assert summary.findings == fresh
    # the edited channel's own finding is among them
    assert any(f.channels == ("TACHO-HSS",) and f.rule == "band-edge-droop" for f in fresh)
    assert len({c for f in fresh for c in f.channels}) > 5  # and the kept ones are many channels'
    # system.toml changed: no kept finding holds, every channel is checked again
    checked.clear()
    system = specs / "system.toml"
    system.write_text(system.read_text(encoding="utf-8").replace('revision = "B"', 'revision = "C"'), encoding="utf-8")
    summary = site.build(specs, out)
    assert sorted(checked) == sorted(p.stem for p in (specs / "channels").rglob("*.md"))
    assert summary.findings == run_rules(analyze(load_spec(specs)))
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")


def test_a_rebuild_reads_only_the_files_whose_stat_changed(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # The stat shortcut: size, mtime, ctime and inode as the previous build saw them mean the key it
    # hashed still holds.  RACY_NS = 0 because the copied files are younger than the 2 s margin.
    monkeypatch.setattr(cache, "RACY_NS", 0)
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    read = _spy(monkeypatch, cache, "read_whole", lambda path: Path(path).name if str(path).endswith(".md") else None)
    edited = specs / "channels" / "HYD-01.md"
    edited.write_text(edited.read_text(encoding="utf-8") + "\nAccumulator pre-charge checked.\n", encoding="utf-8")
    site.build(specs, out)
    assert read == ["HYD-01.md"]
    # same size, modification time set back: the change time still moves, so the edit is seen
    before = edited.stat()
    text = edited.read_text(encoding="utf-8")
    edited.write_text(text.replace("pre-charge checked", "pre-charge CHECKED"), encoding="utf-8")
    os.utime(edited, ns=(before.st_atime_ns, before.st_mtime_ns))
    assert edited.stat().st_size == before.st_size and edited.stat().st_mtime_ns == before.st_mtime_ns
    read.clear()
    site.build(specs, out)
    assert read == ["HYD-01.md"]
    assert "pre-charge CHECKED" in (out / "channels" / "HYD-01.html").read_text(encoding="utf-8")
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")


def test_a_file_changed_close_to_the_last_build_is_read_again(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # A write within the file system's clock tick of the previous read can leave every stat field as
    # it was.  Simulated with a stat that never changes: a change time just before the build means
    # the file is read again; one long before it means the recorded key is trusted (so the check
    # above is what finds the edit).
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    edited = specs / "channels" / "HYD-01.md"
    frozen = {"ctime": time.time_ns()}
    monkeypatch.setattr(cache, "_stat", lambda path: (0, 0, frozen["ctime"], 0))
    site.build(specs, out)
    edited.write_text(edited.read_text(encoding="utf-8") + "\nFirst edit.\n", encoding="utf-8")
    site.build(specs, out)
    assert "First edit." in (out / "channels" / "HYD-01.html").read_text(encoding="utf-8")
    frozen["ctime"] = 0  # long ago: trusted from now on, once a build (not a no-op) has recorded it
    other = specs / "channels" / "TQ-SHAFT.md"
    other.write_text(other.read_text(encoding="utf-8") + "\nRe-zeroed.\n", encoding="utf-8")
    site.build(specs, out)
    edited.write_text(edited.read_text(encoding="utf-8") + "\nSecond edit.\n", encoding="utf-8")
    site.build(specs, out)
    assert "Second edit." not in (out / "channels" / "HYD-01.html").read_text(encoding="utf-8")


def test_worker_processes_write_the_same_site(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # The demo's 17 channels stand in for a large system: with a low threshold a build has a side
    # worker (spec.json and the cache shards), and a full build also a pool of page
    # workers (where the machine has two CPUs or more).  Reference: in-process builds.
    monkeypatch.setattr(site, "POOL_MIN_PAGES", 5)
    assert site._forking(17) and not site._forking(4) and site._pool_size(1) == 0
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    monkeypatch.setattr(site, "POOL_MIN_PAGES", 10_000)
    assert _pages(out) == _fresh(specs, tmp_path / "fresh1")
    monkeypatch.setattr(site, "POOL_MIN_PAGES", 5)
    edited = specs / "channels" / "HYD-01.md"
    edited.write_text(edited.read_text(encoding="utf-8") + "\nHydrophone re-seated.\n", encoding="utf-8")
    site.build(specs, out)
    monkeypatch.setattr(site, "POOL_MIN_PAGES", 10_000)
    assert _pages(out) == _fresh(specs, tmp_path / "fresh2")
    # and the cache the worker wrote serves the next rebuild: nothing but the edited file is parsed
    parsed = _spy(monkeypatch, load, "_load_channel", lambda path, rel, *rest: rel)
    edited.write_text(edited.read_text(encoding="utf-8") + "\nAnd again.\n", encoding="utf-8")
    site.build(specs, out)
    assert parsed == ["channels/HYD-01.md"]


def test_one_edited_channel_rewrites_one_cache_shard(tmp_path: Path) -> None:
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    shards = {p.name: p.stat().st_ino for p in (out / cache.CACHE).glob("channels-*.pickle")}
    assert 5 <= len(shards) <= 17  # 17 channels spread over the shards by a hash of their path
    site.build(specs, out, incremental=False)  # a fresh build writes every shard again
    edited = specs / "channels" / "TQ-SHAFT.md"
    edited.write_text(edited.read_text(encoding="utf-8") + "\nBridge re-balanced.\n", encoding="utf-8")
    before = {p.name: p.stat().st_ino for p in (out / cache.CACHE).glob("channels-*.pickle")}
    site.build(specs, out)
    after = {p.name: p.stat().st_ino for p in (out / cache.CACHE).glob("channels-*.pickle")}
    assert sorted(after) == sorted(before)
    changed = {name for name in after if after[name] != before[name]}
    assert changed == {Path(cache.shard_of("channels/TQ-SHAFT.md")).name}


def test_a_rebuild_after_a_note_edit_imports_no_scipy(tmp_path: Path) -> None:
    # scipy takes about a second to import; the cache keeps the filter designs a rebuild needs.
    # Each build runs in a fresh interpreter, as the command line would.
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    script = ("import sys; from generator import site; site.build(sys.argv[1], sys.argv[2]); "
              "print(sorted(m for m in ('scipy.signal', 'scipy.optimize') if m in sys.modules))")

    def build() -> str:
        done = subprocess.run([sys.executable, "-c", script, str(specs), str(out)], capture_output=True,
                              text=True, check=True, cwd=Path(__file__).resolve().parent.parent)
        return done.stdout.strip()

    assert build() == "['scipy.optimize', 'scipy.signal']"  # the first build designs every filter
    edited = specs / "channels" / "ACC-GBX-01.md"
    edited.write_text(edited.read_text(encoding="utf-8") + "\nMount torqued to 12 N m.\n", encoding="utf-8")
    # No scipy.signal: the filter designs all come from the cache.  The
    # demo's flagged channels get proposals on every build, whose searches may use scipy.optimize.
    assert "scipy.signal" not in build()
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")


class _Planted:
    """A pickle payload: unpickling it makes a folder (what a planted cache file could do)."""

    def __init__(self, marker: Path) -> None:
        self.marker = marker

    def __reduce__(self) -> tuple[Any, tuple[str]]:
        return os.mkdir, (str(self.marker),)


def test_a_planted_cache_file_is_never_unpickled(tmp_path: Path) -> None:
    # Unpickling runs code named in the file.  Whoever can write into the output folder (or a CI
    # cache restored from another job) could plant a shard and a manifest naming its SHA-256, or a
    # seal under their own key; only a seal under this user's key opens a cache file.
    # Reference: RFC 2104 HMAC, computed here with the standard library's hmac module.
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    marker = tmp_path / "payload-ran"
    name = cache.shard_of("channels/TQ-SHAFT.md")
    planted = pickle.dumps({"channels/TQ-SHAFT.md": _Planted(marker)})
    manifest = json.loads((out / cache.MANIFEST).read_text(encoding="utf-8"))
    for seal in (hashlib.sha256(planted).hexdigest(),                        # the plain digest
                 hmac.new(b"k" * 32, planted, hashlib.sha256).hexdigest()):  # another key's seal
        (out / name).unlink()
        (out / name).write_bytes(planted)
        manifest["cache"]["shards"][name] = seal
        (out / cache.MANIFEST).write_text(json.dumps(manifest), encoding="utf-8")
        edited = specs / "channels" / "HYD-01.md"
        edited.write_text(edited.read_text(encoding="utf-8") + "\nRe-seated.\n", encoding="utf-8")
        site.build(specs, out)
        assert not marker.exists()
        manifest = json.loads((out / cache.MANIFEST).read_text(encoding="utf-8"))
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")
    # the genuine seal: this very payload, sealed with this user's key, would run (the check can fail)
    key = cache.signing_key()
    assert key is not None and len(key) == cache.KEY_BYTES
    (out / name).unlink()
    (out / name).write_bytes(planted)
    manifest["cache"]["shards"][name] = cache.seal(planted, key)
    (out / cache.MANIFEST).write_text(json.dumps(manifest), encoding="utf-8")
    edited.write_text(edited.read_text(encoding="utf-8") + "\nAgain.\n", encoding="utf-8")
    site.build(specs, out)
    assert marker.exists()


def test_another_users_cache_means_parsing_again(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    key_file = cache.key_folder() / cache.KEY_FILE
    assert key_file.stat().st_mode & 0o777 == 0o600  # readable by its owner only
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "someone-else"))  # a new key: the old seals fail
    parsed = _spy(monkeypatch, load, "_load_channel", lambda path, rel, *rest: rel)
    edited = specs / "channels" / "HYD-01.md"
    edited.write_text(edited.read_text(encoding="utf-8") + "\nRe-seated.\n", encoding="utf-8")
    site.build(specs, out)
    assert len(parsed) == 17
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")


def test_without_a_usable_key_folder_builds_work_and_keep_no_cache(tmp_path: Path,
                                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    blocked = tmp_path / "not-a-folder"
    blocked.write_text("a file where the key folder would go", encoding="utf-8")
    monkeypatch.setenv("XDG_CACHE_HOME", str(blocked))
    assert cache.signing_key() is None
    specs = tmp_path / "specs"
    shutil.copytree(DEMO, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    assert sorted(p.name for p in (out / cache.CACHE).iterdir()) == ["manifest.json"]
    inode = out.stat().st_ino
    site.build(specs, out)  # the manifest alone still makes an unchanged rebuild a no-op
    assert out.stat().st_ino == inode
    edited = specs / "channels" / "HYD-01.md"
    edited.write_text(edited.read_text(encoding="utf-8") + "\nRe-seated.\n", encoding="utf-8")
    site.build(specs, out)
    assert _pages(out) == _fresh(specs, tmp_path / "fresh")
