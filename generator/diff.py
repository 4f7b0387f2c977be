"""Compare two spec trees: channels, figures, budgets and findings.

Each side is a folder, or a git revision whose spec folder is materialised into a temporary
folder (``git ls-tree`` and ``git cat-file`` through subprocess: no extra dependency).  The
comparison itself (:func:`compare`) is pure and returns a JSON-ready dict; :func:`to_text`,
:func:`to_markdown` and :func:`to_json` render it.  Findings are matched by rule, channels and
waived state (messages carry numbers that change with every edit); a finding that was waived in
the base and is not any more counts as introduced.
"""

from __future__ import annotations

import html
import json
import math
import re
import subprocess
from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path, PurePosixPath
from typing import Any

from .analysis import FIGURES, SystemAnalysis, analyze
from .errors import SpecError
from .load import load_spec
from .quantities import format_quantity
from .report import finding_dict
from .rules import SEVERITY_RANK, Finding, run_rules

DIFF_FORMAT = 1
GIT_SYMLINK_MODE = "120000"
"""The mode git records for a symbolic link (git ls-tree)."""

# budget values compared per item (the rest of each budget is identity or limits)
BUDGET_KEYS: Mapping[str, tuple[str, ...]] = {
    "converters": ("aggregate_rate_hz", "load"),
    "links": ("data_rate_bps", "load_bps", "utilisation"),
    "stores": ("stream_bps", "bytes_needed", "utilisation", "holding_time_s"),
}


@dataclass(frozen=True)
class Side:
    label: str
    analysis: SystemAnalysis
    findings: list[Finding]


# ----------------------------------------------------------------------- the two sides


def _git(args: list[str], cwd: Path, stdin: bytes | None = None) -> bytes:
    try:
        proc = subprocess.run(["git", *args], cwd=cwd, input=stdin, capture_output=True, check=False)
    except FileNotFoundError as exc:
        raise SpecError("git is not installed, so a revision cannot be read; give two folders instead") from exc
    if proc.returncode != 0:
        raise SpecError(f"git {' '.join(args[:2])} failed: {proc.stderr.decode(errors='replace').strip()}")
    return proc.stdout


def materialise(ref: str, dest: Path, specs_path: str = "specs", cwd: Path | None = None) -> Path:
    """The spec folder ``ref`` names: the folder itself, or a git revision's copy written under ``dest``.

    ``ref`` is a folder, ``REV`` (its ``specs_path``), or ``REV:path``; paths are relative to ``cwd``.
    """
    cwd = cwd or Path.cwd()
    if (cwd / ref).is_dir():
        return cwd / ref
    rev, _, path = ref.partition(":")
    path = path or specs_path
    try:
        top = Path(_git(["rev-parse", "--show-toplevel"], cwd).decode().strip())
    except SpecError as exc:
        raise SpecError(f"'{ref}' is not a folder, and {cwd} is not inside a git repository to read it as a "
                        "revision") from exc
    try:
        _git(["rev-parse", "--verify", "--quiet", f"{rev}^{{commit}}"], top)
    except SpecError as exc:
        raise SpecError(f"'{ref}' is neither a folder nor a git revision") from exc
    rel = PurePosixPath((cwd / path).resolve().relative_to(top.resolve()).as_posix())
    listing = _git(["ls-tree", "-r", "-z", rev, "--", str(rel)], top)
    entries = []
    for item in listing.split(b"\0"):
        if not item:
            continue
        meta, _, name = item.partition(b"\t")
        mode, kind, oid = meta.decode().split()
        if kind == "blob":
            entries.append((oid, PurePosixPath(name.decode()), mode == GIT_SYMLINK_MODE))
    if not entries:
        raise SpecError(f"revision '{rev}' has no spec folder '{rel}'")
    blobs = _git(["cat-file", "--batch"], top, "".join(f"{oid}\n" for oid, _, _ in entries).encode())
    pos = 0
    for _, rel_name, is_link in entries:
        header_end = blobs.index(b"\n", pos)
        size = int(blobs[pos:header_end].split()[2])
        body = blobs[header_end + 1: header_end + 1 + size]
        pos = header_end + 1 + size + 1
        target = dest.joinpath(*rel_name.relative_to(rel).parts)
        target.parent.mkdir(parents=True, exist_ok=True)
        if is_link:
            # a link stays a link (pointing nowhere in the copy), so the loader refuses it by name as
            # it refuses links on disk, instead of reading the target's path as the file's text
            target.symlink_to(dest / ".specfold-link-in-revision")
        else:
            target.write_bytes(body)
    return dest


