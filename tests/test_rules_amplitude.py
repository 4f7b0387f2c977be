"""The amplitude rules: each fires on its failing fixture and stays silent on its passing one.

Each folder under tests/data/rules/amplitude is laid over tests/data/minimal.  A folder named
``<rule>-fail...`` holds an ``expected.txt`` with one ``FILE:LINE: message fragment`` per finding
of that rule; a ``<rule>-pass...`` folder must give no finding of it.  The numbers in the messages
were worked by hand from the fixture values (see the comments in test_amplitude.py for the
formulas and their sources, [MT-001], [MT-003], [MT-007]).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from generator.analysis import analyze
from generator.load import load_spec
from generator.rules import all_rules, run_rules, tagged

from .conftest import DATA, DEMO, MINIMAL, overlay

CASES = DATA / "rules" / "amplitude"
NAME = re.compile(r"^(?P<rule>[a-z-]+?)-(?P<outcome>fail|pass)(?:-[a-z0-9-]+)?$")
EXPECTED = re.compile(r"^(?P<file>[^:]+):(?P<line>\d+): (?P<text>.+)$")
AMPLITUDE_RULES = tagged("amplitude")  # the registry says which rules are about amplitude


def _cases(outcome: str) -> list[Path]:
    found = []
    for case in sorted(CASES.iterdir()):
        match = NAME.match(case.name)
        assert match, f"fixture folder {case.name} is not named <rule>-fail or <rule>-pass"
        if match["outcome"] == outcome:
            found.append(case)
    return found


def _rule(case: Path) -> str:
    match = NAME.match(case.name)
    assert match
    return match["rule"]


def _findings(case: Path, tmp_path: Path, rule: str) -> list[tuple[str, int, str]]:
    tree = overlay(case, tmp_path / "specs")
    findings = run_rules(analyze(load_spec(tree)), only=[rule])
    return [(f.file, f.line, f.message) for f in findings]


def test_every_amplitude_rule_is_registered_with_both_fixtures() -> None:
    ids = {r.id for r in all_rules()}
    assert AMPLITUDE_RULES, "no rule is tagged amplitude"
    # every fixture folder is about a rule the registry tags amplitude
    assert {_rule(c) for c in _cases("fail") + _cases("pass")} <= set(AMPLITUDE_RULES)
    for rule in AMPLITUDE_RULES:
        assert rule in ids
        assert any(_rule(c) == rule for c in _cases("fail")), rule
        assert any(_rule(c) == rule for c in _cases("pass")), rule


@pytest.mark.parametrize("case", _cases("fail"), ids=lambda p: p.name)
def test_rule_fires_on_failing_fixture(case: Path, tmp_path: Path) -> None:
    rule = _rule(case)
    got = _findings(case, tmp_path, rule)
    wanted = [EXPECTED.match(line) for line in (case / "expected.txt").read_text().splitlines() if line]
    assert wanted and all(wanted), "malformed expected.txt"
    assert len(got) == len(wanted), got
    for m in wanted:
        assert m is not None
        assert any(
            file == m["file"] and line == int(m["line"]) and m["text"] in message for file, line, message in got
        ), (m.group(0), got)


@pytest.mark.parametrize("case", _cases("pass"), ids=lambda p: p.name)
def test_rule_is_silent_on_passing_fixture(case: Path, tmp_path: Path) -> None:
    rule = _rule(case)
    assert _findings(case, tmp_path, rule) == []


def test_minimal_tree_has_no_amplitude_findings() -> None:
    findings = run_rules(analyze(load_spec(MINIMAL)), only=AMPLITUDE_RULES)
    assert findings == []


def test_demo_amplitude_findings_are_the_expected_ones() -> None:
    # the thermocouple channels use under a tenth of full scale (0.95 V of ±10 V), one of them waived
    findings = run_rules(analyze(load_spec(DEMO)), only=AMPLITUDE_RULES)
    got = sorted((f.rule, f.channels, f.waived) for f in findings)
    assert got == [("range-underused", ("TMP-GBX-01",), False), ("range-underused", ("TMP-MB-01",), True)]
