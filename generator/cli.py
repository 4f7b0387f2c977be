"""The command line: the only module that prints, and the only place exit codes are decided.

Exit codes
----------
0  clean: no finding at or above the ``--fail-on`` level (waived findings never count)
1  findings at or above the ``--fail-on`` level
2  bad input or usage: every problem in every file is printed first
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from collections.abc import Callable, Sequence
from pathlib import Path

from . import __version__
from . import diff as spec_diff
from .analysis import SystemAnalysis, analyze
from .errors import SpecError, SpecErrors
from .load import load_spec
from .report import counts, to_json, to_junit, to_sarif, to_text
from .rules import SEVERITY_RANK, Finding, all_rules, run_rules

EXIT_OK = 0
EXIT_FINDINGS = 1
EXIT_BAD_INPUT = 2

DEFAULT_SPECS = "specs"
DEFAULT_OUTPUT = "output"


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
    check.add_argument("--format", choices=("text", "json", "junit", "sarif"), default="text",
                       help="report format: text, the JSON contract, JUnit XML or SARIF 2.1.0")
    check.add_argument("--fail-on", choices=("error", "warning", "never"), default="error",
                       help="lowest severity that makes the exit code 1 (default: error)")

    diff = sub.add_parser("diff", help="compare two spec trees (folders or git revisions)")
    diff.add_argument("base", help="a spec folder, a git revision (its --specs folder), or REV:path")
    diff.add_argument("head", nargs="?", default=None, help="the same; default: the --specs folder as it is now")
    diff.add_argument("--specs", default=DEFAULT_SPECS, help="spec folder inside the repository (default: specs)")
    diff.add_argument("--format", choices=("text", "json", "markdown"), default="text", help="report format")
    diff.add_argument("--fail-on", choices=("error", "warning", "never"), default="error",
                      help="exit 1 when the head introduces a finding at or above this severity (default: error)")
    build = sub.add_parser("build", help="publish the spec as a static site")
    build.add_argument("specs", nargs="?", default=DEFAULT_SPECS, help="spec folder (default: specs)")
    build.add_argument("-o", "--output", default=DEFAULT_OUTPUT,
                       help="site folder (default: output); replaced as a whole on success")
    build.add_argument("--fresh", action="store_true",
                       help="render every page again instead of reusing unchanged ones from the current site")

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


def _repo_prefix(specs: str) -> str:
    """The specs folder as CI tools expect it in reports: relative to the working folder, posix."""
    path = Path(specs).resolve()
    try:
        return path.relative_to(Path.cwd().resolve()).as_posix()
    except ValueError:
        return Path(os.path.relpath(path)).as_posix()


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
    elif args.format == "junit":
        _write(to_junit(analysis, findings, args.fail_on, _repo_prefix(args.specs)))
    elif args.format == "sarif":
        _write(to_sarif(analysis, findings, _repo_prefix(args.specs)))
    else:
        _write(to_text(analysis, findings))
    return EXIT_FINDINGS if fails(findings, args.fail_on) else EXIT_OK


def _cmd_diff(args: argparse.Namespace) -> int:
    with tempfile.TemporaryDirectory(prefix="specfold-diff-") as scratch:
        base = spec_diff.load_side(args.base, Path(scratch) / "base", args.specs)
        head = spec_diff.load_side(args.head or args.specs, Path(scratch) / "head", args.specs)
        result = spec_diff.compare(base, head)
    render = {"json": spec_diff.to_json, "markdown": spec_diff.to_markdown}.get(args.format, spec_diff.to_text)
    _write(render(result))
    return EXIT_FINDINGS if spec_diff.introduces(result, args.fail_on) else EXIT_OK


def _progress_bar(done: int, total: int, what: str) -> None:
    width = 30
    filled = width * done // max(total, 1)
    sys.stderr.write(f"\r  [{'#' * filled}{'.' * (width - filled)}] {done}/{total} pages")
    if done >= total:
        sys.stderr.write("\n")
    sys.stderr.flush()


def _cmd_build(args: argparse.Namespace) -> int:
    from .site import build  # the site stack (jinja2, markdown, nh3) loads only for this command

    summary = build(args.specs, args.output, progress=_progress_bar if sys.stderr.isatty() else None,
                    incremental=not args.fresh)
    c = counts(summary.findings)
    index = summary.output / "index.html"
    print(
        f"built {summary.pages} pages for {summary.channels} channel{'s' if summary.channels != 1 else ''} "
        f"({c['error']} error(s), {c['warning']} warning(s), {c['info']} note(s), {c['waived']} waived): {index}"
    )
    return EXIT_OK


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


COMMANDS = {"check": _cmd_check, "build": _cmd_build, "diff": _cmd_diff, "rules": _cmd_rules}


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
