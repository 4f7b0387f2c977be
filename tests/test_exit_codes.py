"""Exit codes a merge gate can tell apart: 0 clean, 1 findings, 2 bad input or an unusable file or
folder, 3 a bug in specfold, whatever ``--fail-on`` says."""

from __future__ import annotations

import errno
import os
import subprocess
import sys
from pathlib import Path

import pytest

from generator import cli
from generator.build import pipeline
from generator.cli import EXIT_BAD_INPUT, EXIT_FINDINGS, EXIT_INTERNAL, EXIT_OK, main

from .conftest import DEMO, MINIMAL, ROOT


def _broken(*_: object, **__: object) -> None:
    raise ZeroDivisionError("float division by zero")


@pytest.mark.parametrize("fail_on", ["error", "never"])
def test_a_bug_exits_3_with_a_short_message(fail_on: str, monkeypatch: pytest.MonkeyPatch,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setattr(pipeline, "run_rules", _broken)
    code = main(["check", str(MINIMAL), "--fail-on", fail_on])
    out, err = capsys.readouterr()
    assert code == EXIT_INTERNAL and EXIT_INTERNAL not in (EXIT_OK, EXIT_FINDINGS, EXIT_BAD_INPUT)
    assert out == ""
    assert err.startswith("specfold: internal error: ZeroDivisionError: float division by zero "
                          "(generator/build/pipeline.py:")
    assert "a bug in specfold, not a problem in your specs" in err and "--traceback" in err
    assert "Traceback" not in err and len(err.splitlines()) == 2


def test_traceback_flag_and_variable_show_where(monkeypatch: pytest.MonkeyPatch,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setattr(pipeline, "run_rules", _broken)
    for argv in (["--traceback", "check", str(MINIMAL)], ["check", str(MINIMAL), "--traceback"]):
        assert main(argv) == EXIT_INTERNAL
        err = capsys.readouterr().err
        assert "Traceback (most recent call last)" in err and "ZeroDivisionError" in err, argv
    monkeypatch.setenv(cli.TRACEBACK_ENV, "1")
    assert main(["check", str(MINIMAL)]) == EXIT_INTERNAL
    assert "Traceback (most recent call last)" in capsys.readouterr().err


def test_a_bug_in_a_real_process_exits_3(tmp_path: Path) -> None:
    # the installed entry point, not only main(): a bug planted through sitecustomize
    (tmp_path / "sitecustomize.py").write_text(
        "import generator.build.pipeline as c\n"
        "def broken(*a, **k):\n    raise KeyError('planted')\n"
        "c.run_rules = broken\n", encoding="utf-8")
    env = {**os.environ, "PYTHONPATH": f"{tmp_path}{os.pathsep}{ROOT}"}
    proc = subprocess.run([sys.executable, "-m", "generator", "check", str(DEMO), "--fail-on", "never"],
                          capture_output=True, text=True, env=env, timeout=600)
    assert proc.returncode == EXIT_INTERNAL, proc.stderr
    assert "internal error: KeyError: 'planted'" in proc.stderr and "Traceback" not in proc.stderr


def test_findings_and_bad_input_keep_their_codes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["check", str(DEMO)]) == EXIT_OK
    assert main(["check", str(tmp_path / "nowhere")]) == EXIT_BAD_INPUT
    assert "is not a folder of specs" in capsys.readouterr().err


@pytest.mark.parametrize("argv", [
    ["check", "{long}"],
    ["export", "{long}"],
    ["build", str(MINIMAL), "-o", "{long}"],
    ["build", str(MINIMAL), "-o", "{tmp}/{long}"],
    ["new", "{long}", "--specs", str(MINIMAL)],
    ["diff", "{long}", str(MINIMAL)],
    ["import", "{tmp}/{long}.csv", "--specs", str(MINIMAL)],
], ids=["check", "export", "build-output", "build-output-in-folder", "new-id", "diff-base", "import-table"])
def test_a_300_character_argument_is_one_sentence(argv: list[str], tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    long = "x" * 300  # past the 255-byte limit of one name
    args = [a.format(long=long, tmp=tmp_path) for a in argv]
    code = main(args)
    err = capsys.readouterr().err
    assert code == EXIT_BAD_INPUT, err
    assert err.startswith("specfold: ") and "Traceback" not in err and len(err.strip().splitlines()) == 1, err


def test_an_unreadable_folder_is_bad_input_not_a_bug(monkeypatch: pytest.MonkeyPatch,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    def denied(*_: object, **__: object) -> None:
        raise PermissionError(errno.EACCES, "Permission denied", str(MINIMAL))

    monkeypatch.setattr(pipeline, "run_rules", denied)
    assert main(["check", str(MINIMAL)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert err == f"specfold: {MINIMAL}: permission denied (read-only, or not yours)\n"


def test_an_unexpected_os_error_is_a_bug(monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    def bad_descriptor(*_: object, **__: object) -> None:
        raise OSError(errno.EBADF, "Bad file descriptor")

    monkeypatch.setattr(pipeline, "run_rules", bad_descriptor)
    assert main(["check", str(MINIMAL)]) == EXIT_INTERNAL
    assert "internal error: OSError" in capsys.readouterr().err
