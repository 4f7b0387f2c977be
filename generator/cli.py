"""The command line: the only module that prints, and the only place exit codes are decided.

Exit codes
----------
0  clean: no finding at or above the ``--fail-on`` level (waived findings never count)
1  findings at or above the ``--fail-on`` level
2  bad input or usage, or a file or folder the command cannot use (a full disk, a read-only
   output, a name too long): every problem in every file is printed first
3  internal error: a bug in specfold, whatever the input; one short message says so, and
   ``--traceback`` (or ``SPECFOLD_TRACEBACK=1``) shows where it happened
130  interrupted (Ctrl-C)
"""

from __future__ import annotations

import argparse
import difflib
import hashlib
import os
import sys
import tempfile
import traceback
from collections.abc import Callable, Sequence
from contextlib import suppress
from pathlib import Path

from . import __version__
from . import diff as spec_diff
from . import propose as proposing
from .dsp.filters import Stage
from .edit import edit_header, file_edits
from .errors import BUG, ENVIRONMENT_ERRNOS, SpecError, SpecErrors, bug_summary, os_error_text
from .files import write_files
from .load import load_spec
from .quantities import format_quantity
from .report import counts, show_controls, to_json, to_junit, to_sarif, to_text
from .rules import SEVERITY_RANK, Finding, all_rules

EXIT_OK = 0
EXIT_FINDINGS = 1
EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3
EXIT_INTERRUPTED = 130  # 128 + SIGINT, as shells report a process ended by Ctrl-C

TRACEBACK_ENV = "SPECFOLD_TRACEBACK"
"""Set to 1 (as ``--traceback`` does) to print the traceback of an internal error."""

DEFAULT_SPECS = "specs"
DEFAULT_OUTPUT = "output"


def _say(text: str) -> None:
    """A message on stderr, its control characters shown rather than acted on by the terminal."""
    print(show_controls(text), file=sys.stderr, flush=True)


