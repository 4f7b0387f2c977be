"""Loader: golden bad-input cases as files, and the good trees load.

Each folder under tests/data/bad is laid over tests/data/minimal; its expected.txt lists
every problem the loader must report, one per line, as ``FILE:LINE: message fragment``
(or ``FILE: fragment`` where no line applies).  The loader must report exactly these.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from generator.errors import SpecErrors
from generator.load import channel_files, load_spec, locate_keys, split_header

from .conftest import DATA, DEMO, MINIMAL, overlay

BAD_CASES = sorted(p for p in (DATA / "bad").iterdir() if p.is_dir())
EXPECTED = re.compile(r"^(?P<file>[^:]+?)(?::(?P<line>\d+))?: (?P<fragment>.+)$")


@pytest.mark.parametrize("case", BAD_CASES, ids=[p.name for p in BAD_CASES])
def test_bad_case_reports_every_expected_problem(case: Path, tmp_path: Path) -> None:
    tree = overlay(case, tmp_path / "specs")
    with pytest.raises(SpecErrors) as info:
        load_spec(tree)
    errors = info.value.errors
    wanted = [EXPECTED.match(line) for line in (case / "expected.txt").read_text().splitlines() if line]
    assert all(wanted), "malformed expected.txt"
    formatted = [e.format() for e in errors]
    for m in wanted:
        assert m is not None
        hits = [
            e for e in errors
            if e.file == m["file"] and (m["line"] is None or e.line == int(m["line"])) and m["fragment"] in e.message
        ]
        assert hits, f"missing {m.group(0)!r}; got:\n" + "\n".join(formatted)
    assert len(errors) == len(wanted), "unexpected extra problems:\n" + "\n".join(formatted)
    for e in errors:
        if e.column:
            # every error pointing at a place in a line shows that line
            assert e.source_line is not None and e.format().count("\n") >= 1


def test_minimal_tree_loads_with_inherited_values() -> None:
    spec = load_spec(MINIMAL)
    acc = spec.channel("ACC-1")
    # inherited from converter "ds": 48 kS/s, 24 bits, ±10 V, 32-bit containers
    assert acc.conversion.rate == 48_000
    assert acc.conversion.bits == 24
    assert acc.conversion.full_scale is not None and acc.conversion.full_scale.width == 20.0
    assert acc.conversion.container_bits == 32
    assert acc.conversion.stated == frozenset({"converter"})
    # 100 mV/g with g = 9.80665 m/s² (standard gravity, CGPM 1901)
    assert acc.sensor.sensitivity == pytest.approx(0.1 / 9.80665, rel=1e-12)
    assert acc.signal.peak == pytest.approx(20 * 9.80665, rel=1e-12)
    temp = spec.channel("TEMP-1")
    # a 16-bit sample packs into 2 whole bytes when the converter names no container (common practice)
    assert temp.conversion.container_bits == 16
    assert temp.filter is not None and temp.filter.family == "butterworth" and temp.filter.corner == 3.0


def test_demo_loads_without_problems() -> None:
    spec = load_spec(DEMO)
    assert len(spec.channels) >= 14
    kinds = {ch.kind for ch in spec.channels}
    assert kinds == {"input", "output", "image"}
    archs = {c.architecture for c in spec.system.converters.values()}
    assert {"delta-sigma", "sar"} <= archs
    assert len(spec.system.links) == 1 and len(spec.system.stores) == 1 and spec.system.clocks


def test_split_header_keeps_body_and_line_numbers() -> None:
    first, header, body = split_header("\n+++\na = 1\n+++\n# Notes\n")
    assert (first, header, body) == (3, "a = 1", "# Notes")


def test_locate_keys_finds_tables_arrays_and_dotted_keys() -> None:
    text = 'title = "x"\n[signal]\nband = ["1 Hz", "2 Hz"]\n[[interference]]\nfrequency = "1 kHz"\n' \
           '[[interference]]\nlevel = "-3 dBFS"\ns = """\nfake = 1\n"""\nsignal.peak = "1 V"\n'
    pos = locate_keys(text, first_line=10)
    assert pos["title"] == (10, 1)
    assert pos["signal.band"] == (12, 1)
    assert pos["interference.0.frequency"] == (14, 1)
    assert pos["interference.1.level"] == (16, 1)
    assert "interference.1.fake" not in pos  # inside a multi-line string
    assert pos["interference.1.signal.peak"] == (20, 1)


def test_channel_files_come_in_path_order_with_links_listed_not_followed(tmp_path: Path) -> None:
    # Reference: pathlib's own ordering (sorted() on the paths), which the listing must keep while
    # comparing plain strings; folders whose names sort differently as strings and as parts
    # ("a-b" < "a/" as text, "a" < "a-b" as parts).  Links are listed (the loader refuses each by
    # name) but never followed: the folder behind a linked folder is not walked.
    channels = tmp_path / "channels"
    for rel in ("a-b/X.md", "a/X.md", "a/b/Y.md", "A.md", "b.md", "a.b/Z.md", "notes.txt"):
        (channels / rel).parent.mkdir(parents=True, exist_ok=True)
        (channels / rel).write_text("x", encoding="utf-8")
    (channels / "linked.md").symlink_to(channels / "b.md")
    (channels / "linked-folder").symlink_to(channels / "a", target_is_directory=True)
    listed = channel_files(tmp_path)
    expected = sorted([*channels.rglob("*.md"), channels / "linked-folder"])
    assert listed == expected and len(listed) == 8
