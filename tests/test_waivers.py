"""Waivers: a waived finding stays listed and stops failing; `until` lapses; stale waivers warn."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from generator.analysis import analyze
from generator.cli import EXIT_FINDINGS, EXIT_OK, main
from generator.load import load_spec
from generator.rules import Finding, revision_key, run_rules, waiver_lapsed

from .conftest import DEMO, MINIMAL


def _tree(tmp_path: Path, rate: str | None, waiver: str = "", revision: str = "A") -> Path:
    dest = tmp_path / "specs"
    shutil.copytree(MINIMAL, dest)
    acc = dest / "channels" / "ACC-1.md"
    text = acc.read_text(encoding="utf-8")
    if rate:
        # 16 kS/s cannot carry a 10 kHz band (Nyquist: 2 x 10 kHz = 20 kS/s); 6.144 MHz / 16 kS/s = 384 is no
        # allowed OSR either, so clock-divider fires too
        text = text.replace('converter = "ds"', f'converter = "ds"\nrate = "{rate}"')
    text = text.replace("+++\nA plain", waiver + "+++\nA plain")
    acc.write_text(text, encoding="utf-8")
    sys_toml = dest / "system.toml"
    sys_toml.write_text(sys_toml.read_text().replace('revision = "A"', f'revision = "{revision}"'))
    return dest


def _check(tree: Path) -> list[Finding]:
    return run_rules(analyze(load_spec(tree)))


def _waiver(rule: str, until: str = "") -> str:
    until_line = f'until = "{until}"\n' if until else ""
    return f'\n[[waiver]]\nrule = "{rule}"\nreason = "accepted for the test"\n{until_line}'


def test_waived_finding_stays_listed_and_stops_failing(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    tree = _tree(tmp_path, "16 kS/s", _waiver("below-nyquist") + _waiver("clock-divider"))
    found = {f.rule: f for f in _check(tree)}
    assert found["below-nyquist"].waived and found["below-nyquist"].waiver_reason == "accepted for the test"
    assert found["clock-divider"].waived
    assert "stale-waiver" not in found
    assert main(["check", str(tree)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "waived error [below-nyquist]" in out and "2 waived" in out


def test_until_lapses_at_that_revision(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # revision "B" has reached the waiver's until "B": the waiver lapses and the finding fails again
    tree = _tree(tmp_path, "16 kS/s", _waiver("below-nyquist", "B") + _waiver("clock-divider"), revision="B")
    found = {f.rule: f for f in _check(tree)}
    assert not found["below-nyquist"].waived
    assert "lapsed at revision B" in found["below-nyquist"].message
    assert "stale-waiver" not in found  # a lapsed waiver still matches: it is not stale
    assert main(["check", str(tree)]) == EXIT_FINDINGS
    capsys.readouterr()


def test_until_later_revision_still_holds(tmp_path: Path) -> None:
    tree = _tree(tmp_path, "16 kS/s", _waiver("below-nyquist", "C") + _waiver("clock-divider"), revision="B")
    assert all(f.waived for f in _check(tree) if f.rule == "below-nyquist")


@pytest.mark.parametrize(("until", "revision", "lapsed"), [
    ("C", "B", False), ("B", "B", True), ("B", "C", True), ("10", "9", False), ("10", "10", True),
    ("1.10", "1.9", False), ("rev-2", "REV-3", True), ("", "Z", False), ("C", "", False),
])
def test_revision_order(until: str, revision: str, lapsed: bool) -> None:
    # natural order, case ignored (documented in the README: "Waivers")
    assert waiver_lapsed(until, revision) is lapsed


def test_revision_key_natural() -> None:
    assert sorted(["B10", "B9", "A", "b2"], key=revision_key) == ["A", "b2", "B9", "B10"]


def test_stale_waiver(tmp_path: Path) -> None:
    # nothing is wrong with ACC-1, so a waiver of below-nyquist matches nothing
    tree = _tree(tmp_path, None, _waiver("below-nyquist") + _waiver("no-such-rule"))
    stale = [f for f in _check(tree) if f.rule == "stale-waiver"]
    assert len(stale) == 2 and all(f.severity == "warning" and f.file == "channels/ACC-1.md" for f in stale)
    assert "not a rule" in stale[1].message and "not a rule" not in stale[0].message
    assert stale[0].line > 1


def test_stale_waiver_not_reported_for_a_subset_of_rules(tmp_path: Path) -> None:
    tree = _tree(tmp_path, None, _waiver("below-nyquist"))
    assert run_rules(analyze(load_spec(tree)), only=["below-nyquist"]) == []


def test_demo_has_a_waived_finding_and_a_warning() -> None:
    found = _check(DEMO)
    assert any(f.waived and f.rule == "group-skew" for f in found)
    assert any(not f.waived and f.severity == "warning" and f.rule == "band-edge-droop" for f in found)
    assert not any(f.severity == "error" and not f.waived for f in found)