class _Parser(argparse.ArgumentParser):
    """argparse that exits 2 with our wording (argparse already uses 2 for usage errors)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.print_usage(sys.stderr)
        _say(f"specfold: {message}")
        raise SystemExit(EXIT_BAD_INPUT)


TRACEBACK_HELP = "on an internal error (exit 3), print the full traceback for the bug report"
CACHE_HELP = ("build cache folder (default: $SPECFOLD_CACHE, else .specfold-cache beside the spec folder; "
              "'off': none); safe to delete at any time")


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="specfold", description="Data-acquisition channel requirements: computed, checked, published.")
    p.add_argument("--version", action="version", version=f"specfold {__version__}")
    p.add_argument("--traceback", action="store_true", help=TRACEBACK_HELP)
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    check = sub.add_parser("check", help="load the specs, compute every figure, report findings")
    check.add_argument("specs", nargs="?", default=DEFAULT_SPECS, help="spec folder (default: specs)")
    check.add_argument("--format", choices=("text", "json", "junit", "sarif"), default="text",
                       help="report format: text, the JSON contract, JUnit XML or SARIF 2.1.0")
    check.add_argument("--fail-on", choices=("error", "warning", "never"), default="error",
                       help="lowest severity that makes the exit code 1 (default: error)")
    check.add_argument("--cache", metavar="DIR", default=None, help=CACHE_HELP)

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
                       help="ignore the build cache: load, check and render everything again (and refill the cache)")
    build.add_argument("--cache", metavar="DIR", default=None, help=CACHE_HELP)

    prop = sub.add_parser("propose", help="the least costly compliant rate and filter per channel")
    prop.add_argument("targets", nargs="*", metavar="[SPECS] [ID]",
                      help="spec folder (default: specs), then channel ids (default: every channel with a "
                           "sampling or amplitude finding a rate or filter can affect)")
    prop.add_argument("--prefer", default="rate,order,delay",
                      help="order of preference among rate, order and delay, comma-separated "
                           "(default: rate,order,delay: least data rate, then least order, then least group delay)")
    prop.add_argument("--write", action="store_true",
                      help="edit the channel files in place (only the affected values) and print a unified diff")

    rules = sub.add_parser("rules", help="list the rules, or explain one")
    rules.add_argument("rule", nargs="?", help="a rule id")

    new = sub.add_parser("new", help="write a channel file with every key, commented, ready to edit")
    new.add_argument("id", help="channel id (the file name): letters, digits, '.', '_' and '-'")
    new.add_argument("--kind", choices=("input", "output", "image"), default="input", help="default: input")
    new.add_argument("--converter", help="converter id from system.toml (default: the first of the right type)")
    new.add_argument("--specs", default=DEFAULT_SPECS, help="spec folder (default: specs)")

    imp = sub.add_parser("import", help="channel files from a CSV table (a dry run unless --write)")
    imp.add_argument("table", help="CSV file: one row per channel, headers naming keys")
    imp.add_argument("--specs", default=DEFAULT_SPECS, help="spec folder (default: specs)")
    imp.add_argument("--mapping", help='TOML file of "header" = "key path" pairs that override the header spellings')
    imp.add_argument("--write", action="store_true", help="write the files (default: show what would be written)")
    imp.add_argument("--force", action="store_true", help="replace channel files that exist and differ")

    exp = sub.add_parser("export", help="the channel table with requirement values and key figures")
    exp.add_argument("specs", nargs="?", default=DEFAULT_SPECS, help="spec folder (default: specs)")
    exp.add_argument("--format", choices=("csv", "json"), default="csv", help="default: csv")

    serve = sub.add_parser("serve", help="build, serve on 127.0.0.1 and rebuild on every saved change")
    serve.add_argument("specs", nargs="?", default=DEFAULT_SPECS, help="spec folder (default: specs)")
    serve.add_argument("--port", type=int, default=8000, help="port on 127.0.0.1 (default 8000; 0: any free port)")
    serve.add_argument("-o", "--output", default=None,
                       help="site folder (default: a temporary folder removed on exit)")
    for command in sub.choices.values():
        # accepted after the command too; SUPPRESS keeps it from undoing a --traceback given before it
        command.add_argument("--traceback", action="store_true", default=argparse.SUPPRESS, help=TRACEBACK_HELP)
    return p


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


def _write(text: str, ascii_text: Callable[[], str] | None = None, escaped: bool = False) -> None:
    """Write to stdout even where its encoding lacks µ, ±, √ or ² (an ASCII console or pipe).

    Such a stream used to end the run with a UnicodeEncodeError traceback.  ``ascii_text``
    gives an all-ASCII rendering that keeps the output's format (JSON with \\u escapes);
    without it, unencodable characters are written as backslash escapes.  Text is for a terminal
    and has its control characters shown (:func:`report.show_controls`) unless ``escaped``: a
    format that escapes for its own reader (JSON, XML, CSV, Markdown).
    """
    if not escaped:
        text = show_controls(text)
    try:
        sys.stdout.write(text)
    except UnicodeEncodeError:
        encoding = sys.stdout.encoding or "ascii"
        fallback = ascii_text() if ascii_text else text
        sys.stdout.write(fallback.encode(encoding, "backslashreplace").decode(encoding))


def _cmd_check(args: argparse.Namespace) -> int:
    from .build.pipeline import channel_store, check, keep

    store = channel_store(Path(args.specs), args.cache)
    checked = check(args.specs, store)
    analysis, findings = checked.analysis, checked.findings
    if args.format == "json":
        _write(to_json(analysis, findings, memo=checked.figures),
               lambda: to_json(analysis, findings, ascii_only=True), escaped=True)
    elif args.format == "junit":
        _write(to_junit(analysis, findings, args.fail_on, _repo_prefix(args.specs)), escaped=True)
    elif args.format == "sarif":
        _write(to_sarif(analysis, findings, _repo_prefix(args.specs)), escaped=True)
    else:
        _write(to_text(analysis, findings))
    keep(store, checked)
    return EXIT_FINDINGS if fails(findings, args.fail_on) else EXIT_OK


def _cmd_diff(args: argparse.Namespace) -> int:
    with tempfile.TemporaryDirectory(prefix="specfold-diff-") as scratch:
        base = spec_diff.load_side(args.base, Path(scratch) / "base", args.specs)
        head = spec_diff.load_side(args.head or args.specs, Path(scratch) / "head", args.specs)
        result = spec_diff.compare(base, head)
    render = {"json": spec_diff.to_json, "markdown": spec_diff.to_markdown}.get(args.format, spec_diff.to_text)
    _write(render(result), escaped=args.format != "text")
    return EXIT_FINDINGS if spec_diff.introduces(result, args.fail_on) else EXIT_OK


def _progress_bar(done: int, total: int, what: str) -> None:
    width = 30
    filled = width * done // max(total, 1)
    sys.stderr.write(f"\r  [{'#' * filled}{'.' * (width - filled)}] {done}/{total} pages")
    if done >= total:
        sys.stderr.write("\n")
    sys.stderr.flush()


def _cmd_build(args: argparse.Namespace) -> int:
    from .build.site import build  # the site stack (jinja2, markdown, nh3) loads only for this command

    summary = build(args.specs, args.output, progress=_progress_bar if sys.stderr.isatty() else None,
                    fresh=args.fresh, cache=args.cache)
    c = counts(summary.findings)
    index = summary.output / "index.html"
    _write(
        f"built {summary.pages} pages for {summary.channels} channel{'s' if summary.channels != 1 else ''} "
        f"({c['error']} error(s), {c['warning']} warning(s), {c['info']} note(s), {c['waived']} waived): {index}\n"
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


def _stage_text(stage: Stage) -> str:
    f0 = format_quantity(stage.f0_hz, "Hz")
    return f"{f0} (first order)" if stage.q is None else f"{f0} (Q {stage.q:.4f})"


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _cmd_propose(args: argparse.Namespace) -> int:
    targets = list(args.targets)
    specs = DEFAULT_SPECS
    if targets and Path(targets[0]).is_dir():
        specs = targets.pop(0)
    prefer = tuple(p.strip() for p in args.prefer.split(",") if p.strip())
    spec = load_spec(Path(specs))
    known = {c.id for c in spec.channels}
    unknown = [t for t in targets if t not in known]
    if unknown:
        raise SpecError(f"no channel {', '.join(unknown)} in {specs} (and no such folder)")
    if any(c not in proposing.CRITERIA for c in prefer) or len(set(prefer)) != len(prefer):
        raise SpecError(f"--prefer {args.prefer}: name each of {', '.join(proposing.CRITERIA)} at most once")
    root = Path(specs)
    # Read every channel file now: --write refuses a file that changes between here and the write.
    read = {c.id: (root / c.source.file).read_text(encoding="utf-8") for c in spec.channels
            if not targets or c.id in targets}
    proposals = proposing.propose(spec, targets or None, prefer)
    if not proposals:
        _write("no channel has a sampling or amplitude finding that a rate or filter can fix\n")
        return EXIT_OK
    out: list[str] = []
    for p in proposals:
        out.append(f"{p.channel_id} ({p.file}): {p.explanation}")
        if p.design is not None:
            out.append("  stages: " + "; ".join(_stage_text(s) for s in p.stages))
            if p.fixes:
                out.append(f"  clears: {', '.join(p.fixes)}")
        for why in p.unfixable:
            if p.design is not None or not p.explanation.endswith(why):
                out.append(f"  left: {why}")
    _write("\n".join(out) + "\n")
    changes: list[tuple[Path, str, str]] = []
    for p in proposals:
        if p.design is None or not p.edits:
            continue
        before = read[p.channel_id]
        after = edit_header(before, file_edits(p))
        changes.append((root / p.file, before, after))
        _write("".join(difflib.unified_diff(before.splitlines(keepends=True), after.splitlines(keepends=True),
                                            f"a/{p.file}", f"b/{p.file}")))
    if args.write:
        stale = [str(path) for path, before, _ in changes
                 if _digest(path.read_text(encoding="utf-8")) != _digest(before)]
        if stale:
            raise SpecError(f"{', '.join(stale)} changed since it was read; nothing was written: run propose again")
        write_files([(path, after, True) for path, _, after in changes], "propose")
        result = load_spec(root)
    else:
        result = proposing.apply_proposals(spec, proposals)
    left = proposing.still_open(result, proposals)
    verb = "written" if args.write else "applied"
    _write(f"{len([p for p in proposals if p.design])} of {len(proposals)} channel(s) have a proposal; "
           f"{'files ' + verb if args.write else 'nothing written (use --write)'}; "
           f"{len(left)} sampling or amplitude finding(s) a rate or filter could fix remain with the proposals "
           "applied\n")
    return EXIT_FINDINGS if left or any(p.design is None for p in proposals) else EXIT_OK


def _cmd_new(args: argparse.Namespace) -> int:
    from .scaffold import new_channel

    path, text = new_channel(args.specs, args.id, args.kind, args.converter)
    if path.exists() or path.is_symlink():  # created between the check and now
        raise SpecError(f"{path} already exists; specfold new never overwrites a channel file")
    path.parent.mkdir(parents=True, exist_ok=True)
    write_files([(path, text, False)], "new")
    article = "an" if args.kind[0] in "aeiou" else "a"
    _write(f"wrote {path}: every key for {article} {args.kind} channel, commented; edit it, then 'specfold check'\n")
    return EXIT_OK


def _cmd_import(args: argparse.Namespace) -> int:
    from .importing import plan_import, read_mapping, write_planned

    mapping = read_mapping(Path(args.mapping)) if args.mapping else None
    planned = plan_import(args.specs, args.table, mapping)
    if not args.write:
        for p in planned:
            note = {"new": "new", "replace": "replace, needs --force" if not args.force else "replace",
                    "unchanged": "unchanged"}[p.state]
            _write(f"=== {Path(args.specs, p.rel).as_posix()} ({note}; row {p.row})\n{p.text}\n")
        n = sum(p.state != "unchanged" for p in planned)
        _write(f"dry run: {n} of {len(planned)} file(s) would be written; add --write to write them\n")
        return EXIT_OK
    written = write_planned(args.specs, planned, args.force)
    _write(f"wrote {len(written)} channel file(s) in {Path(args.specs, 'channels').as_posix()} "
           f"({len(planned) - len(written)} unchanged)\n")
    return EXIT_OK


def _cmd_export(args: argparse.Namespace) -> int:
    from .build.pipeline import channel_store, check
    from .exporting import export_table, to_csv, to_json_table

    checked = check(args.specs, channel_store(Path(args.specs)))
    columns, rows = export_table(checked.analysis, checked.findings)
    if args.format == "json":
        _write(to_json_table(columns, rows), lambda: to_json_table(columns, rows, ascii_only=True), escaped=True)
    else:
        _write(to_csv(columns, rows), escaped=True)
    return EXIT_OK


def _cmd_serve(args: argparse.Namespace) -> int:
    import shutil
    import signal
    import threading

    from .serve import Preview

    if not 0 <= args.port <= 65535:
        raise SpecError(f"--port {args.port} is not a port number (0 to 65535; 0 picks a free one)")
    scratch = None
    output = args.output
    if output is None:
        scratch = tempfile.mkdtemp(prefix="specfold-serve-")
        output = str(Path(scratch) / "site")

    def say(message: str) -> None:
        _say(f"specfold serve: {message}")

    preview = Preview(Path(args.specs), Path(output), args.port, on_event=say)
    # Ctrl-C (or SIGTERM) only sets a flag: a KeyboardInterrupt raised between two statements,
    # say right after the "serving" line, would skip the clean stop below.
    stopping = threading.Event()
    previous = {sig: signal.signal(sig, lambda *_: stopping.set()) for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        try:
            port = preview.start()
        except OSError as exc:
            raise SpecError(f"cannot serve on 127.0.0.1:{args.port}: {exc.strerror or exc}; "
                            "try another --port, or 0 for any free one") from None
        _write(f"serving {args.specs} at http://127.0.0.1:{port}/ (port {port}); "
               "pages reload when a spec is saved; Ctrl-C stops\n")
        sys.stdout.flush()
        while not stopping.wait(0.5):
            pass
        say("stopping")
    finally:
        preview.stop()
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        if scratch is not None:
            shutil.rmtree(scratch, ignore_errors=True)
    return EXIT_OK


COMMANDS = {"check": _cmd_check, "build": _cmd_build, "diff": _cmd_diff, "rules": _cmd_rules, "new": _cmd_new,
            "import": _cmd_import, "export": _cmd_export, "serve": _cmd_serve, "propose": _cmd_propose}


def _raised_at(exc: BaseException) -> str:
    """Where in specfold the exception was raised: the innermost frame of this package."""
    package = Path(__file__).resolve().parent
    where = ""
    for frame in traceback.extract_tb(exc.__traceback__):
        path = Path(frame.filename)
        if package in path.parents:
            where = f"{path.relative_to(package.parent).as_posix()}:{frame.lineno}, in {frame.name}"
    return where or "outside specfold's own code"


def _internal_error(exc: BaseException, show_traceback: bool) -> int:
    if show_traceback:
        traceback.print_exception(exc, file=sys.stderr)
    _say(f"specfold: {bug_summary(exc)} ({_raised_at(exc)}).\n{BUG}; please report it with the command you ran"
         + ("." if show_traceback else f" and the traceback that --traceback (or {TRACEBACK_ENV}=1) prints."))
    return EXIT_INTERNAL


def _stdout_closed() -> None:
    """The reader of stdout went away (``specfold check | head``): stop writing to it quietly."""
    with suppress(OSError, ValueError):
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; returns the exit code."""
    args = _parser().parse_args(argv)
    show_traceback = bool(args.traceback) or os.environ.get(TRACEBACK_ENV, "") not in ("", "0")
    try:
        return COMMANDS[args.command](args)
    except SpecErrors as errs:
        for err in errs.errors:
            _say(err.format())
        n = len(errs.errors)
        _say(f"specfold: {n} problem{'s' if n != 1 else ''} in the specs; nothing was checked")
        return EXIT_BAD_INPUT
    except SpecError as err:
        _say(f"specfold: {err.format()}")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        _say("specfold: interrupted")
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        _stdout_closed()
        return EXIT_BAD_INPUT
    except OSError as exc:
        if exc.errno in ENVIRONMENT_ERRNOS:
            _say(f"specfold: {os_error_text(exc)}")
            return EXIT_BAD_INPUT
        return _internal_error(exc, show_traceback)
    except Exception as exc:  # anything else is a bug: exit 3, never the findings code
        return _internal_error(exc, show_traceback)
