"""Merge-gate formats: SARIF 2.1.0 (checked against the standard's required properties) and JUnit XML."""

from __future__ import annotations

import json
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import pytest

from generator.cli import EXIT_FINDINGS, EXIT_OK, main
from generator.rules import all_rules

from .conftest import DEMO, MINIMAL

# Required properties, enumerations and allowed property names of the SARIF 2.1.0 objects we write,
# transcribed from the OASIS SARIF 2.1.0 JSON schema (sarif-schema-2.1.0.json, errata01).
SARIF = {
    "log": ({"version", "runs"}, {"$schema", "version", "runs", "inlineExternalProperties", "properties"}),
    "run": ({"tool"}, None),
    "tool": ({"driver"}, {"driver", "extensions", "properties"}),
    "toolComponent": ({"name"}, None),
    "reportingDescriptor": ({"id"}, None),
    "multiformatMessageString": ({"text"}, {"text", "markdown", "properties"}),
    "reportingConfiguration": (set(), {"enabled", "level", "rank", "parameters", "properties"}),
    "result": ({"message"}, None),
    "message": (set(), {"text", "markdown", "id", "arguments", "properties"}),
    "location": (set(), None),
    "physicalLocation": (set(), {"address", "artifactLocation", "region", "contextRegion", "properties"}),
    "artifactLocation": (set(), {"uri", "uriBaseId", "index", "description", "properties"}),
    "region": (set(), None),
    "suppression": ({"kind"}, {"guid", "kind", "status", "justification", "location", "properties"}),
}
LEVELS = {"none", "note", "warning", "error"}


def _obj(kind: str, value: dict[str, Any]) -> None:
    required, allowed = SARIF[kind]
    assert isinstance(value, dict), kind
    assert required <= set(value), f"{kind} lacks {required - set(value)}"
    if allowed is not None:
        assert set(value) <= allowed, f"{kind} has unknown {set(value) - allowed}"


def validate_sarif(log: dict[str, Any]) -> None:
    _obj("log", log)
    assert log["version"] == "2.1.0"
    for run in log["runs"]:
        _obj("run", run)
        _obj("tool", run["tool"])
        _obj("toolComponent", run["tool"]["driver"])
        for rule in run["tool"]["driver"].get("rules", []):
            _obj("reportingDescriptor", rule)
            for key in ("shortDescription", "fullDescription"):
                _obj("multiformatMessageString", rule[key])
            _obj("reportingConfiguration", rule["defaultConfiguration"])
            assert rule["defaultConfiguration"]["level"] in LEVELS
        for result in run.get("results", []):
            _obj("result", result)
            _obj("message", result["message"])
            assert "text" in result["message"] or "id" in result["message"]  # anyOf in the schema
            assert result["level"] in LEVELS
            for loc in result["locations"]:
                _obj("location", loc)
                _obj("physicalLocation", loc["physicalLocation"])
                _obj("artifactLocation", loc["physicalLocation"]["artifactLocation"])
                region = loc["physicalLocation"]["region"]
                _obj("region", region)
                assert isinstance(region["startLine"], int) and region["startLine"] >= 1  # schema minimum 1
            for sup in result.get("suppressions", []):
                _obj("suppression", sup)
                assert sup["kind"] in {"inSource", "external"}


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str]:
    code = main(list(argv))
    return code, capsys.readouterr().out


