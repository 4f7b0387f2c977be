"""Reports reach a console or pipe that cannot encode µ, ± or √ without a traceback.

Before the fix, ``check`` on such a stream (PYTHONIOENCODING=ascii, or a legacy code page)
died with UnicodeEncodeError as soon as a message held "µHz".
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from .conftest import MINIMAL, ROOT


@pytest.fixture
def micro_tree(tmp_path: Path) -> Path:
    # a rate of 2 µHz for a band to 10 kHz: the below-Nyquist message shows "2 µHz" and "1 µHz"
    tree = tmp_path / "specs"
    shutil.copytree(MINIMAL, tree)
    acc = tree / "channels" / "ACC-1.md"
    text = acc.read_text(encoding="utf-8")
    acc.write_text(text.replace('converter = "ds"', 'rate = "2 µHz"\nbits = 16\nfull_scale = "±10 V"'),
                   encoding="utf-8")
    return tree


def _run(*argv: str) -> subprocess.CompletedProcess[bytes]:
    env = {**os.environ, "PYTHONIOENCODING": "ascii", "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "generator", *argv], cwd=ROOT, env=env, capture_output=True,
                          timeout=60)


def test_text_report_on_an_ascii_stream(micro_tree: Path) -> None:
    proc = _run("check", str(micro_tree))
    assert b"Traceback" not in proc.stderr, proc.stderr.decode(errors="replace")
    assert proc.returncode == 1
    proc.stdout.decode("ascii")  # nothing but ASCII reached the stream
    assert b"rate 2 \\xb5Hz" in proc.stdout


def test_json_report_on_an_ascii_stream_stays_valid_json(micro_tree: Path) -> None:
    proc = _run("check", str(micro_tree), "--format", "json")
    assert b"Traceback" not in proc.stderr
    assert proc.returncode == 1
    doc = json.loads(proc.stdout.decode("ascii"))
    assert any("2 µHz" in f["message"] for f in doc["findings"])


def test_rules_list_on_an_ascii_stream() -> None:
    proc = _run("rules")
    assert proc.returncode == 0 and b"Traceback" not in proc.stderr
    assert b"below-nyquist" in proc.stdout
