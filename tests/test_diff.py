"""`specfold diff`: folders and git revisions of a temporary repository."""

from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import pytest

from generator.cli import EXIT_BAD_INPUT, EXIT_FINDINGS, EXIT_OK, main

from .conftest import MINIMAL


def _git(repo: Path, *args: str) -> str:
    return subprocess.run(["git", *args], cwd=repo, check=True, capture_output=True, text=True).stdout.strip()


@pytest.fixture
def repo(tmp_path: Path) -> Path:
    """A repository with two commits: the minimal tree, then a faster ACC-1, a new channel and a removal."""
    root = tmp_path / "repo"
    shutil.copytree(MINIMAL, root / "specs")
    _git(root, "init", "-q")
    _git(root, "config", "user.email", "t@example.invalid")
    _git(root, "config", "user.name", "test")
    _git(root, "add", "-A")
    _git(root, "commit", "-qm", "base")
    _git(root, "tag", "v1")
    acc = root / "specs" / "channels" / "ACC-1.md"
    # 16 kS/s: below Nyquist for the 10 kHz band (error), and 6.144 MHz / 16 kS/s = OSR 384, not allowed (error)
    acc.write_text(acc.read_text().replace('converter = "ds"', 'converter = "ds"\nrate = "16 kS/s"'))
    new = root / "specs" / "channels" / "ACC-2.md"
    new.write_text(acc.read_text().replace('rate = "16 kS/s"\n', "").replace("Test accelerometer", "Second"))
    (root / "specs" / "channels" / "TEMP-1.md").unlink()
    _git(root, "add", "-A")
    _git(root, "commit", "-qm", "head")
    return root


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_diff_two_revisions_json(repo: Path, capsys: pytest.CaptureFixture[str],
                                 monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(repo)
    code, out, err = _run(capsys, "diff", "v1", "HEAD", "--format", "json")
    assert code == EXIT_FINDINGS, err
    d = json.loads(out)
    assert d["channels"]["added"] == ["ACC-2"] and d["channels"]["removed"] == ["TEMP-1"]
    [acc] = d["channels"]["changed"]
    rate = next(x for x in acc["figures"] if x["key"] == "sample_rate_hz")
    # 48 kS/s -> 16 kS/s: delta -32 kS/s
    assert (rate["old"], rate["new"], rate["delta"]) == (48e3, 16e3, -32e3)
    drate = next(x for x in acc["figures"] if x["key"] == "data_rate_bps")
    # 48 kS/s x 32 = 1.536 Mbit/s -> 16 kS/s x 32 = 512 kbit/s
    assert (drate["old"], drate["new"]) == (1.536e6, 512e3)
    conv = {r["id"]: r for r in d["budgets"]["converters"]}
    sar_load = next(c for c in conv["sar"]["changes"] if c["key"] == "load")
    assert sar_load["new"] == 0.0 and sar_load["old"] == pytest.approx(10 / 250e3)
    link = d["budgets"]["links"][0]
    payload = next(c for c in link["changes"] if c["key"] == "data_rate_bps")
    # base: 1.536 Mbit/s + 160 bit/s; head: 512 kbit/s + 1.536 Mbit/s
    assert payload["old"] == 1_536_160 and payload["new"] == 2_048_000
    # ACC-2 inherits 48 kS/s on the same simultaneous converter: shared-rate as well; and the 10 kHz band
    # top lies above the decimation passband 0.4535 x 16 kS/s = 7.256 kHz (tests/REFERENCES.md R3 [MEM])
    assert {f["rule"] for f in d["findings"]["introduced"]} == {
        "below-nyquist", "clock-divider", "shared-rate", "band-edge-droop"}
    assert d["findings"]["resolved"] == []
    # the head's findings above fail-on "never" do not fail
    assert _run(capsys, "diff", "v1", "HEAD", "--fail-on", "never")[0] == EXIT_OK


def test_diff_reverse_resolves(repo: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(repo)
    code, out, _ = _run(capsys, "diff", "HEAD", "v1")
    assert code == EXIT_OK
    assert "findings: 0 introduced, 4 resolved" in out and "  + TEMP-1" in out and "  - ACC-2" in out


def test_diff_revision_against_working_folder_markdown(repo: Path, capsys: pytest.CaptureFixture[str],
                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(repo)
    code, out, _ = _run(capsys, "diff", "v1:specs", "--format", "markdown")
    assert code == EXIT_FINDINGS
    assert out.startswith("### specfold: `v1:specs` → `specs`")
    assert "| `ACC-1` | `sample_rate_hz` | 48 kHz | 16 kHz | -32 kHz |" in out
    assert "| introduced | error | `below-nyquist` |" in out


def test_diff_two_folders(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    a, b = tmp_path / "a", tmp_path / "b"
    shutil.copytree(MINIMAL, a)
    shutil.copytree(MINIMAL, b)
    code, out, _ = _run(capsys, "diff", str(a), str(b))
    assert code == EXIT_OK and "channels: 0 added, 0 removed, 0 changed" in out
    sys_toml = b / "system.toml"
    sys_toml.write_text(sys_toml.read_text().replace('capacity = "100 Mbit/s"', 'capacity = "1 Mbit/s"'))
    code, out, _ = _run(capsys, "diff", str(a), str(b))
    # 1.536 Mbit/s x 1.08 on 1 Mbit/s: link-capacity error introduced
    assert code == EXIT_FINDINGS and "[link-capacity]" in out and "link net" in out


def test_diff_bad_revision(repo: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(repo)
    code, _, err = _run(capsys, "diff", "no-such-rev")
    assert code == EXIT_BAD_INPUT and "neither a folder nor a git revision" in err
