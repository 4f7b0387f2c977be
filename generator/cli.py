"""The command line: the only module that prints, and the only place exit codes are decided.

Exit codes
----------
0  clean: no finding at or above the ``--fail-on`` level (waived findings never count)
1  findings at or above the ``--fail-on`` level
2  bad input or usage: every problem in every file is printed first
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

from . import __version__
from .analysis import SystemAnalysis, analyze
from .errors import SpecError, SpecErrors
from .load import load_spec
from .report import to_json, to_text
from .rules import SEVERITY_RANK, Finding, all_rules, run_rules

EXIT_OK = 0
EXIT_FINDINGS = 1
EXIT_BAD_INPUT = 2

DEFAULT_SPECS = "specs"


class _Parser(argparse.ArgumentParser):
    """argparse that exits 2 with our wording (argparse already uses 2 for usage errors)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.print_usage(sys.stderr)
        print(f"specfold: {message}", file=sys.stderr)
        raise SystemExit(EXIT_BAD_INPUT)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="specfold", description="Data-acquisition channel requirements: computed, checked, published.")
    p.add_argument("--version", action="version", version=f"specfold {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    check = sub.add_parser("check", help="load the specs, compute every figure, report findings")
    check.add_argument("specs", nargs="?", default=DEFAULT_SPECS, help="spec folder (default: specs)")
    check.add_argument("--format", choices=("text", "json"), default="text", help="report format")
    check.add_argument("--fail-on", choices=("error", "warning", "never"), default="error",
                       help="lowest severity that makes the exit code 1 (default: error)")

    rules = sub.add_parser("rules", help="list the rules, or explain one")
    rules.add_argument("rule", nargs="?", help="a rule id")
    return p


def _load(specs: str) -> SystemAnalysis:
    return analyze(load_spec(Path(specs)))


def fails(findings: Sequence[Finding], fail_on: str) -> bool:
    """Whether any unwaived finding is at or above the ``fail_on`` severity."""
    if fail_on == "never":
        return False
    limit = SEVERITY_RANK[fail_on]
    return any(not f.waived and SEVERITY_RANK[f.severity] <= limit for f in findings)


def _write(text: str, ascii_text: Callable[[], str] | None = None) -> None:
    """Write to stdout even where its encoding lacks µ, ±, √ or ² (an ASCII console or pipe).

    Such a stream used to end the run with a UnicodeEncodeError traceback.  ``ascii_text``
    gives an all-ASCII rendering that keeps the output's format (JSON with \\u escapes);
    without it, unencodable characters are written as backslash escapes.
    """
    try:
        sys.stdout.write(text)
    except UnicodeEncodeError:
        encoding = sys.stdout.encoding or "ascii"
        fallback = ascii_text() if ascii_text else text
        sys.stdout.write(fallback.encode(encoding, "backslashreplace").decode(encoding))


def _cmd_check(args: argparse.Namespace) -> int:
    analysis = _load(args.specs)
    findings = run_rules(analysis)
    if args.format == "json":
        _write(to_json(analysis, findings), lambda: to_json(analysis, findings, ascii_only=True))
    else:
        _write(to_text(analysis, findings))
    return EXIT_FINDINGS if fails(findings, args.fail_on) else EXIT_OK


def _cmd_rules(args: argparse.Namespace) -> int:
    rules = all_rules()
    if args.rule:
        found = [r for r in rules if r.id == args.rule]
        if not found:
            raise SpecError(f"no rule '{args.rule}'; 'specfold rules' lists them")
        r = found[0]
        _write(f"{r.id} ({r.severity}): {r.title}\n\n{r.explanation}\n")
        return EXIT_OK
    width = max(len(r.id) for r in rules)
    for r in rules:
        _write(f"{r.id:<{width}}  {r.severity:<7}  {r.title}\n")
    return EXIT_OK


COMMANDS = {"check": _cmd_check, "rules": _cmd_rules}


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; returns the exit code."""
    args = _parser().parse_args(argv)
    try:
        return COMMANDS[args.command](args)
    except SpecErrors as errs:
        for err in errs.errors:
            print(err.format(), file=sys.stderr)
        n = len(errs.errors)
        print(f"specfold: {n} problem{'s' if n != 1 else ''} in the specs; nothing was checked", file=sys.stderr)
        return EXIT_BAD_INPUT
    except SpecError as err:
        print(f"specfold: {err.format()}", file=sys.stderr)
        return EXIT_BAD_INPUT