def load_side(ref: str, scratch: Path, specs_path: str = "specs", cwd: Path | None = None) -> Side:
    """Materialise, load, analyse and check one side."""
    root = materialise(ref, scratch, specs_path, cwd)
    analysis = analyze(load_spec(root))
    return Side(ref, analysis, run_rules(analysis))


# ------------------------------------------------------------------------- comparison


def _delta(old: Any, new: Any) -> float | None:
    if isinstance(old, int | float) and isinstance(new, int | float) and not isinstance(old, bool) \
            and not isinstance(new, bool) and math.isfinite(old) and math.isfinite(new):
        return float(new) - float(old)
    return None


def _changes(old: Mapping[str, Any], new: Mapping[str, Any], keys: Iterable[str] | None = None) -> list[dict[str, Any]]:
    out = []
    for key in sorted(keys if keys is not None else set(old) | set(new)):
        a, b = old.get(key), new.get(key)
        if a != b:
            out.append({"key": key, "old": a, "new": b, "delta": _delta(a, b)})
    return out


def _finding_keys(findings: Iterable[Finding]) -> dict[tuple[str, tuple[str, ...], bool, int], Finding]:
    seen: Counter[tuple[str, tuple[str, ...], bool]] = Counter()
    out = {}
    for f in sorted(findings, key=lambda f: (f.rule, f.channels, f.waived, f.message)):
        k = (f.rule, f.channels, f.waived)
        out[(*k, seen[k])] = f
        seen[k] += 1
    return out


def compare(base: Side, head: Side) -> dict[str, Any]:
    """Everything that differs between two analysed spec trees, JSON-ready."""
    b_by, h_by = base.analysis.by_id, head.analysis.by_id
    changed = []
    for cid in sorted(set(b_by) & set(h_by)):
        b, h = b_by[cid], h_by[cid]
        figs = _changes(b.figures, h.figures)
        header = b.channel.header != h.channel.header
        if figs or header:
            changed.append({"id": cid, "requirement_changed": header, "figures": figs})
    budgets: dict[str, list[dict[str, Any]]] = {}
    for kind, keys in BUDGET_KEYS.items():
        old = {x.id: x.as_dict() for x in getattr(base.analysis.budgets, kind)}
        new = {x.id: x.as_dict() for x in getattr(head.analysis.budgets, kind)}
        rows = []
        for item in sorted(set(old) | set(new)):
            status = "added" if item not in old else "removed" if item not in new else "changed"
            diffs = _changes(old.get(item, {}), new.get(item, {}), keys)
            if diffs or status != "changed":
                rows.append({"id": item, "status": status, "changes": diffs})
        budgets[kind] = rows
    bf, hf = _finding_keys(base.findings), _finding_keys(head.findings)
    return {
        "format": DIFF_FORMAT,
        "base": base.label,
        "head": head.label,
        "channels": {
            "added": sorted(set(h_by) - set(b_by)),
            "removed": sorted(set(b_by) - set(h_by)),
            "changed": changed,
        },
        "totals": _changes(base.analysis.totals(), head.analysis.totals(),
                           ("channels", "data_rate_bps", "payload_rate_bps")),
        "budgets": budgets,
        "findings": {
            "introduced": [finding_dict(hf[k]) for k in sorted(set(hf) - set(bf))],
            "resolved": [finding_dict(bf[k]) for k in sorted(set(bf) - set(hf))],
        },
    }