def test_sarif_of_the_demo(capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(DEMO.parent)
    code, out = _run(capsys, "check", "specs", "--format", "sarif")
    assert code == EXIT_OK
    log = json.loads(out)
    validate_sarif(log)
    driver = log["runs"][0]["tool"]["driver"]
    assert driver["name"] == "specfold"
    assert [r["id"] for r in driver["rules"]] == [r.id for r in all_rules()]
    results = log["runs"][0]["results"]
    waived = [r for r in results if "suppressions" in r]
    assert any(r["suppressions"][0]["justification"].startswith("The two bridges") for r in waived)
    uris = {r["locations"][0]["physicalLocation"]["artifactLocation"]["uri"] for r in results}
    assert "specs/channels/TACHO-HSS.md" in uris and "specs/system.toml" in uris
    for r in results:  # the uri resolves to a real file from the repository root
        assert (DEMO.parent / r["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]).is_file()


def test_validator_rejects_a_broken_log() -> None:
    # the check above must be able to fail: a result without a message, a bad level, startLine 0
    good = {"version": "2.1.0", "runs": [{"tool": {"driver": {"name": "x"}}, "results": [
        {"message": {"text": "m"}, "level": "error", "locations": [{"physicalLocation": {
            "artifactLocation": {"uri": "a"}, "region": {"startLine": 1}}}]}]}]}
    validate_sarif(good)
    for breakage in ({"message": None}, {"level": "fatal"}):
        bad = json.loads(json.dumps(good))
        result = bad["runs"][0]["results"][0]
        for k, v in breakage.items():
            if v is None:
                del result[k]
            else:
                result[k] = v
        with pytest.raises(AssertionError):
            validate_sarif(bad)
    bad = json.loads(json.dumps(good))
    bad["runs"][0]["results"][0]["locations"][0]["physicalLocation"]["region"]["startLine"] = 0
    with pytest.raises(AssertionError):
        validate_sarif(bad)


def _failing_tree(tmp_path: Path) -> Path:
    dest = tmp_path / "specs"
    shutil.copytree(MINIMAL, dest)
    acc = dest / "channels" / "ACC-1.md"
    # 16 kS/s under a 10 kHz band: below-nyquist (error) and clock-divider (error, 6.144 MHz / 16 kS/s = 384);
    # the clock-divider finding is waived
    waiver = '\n[[waiver]]\nrule = "clock-divider"\nreason = "bench only"\n'
    acc.write_text(acc.read_text().replace('converter = "ds"', 'converter = "ds"\nrate = "16 kS/s"')
                   .replace("+++\nA plain", waiver + "+++\nA plain"))
    return dest


def test_junit_structure(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    tree = _failing_tree(tmp_path)
    code, out = _run(capsys, "check", str(tree), "--format", "junit")
    assert code == EXIT_FINDINGS
    root = ET.fromstring(out)
    assert root.tag == "testsuites"
    suite = root.find("testsuite")
    assert suite is not None
    cases = suite.findall("testcase")
    n_rules = len(all_rules())
    assert len(cases) == 2 * n_rules == int(suite.get("tests", "0"))  # 2 channels x every rule
    failed = [c for c in cases if c.find("failure") is not None]
    skipped = [c for c in cases if c.find("skipped") is not None]
    assert [c.get("name") for c in failed] == ["ACC-1 below-nyquist"]
    assert [c.get("name") for c in skipped] == ["ACC-1 clock-divider"]
    assert suite.get("failures") == "1" and suite.get("skipped") == "1"
    skip = skipped[0].find("skipped")
    assert skip is not None and "bench only" in (skip.get("message") or "")
    assert failed[0].get("classname", "").endswith("channels/ACC-1.md")


def test_junit_fail_on_never_passes_everything(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    tree = _failing_tree(tmp_path)
    code, out = _run(capsys, "check", str(tree), "--format", "junit", "--fail-on", "never")
    assert code == EXIT_OK
    root = ET.fromstring(out)
    assert root.get("failures") == "0"
    # the finding is still reported, in the case's output
    assert any("below-nyquist" in (el.text or "") for el in root.iter("system-out"))


def test_json_text_is_the_document_one_item_per_line() -> None:
    # Reference: the standard library's JSON parser reading back what to_json wrote.
    from generator.analysis import analyze
    from generator.load import load_spec
    from generator.report import spec_document, to_json
    from generator.rules import run_rules

    analysis = analyze(load_spec(DEMO))
    findings = run_rules(analysis)
    text = to_json(analysis, findings)
    assert json.loads(text) == spec_document(analysis, findings)
    assert json.loads(to_json(analysis, findings, ascii_only=True)) == spec_document(analysis, findings)
    assert to_json(analysis, findings, ascii_only=True).isascii()
    lines = text.splitlines()
    for r in analysis.channels:  # one channel, one line: a change to it is one line of a diff
        mine = [line for line in lines if line.startswith(f'    {{"id": "{r.channel.id}", ')]
        assert len(mine) == 1 and json.loads(mine[0].rstrip(","))["figures"] == json.loads(
            json.dumps(spec_document(analysis, [])["channels"][analysis.channels.index(r)]["figures"]))
    assert sum(1 for line in lines if line.startswith('    {"rule": ')) == len(findings)
    # a memo of figures text (the build cache) changes nothing, and a stale entry is written as given
    memo: dict[str, str] = {}
    assert to_json(analysis, findings, memo=memo) == text and len(memo) == len(analysis.channels)
    assert to_json(analysis, findings, memo=memo) == text
    memo[analysis.channels[0].channel.id] = '{"marker": 1}'
    assert '"figures": {"marker": 1}' in to_json(analysis, findings, memo=memo)
