"""Command line: exit codes, the JSON contract, reports of bad input."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from generator.cli import EXIT_BAD_INPUT, EXIT_FINDINGS, EXIT_OK, main

from .conftest import DATA, DEMO, MINIMAL, overlay


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_demo_checks_clean(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, err = run(capsys, "check", str(DEMO))
    assert code == EXIT_OK, out + err
    assert "channels checked" in out


def test_json_contract_shape(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run(capsys, "check", str(DEMO), "--format", "json")
    assert code == EXIT_OK
    doc = json.loads(out)
    assert doc["format"] == 1
    assert set(doc) == {"format", "system", "channels", "findings"}
    assert {"name", "revision", "totals", "links", "converters", "stores"} <= set(doc["system"])
    files = sorted(p.relative_to(DEMO).as_posix() for p in (DEMO / "channels").rglob("*.md"))
    assert sorted(c["file"] for c in doc["channels"]) == files
    for ch in doc["channels"]:
        assert {"id", "kind", "file", "status", "figures"} <= set(ch)
        assert ch["status"] in ("ok", "warning", "error")
    for f in doc["findings"]:
        assert {"rule", "severity", "channels", "file", "line", "message", "waived"} <= set(f)


def test_four_problems_reported_together_exit_2(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    tree = overlay(DATA / "bad" / "four-at-once", tmp_path / "specs")
    code, out, err = run(capsys, "check", str(tree))
    assert code == EXIT_BAD_INPUT
    assert out == ""
    for needle in ("A-SYNTAX.md:10:", "B-MISSPELT.md:7:", "C-VOLTS.md:11:", "D-DANGLING.md:10:"):
        assert needle in err
    # the offending line is echoed under each message
    assert 'converter = "dss"' in err and 'bnad = ["2 Hz", "10 kHz"]' in err
    assert "Traceback" not in err


def _below_nyquist_tree(tmp_path: Path) -> Path:
    dest = tmp_path / "specs"
    shutil.copytree(MINIMAL, dest)
    acc = dest / "channels" / "ACC-1.md"
    acc.write_text(acc.read_text().replace('converter = "ds"', 'converter = "ds"\nrate = "16 kS/s"'))
    return dest


def test_findings_exit_1_and_fail_on_never(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    tree = _below_nyquist_tree(tmp_path)
    code, out, _ = run(capsys, "check", str(tree))
    assert code == EXIT_FINDINGS
    assert "[below-nyquist]" in out and "channels/ACC-1.md:" in out
    code, _, _ = run(capsys, "check", str(tree), "--fail-on", "never")
    assert code == EXIT_OK


def test_missing_folder_is_bad_input(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    code, _, err = run(capsys, "check", str(tmp_path / "nowhere"))
    assert code == EXIT_BAD_INPUT and "is not a folder of specs" in err


def test_usage_error_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as info:
        main(["check", "--format", "yaml"])
    assert info.value.code == EXIT_BAD_INPUT


def test_rules_lists_and_explains(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run(capsys, "rules")
    assert code == EXIT_OK and "below-nyquist" in out
    code, out, _ = run(capsys, "rules", "below-nyquist")
    assert code == EXIT_OK and "fs >= 2 f_high" in out
    code, _, err = run(capsys, "rules", "no-such-rule")
    assert code == EXIT_BAD_INPUT and "no rule" in err


def test_python_dash_m_and_console_script_agree(tmp_path: Path) -> None:
    tree = overlay(DATA / "bad" / "dangling-converter", tmp_path / "specs")
    proc = subprocess.run([sys.executable, "-m", "generator", "check", str(tree)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == EXIT_BAD_INPUT
    assert "converter 'dss' is not defined" in proc.stderr and "Traceback" not in proc.stderr