def introduces(diff: Mapping[str, Any], fail_on: str) -> bool:
    """Whether the head introduces an unwaived finding at or above ``fail_on``."""
    if fail_on == "never":
        return False
    return any(not f["waived"] and SEVERITY_RANK[f["severity"]] <= SEVERITY_RANK[fail_on]
               for f in diff["findings"]["introduced"])


# -------------------------------------------------------------------------- rendering

_DIMS = {"aggregate_rate_hz": "Hz", "data_rate_bps": "bit/s", "load_bps": "bit/s", "stream_bps": "bit/s",
         "bytes_needed": "B", "holding_time_s": "s", "payload_rate_bps": "bit/s"}
_RATIOS = {"load", "utilisation"}


def _fmt(key: str, value: Any, signed: bool = False) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool) or not isinstance(value, int | float):
        return json.dumps(value, ensure_ascii=False)
    sign = "+" if signed and value > 0 else ""
    if key in _RATIOS:
        return f"{sign}{value * 100:.4g} %"
    dim = _DIMS.get(key) or (FIGURES[key].dim if key in FIGURES else "")
    if dim:
        try:
            return sign + format_quantity(float(value), dim)
        except ValueError:
            pass
    return f"{sign}{value:.6g}"


def _change_text(c: Mapping[str, Any]) -> str:
    delta = f" ({_fmt(c['key'], c['delta'], signed=True)})" if c["delta"] is not None else ""
    return f"{c['key']}: {_fmt(c['key'], c['old'])} -> {_fmt(c['key'], c['new'])}{delta}"


def _finding_text(f: Mapping[str, Any]) -> str:
    tag = f"waived {f['severity']}" if f["waived"] else f["severity"]
    return f"{f['file']}:{f['line']}: {tag} [{f['rule']}] {f['message']}"


def to_text(diff: Mapping[str, Any]) -> str:
    ch, fi = diff["channels"], diff["findings"]
    lines = [f"specfold diff {diff['base']} -> {diff['head']}", "",
             f"channels: {len(ch['added'])} added, {len(ch['removed'])} removed, {len(ch['changed'])} changed"]
    lines += [f"  + {cid}" for cid in ch["added"]]
    lines += [f"  - {cid}" for cid in ch["removed"]]
    for c in ch["changed"]:
        lines.append(f"  ~ {c['id']}" + (" (requirement edited)" if c["requirement_changed"] else ""))
        lines += [f"      {_change_text(x)}" for x in c["figures"]]
    if diff["totals"]:
        lines += ["", "totals:"] + [f"  {_change_text(x)}" for x in diff["totals"]]
    rows = [(kind, r) for kind, rs in diff["budgets"].items() for r in rs]
    lines += ["", f"budgets: {len(rows)} changed"]
    for kind, r in rows:
        lines.append(f"  {kind[:-1]} {r['id']}" + ("" if r["status"] == "changed" else f" ({r['status']})"))
        lines += [f"      {_change_text(x)}" for x in r["changes"]]
    lines += ["", f"findings: {len(fi['introduced'])} introduced, {len(fi['resolved'])} resolved"]
    lines += [f"  + {_finding_text(f)}" for f in fi["introduced"]]
    lines += [f"  - {_finding_text(f)}" for f in fi["resolved"]]
    return "\n".join(lines) + "\n"


_MD_PUNCTUATION = re.compile(r"([\\`*_\[\]|~])")
_MENTION = re.compile(r"(?<![\w`])([@#!])(?=[A-Za-z0-9_])")


