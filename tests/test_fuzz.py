"""The fuzz corpus: thousands of broken copies of the demo files never break the tool.

Every mutant from tests/fuzz.py (seeded, so every run sees the same bytes) is written into a
spec tree and checked in process with ``generator.cli.main``: the run must end with exit 0, 1
or 2, print no traceback and raise nothing.  A sample goes through the real command line too.
Files the corpus once broke the tool with are kept under tests/data/fuzz-regressions and checked
on every run.

The boundary-value trials (tests/fuzz.py, driven from generator/schema.py) go through every command
that computes: a fixed sample on every run, all of them under the ``slow`` marker (``.ci/run``).
No test here times anything: how long a run takes depends on the machine, so ``python -m
tests.fuzz`` reports the slowest run instead.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from generator.cli import main

from . import fuzz
from .conftest import DATA, DEMO, ROOT

CORPUS = fuzz.corpus()
SUBPROCESS_SAMPLE = 30
QUICK_SHARE = 8
"""The quick run checks every eighth mutant of each file (a fixed sample); the ``slow`` run all of them."""


@pytest.fixture(autouse=True)
def _no_cache(monkeypatch: pytest.MonkeyPatch) -> None:
    # these runs are about never crashing; the build cache has tests of its own (test_incremental)
    monkeypatch.setenv("SPECFOLD_CACHE", "off")


def test_corpus_is_large_and_repeatable() -> None:
    total = sum(len(group) for group in CORPUS.values())
    assert total >= 2000
    # the same seed gives the same bytes; another seed gives other bytes
    again = fuzz.corpus()
    assert all(a.data == b.data for t in CORPUS for a, b in zip(CORPUS[t], again[t], strict=True))
    other = fuzz.corpus(seed=fuzz.SEED + 1)
    assert any(a.data != b.data for t in CORPUS for a, b in zip(CORPUS[t], other[t], strict=True))
    # every mutation kind is exercised
    used = {step for group in CORPUS.values() for m in group for step in m.name.split(":")[1].split("+")}
    assert used == {op.__name__ for op in fuzz.OPERATORS}


@pytest.mark.parametrize("share", [pytest.param(QUICK_SHARE, id="sample"),
                                   pytest.param(1, id="all", marks=pytest.mark.slow)])
@pytest.mark.parametrize("target", list(CORPUS), ids=list(CORPUS))
def test_mutants_of_one_file(target: str, share: int, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    tree = fuzz.base_tree(target, tmp_path / "specs")

    def check(argv: list[str]) -> tuple[int | None, str, str, str | None]:
        crash = None
        code: int | None = None
        try:
            code = main(argv)
        except SystemExit as exc:  # argparse; not expected with these arguments
            code = exc.code if isinstance(exc.code, int) else None
        except Exception as exc:  # the corpus exists to find these
            crash = repr(exc)[:300]
        out, err = capsys.readouterr()
        return code, out, err, crash

    failures = []
    codes = set()
    for outcome in fuzz.run_mutants(CORPUS[target][::share], tree, check):
        codes.add(outcome.code)
        problems = outcome.problems()
        if problems:
            failures.append(f"{outcome.mutant.name}: {'; '.join(problems)}")
    assert not failures, f"{len(failures)} bad runs (reproduce with python -m tests.fuzz):\n" + "\n".join(failures)
    # the corpus reaches both the loader's refusals and the checker itself (a sample may miss one)
    assert 2 in codes and (share > 1 or codes & {0, 1})


def _sample(n: int) -> list[fuzz.Mutant]:
    flat = [m for group in CORPUS.values() for m in group]
    step = len(flat) // n
    return flat[::step][:n]


@pytest.mark.parametrize("count", [pytest.param(4, id="quick"), pytest.param(SUBPROCESS_SAMPLE, id="more",
                                                                          marks=pytest.mark.slow)])
def test_mutants_through_the_real_command_line(count: int, tmp_path: Path) -> None:
    # a subprocess costs the imports each time, so only a sample goes this way
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    failures = []
    seen_codes = set()
    for i, mutant in enumerate(_sample(count)):
        tree = fuzz.base_tree(mutant.target, tmp_path / f"t{i}")
        (tree / mutant.target).write_bytes(mutant.data)
        argv = [sys.executable, "-m", "generator", "check", str(tree)] + (["--format", "json"] if i % 2 else [])
        proc = subprocess.run(argv, cwd=ROOT, env=env, capture_output=True, text=True, timeout=600)
        outcome = fuzz.Outcome(mutant, proc.returncode, proc.stdout, proc.stderr, 0.0)
        problems = outcome.problems()
        if problems:
            failures.append(f"{mutant.name}: {'; '.join(problems)}")
        seen_codes.add(proc.returncode)
    assert not failures, "\n".join(failures)
    assert 2 in seen_codes


REGRESSIONS = sorted(p for p in (DATA / "fuzz-regressions").iterdir() if p.is_dir())
_EXPECTED_LINE = re.compile(r"^(?P<file>[^:]+):(?P<line>\d+): (?P<fragment>.+)$")


@pytest.mark.parametrize("case", REGRESSIONS, ids=[p.name for p in REGRESSIONS])
def test_fuzz_regression(case: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    tree = tmp_path / "specs"
    shutil.copytree(DEMO, tree)
    for path in case.rglob("*"):
        if path.is_file() and path.name != "expected.txt":
            shutil.copyfile(path, tree / path.relative_to(case))
    expected = (case / "expected.txt").read_text().splitlines()
    code = main(["check", str(tree)])
    _, err = capsys.readouterr()
    assert f"exit {code}" == expected[0], err
    assert "Traceback" not in err
    for line in expected[1:]:
        m = _EXPECTED_LINE.match(line)
        assert m, f"malformed expected.txt line {line!r}"
        assert f"{m['file']}:{m['line']}:" in err and m["fragment"] in err, err[:2000]


# ----------------------------------------------------------------------------- boundary values

TRIALS = fuzz.boundary_trials()
QUICK_SAMPLE = 40


def test_boundary_trials_come_from_the_schema() -> None:
    from generator import schema

    names = [t.name for t in TRIALS]
    assert names == [t.name for t in fuzz.boundary_trials()]  # the same list on every run
    # every numeric key of both files is tried, on every channel kind it applies to
    for key in schema.CHANNEL_KEYS:
        if key.kind in fuzz.NUMERIC_KINDS:
            for kind in key.kinds:
                host = f"channels/{fuzz.BOUNDARY_HOSTS[kind]}.md {key.path} = "
                assert any(n.startswith(host) for n in names), (kind, key.path)
    for key in schema.SYSTEM_KEYS:
        if key.kind in fuzz.NUMERIC_KINDS:
            assert any(f".{key.name} = " in n and n.startswith("system.toml") for n in names), key.path
    # NaN and infinity in every spelling TOML 1.0 has, each side of a bound, and the swapped pairs
    for spelling in fuzz.TOML_NON_FINITE:
        assert any(n.endswith(f" = toml {spelling}") for n in names), spelling
    assert any(n.endswith('filter.order = 21') for n in names) and any(n.endswith('filter.order = 0') for n in names)
    assert any(n.endswith(f"conversion.bits = {fuzz.LONGEST_INT_LABEL}") for n in names)
    assert any(n.endswith('signal.snr = "400.0 dB"') for n in names)  # at the bound, and just past it
    assert any("signal.snr = \"400.0000004 dB\"" in n for n in names)
    assert sum(" = " not in n for n in names) == len(fuzz.SWAPPED)


def _boundary_problems(trials: list[fuzz.Trial], tmp_path: Path) -> tuple[list[str], dict[str, set[int | None]]]:
    base = fuzz.boundary_tree(tmp_path / "base")
    tree = fuzz.boundary_tree(tmp_path / "specs")
    failures: list[str] = []
    codes: dict[str, set[int | None]] = {}
    for trial in trials:
        runs = fuzz.run_trial(trial, tree, base, tmp_path / "site", fuzz.check_redirected)
        for r in runs:
            codes.setdefault(r.command, set()).add(r.code)
        problems = fuzz.trial_problems(runs)
        if problems:
            failures.append(f"{trial.name[:200]}: {'; '.join(problems)[:600]}")
    return failures, codes


def test_boundary_values_through_every_command(tmp_path: Path) -> None:
    sample = fuzz.boundary_sample(TRIALS, QUICK_SAMPLE)
    assert len(sample) == QUICK_SAMPLE and len({t.name for t in sample}) == QUICK_SAMPLE
    failures, codes = _boundary_problems(sample, tmp_path)
    assert not failures, f"{len(failures)} bad trials (all: python -m tests.fuzz --boundary):\n" + "\n".join(failures)
    # the sample reaches the loader's refusals and every command's own work
    assert set(codes) == set(fuzz.BOUNDARY_COMMANDS)
    assert all(2 in c and c & {0, 1} for c in codes.values()), codes


BOUNDARY_GROUPS = sorted({t.files[0][0] for t in TRIALS})


@pytest.mark.slow
@pytest.mark.parametrize("target", BOUNDARY_GROUPS, ids=BOUNDARY_GROUPS)
def test_boundary_campaign(target: str, tmp_path: Path) -> None:
    trials = [t for t in TRIALS if t.files[0][0] == target]
    failures, _ = _boundary_problems(trials, tmp_path)
    assert not failures, f"{len(failures)} of {len(trials)} trials bad:\n" + "\n".join(failures[:50])