def _md(text: str) -> str:
    """Spec text as a table cell of a merge-request comment: shown as it is written, never as markup.

    HTML is written as entities (so no tag reaches the page), the punctuation that starts inline
    markup is backslash-escaped (no link, image, emphasis, strike-through or code span starts, and a
    ``|`` does not split the cell), a line break becomes a space
    (it would end the table row), and an @-mention, #-reference or !-reference is cut by a word
    joiner (U+2060) so that it notifies nobody and links nothing.
    """
    text = html.escape(" ".join(text.splitlines()), quote=False)
    text = _MD_PUNCTUATION.sub(r"\\\1", text)
    return _MENTION.sub("\\1\u2060", text)


def _code(text: str) -> str:
    """``text`` as an inline code span that no backtick in it can close early (CommonMark 6.1)."""
    text = " ".join(text.splitlines()).replace("|", "\\|")
    longest = max((len(m) for m in re.findall(r"`+", text)), default=0)
    fence = "`" * (longest + 1)
    pad = " " if text.startswith("`") or text.endswith("`") else ""
    return f"{fence}{pad}{text}{pad}{fence}"


def to_markdown(diff: Mapping[str, Any]) -> str:
    """A merge-request comment: summary line, then tables.  Every text from the specs or the
    command line goes through :func:`_md` or :func:`_code`."""
    ch, fi = diff["channels"], diff["findings"]
    out = [f"### specfold: {_code(diff['base'])} → {_code(diff['head'])}", "",
           f"**Channels:** {len(ch['added'])} added, {len(ch['removed'])} removed, {len(ch['changed'])} changed · "
           f"**Findings:** {len(fi['introduced'])} introduced, {len(fi['resolved'])} resolved", ""]
    if ch["added"] or ch["removed"]:
        out += ["| channel | change |", "|---|---|"]
        out += [f"| {_code(c)} | added |" for c in ch["added"]] + [f"| {_code(c)} | removed |" for c in ch["removed"]]
        out.append("")

    def cells(x: Mapping[str, Any]) -> str:
        delta = _md(_fmt(x["key"], x["delta"], signed=True)) if x["delta"] is not None else ""
        return f"{_code(x['key'])} | {_md(_fmt(x['key'], x['old']))} | {_md(_fmt(x['key'], x['new']))} | {delta}"

    figure_rows = [(c["id"], x) for c in ch["changed"] for x in c["figures"]]
    if figure_rows:
        out += ["#### Changed figures", "", "| channel | figure | old | new | delta |", "|---|---|---|---|---|"]
        out += [f"| {_code(cid)} | {cells(x)} |" for cid, x in figure_rows]
        out.append("")
    budget_rows = [(kind, r, x) for kind, rs in diff["budgets"].items() for r in rs for x in r["changes"] or [None]]
    if budget_rows:
        out += ["#### Budgets", "", "| item | value | old | new | delta |", "|---|---|---|---|---|"]
        for kind, r, x in budget_rows:
            name = f"{kind[:-1]} {_code(r['id'])}"
            out.append(f"| {name} | {r['status']} | | | |" if x is None else f"| {name} | {cells(x)} |")
        out.append("")
    if fi["introduced"] or fi["resolved"]:
        out += ["#### Findings", "", "| | severity | rule | where | message |", "|---|---|---|---|---|"]
        for mark, items in (("introduced", fi["introduced"]), ("resolved", fi["resolved"])):
            for f in items:
                sev = f"waived {f['severity']}" if f["waived"] else f["severity"]
                where = f"{f['file']}:{f['line']}"
                out.append(f"| {mark} | {sev} | {_code(f['rule'])} | {_code(where)} | {_md(f['message'])} |")
        out.append("")
    return "\n".join(out)


def _finite(value: Any) -> Any:
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def to_json(diff: Mapping[str, Any]) -> str:
    """Deterministic JSON (non-finite numbers become null)."""
    return json.dumps(_finite(dict(diff)), indent=2, ensure_ascii=False, allow_nan=False) + "\n"
