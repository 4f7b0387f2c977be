"""Findings and figures -> text, the JSON contract (format 1), JUnit XML and SARIF 2.1.0.

Pure functions returning strings; the CLI prints them.

JUnit XML: one test suite; one test case per (channel, rule) pair for every channel and every
registered rule (class name = the channel file as given to CI, name = the rule id), plus one
``system`` case per rule for findings that name no channel.  A case fails for an unwaived finding
at or above the fail-on level, is skipped (with the waiver's reason) when its only findings are
waived, and passes otherwise; findings below the fail-on level show in the case's system-out.

SARIF 2.1.0: one run; ``tool.driver.rules`` is the rule registry; each finding is a result at its
file (relative to the repository: the specs folder prefix included) and line; waived findings
carry an external suppression whose justification is the waiver's reason.
"""

from __future__ import annotations

import json
import math
import re
import xml.etree.ElementTree as ET
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from . import __version__
from .analysis import ChannelResult, SystemAnalysis
from .rules import SEVERITY_RANK, Finding, all_rules, by_channel, worst_status

JSON_FORMAT = 1

_CONTROLS = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069]")
"""What a terminal acts on instead of showing: C0 controls but tab and line feed (escape sequences
start with ESC, a carriage return rewrites the line), DEL, the C1 controls, and the bidirectional
formatting characters that reorder what is shown (Unicode Standard Annex #9)."""


def show_controls(text: str) -> str:
    """``text`` for a terminal, with every control character written visibly as an escape:
    ESC is shown as ``\\x1b``, RIGHT-TO-LEFT OVERRIDE as ``\\u202e``."""
    def shown(m: re.Match[str]) -> str:
        code = ord(m.group(0))
        return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"

    return _CONTROLS.sub(shown, text)


def _clean(value: Any) -> Any:
    """JSON-safe copy: non-finite floats become null (JSON has no NaN or infinity)."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    return value


def finding_dict(f: Finding) -> dict[str, Any]:
    return {
        "rule": f.rule,
        "severity": f.severity,
        "channels": list(f.channels),
        "file": f.file,
        "line": f.line,
        "message": f.message,
        "waived": f.waived,
        "waiver_reason": f.waiver_reason,
    }


def _budget_of(budgets: Iterable[Any], item_id: str) -> dict[str, Any]:
    for b in budgets:
        if b.id == item_id:
            out: dict[str, Any] = b.as_dict()
            out.pop("id")
            return out
    return {}


def _system_document(analysis: SystemAnalysis) -> dict[str, Any]:
    system = analysis.spec.system
    return {
        "name": system.name,
        "revision": system.revision,
        "totals": analysis.totals(),
        "converters": [
            {"id": c.id, "type": c.type, "architecture": c.architecture, "bits": c.bits,
             "sampling": c.sampling, "max_rate_hz": c.max_rate, "clock": c.clock, "link": c.link,
             **_budget_of(analysis.budgets.converters, c.id)}
            for c in system.converters.values()
        ],
        "clocks": [b.as_dict() for b in analysis.budgets.clocks],
        "links": [{"id": lk.id, "capacity_bps": lk.capacity_bps, "overhead": lk.overhead,
                   "headroom": lk.headroom, **_budget_of(analysis.budgets.links, lk.id)}
                  for lk in system.links.values()],
        "stores": [{"id": s.id, "capacity_bytes": s.capacity_bytes, **_budget_of(analysis.budgets.stores, s.id)}
                   for s in system.stores.values()],
        "groups": [b.as_dict() for b in analysis.budgets.groups],
    }


def _channel_head(r: ChannelResult, mine: Mapping[str, Sequence[Finding]]) -> dict[str, str]:
    """A channel's entry in the JSON contract but its figures (``mine``: findings by channel)."""
    ch = r.channel
    return {"id": ch.id, "kind": ch.kind, "file": ch.source.file, "status": worst_status(mine.get(ch.id, ()))}


def spec_document(analysis: SystemAnalysis, findings: list[Finding]) -> dict[str, Any]:
    """The JSON contract shared by ``check --format json`` and the site's data/spec.json."""
    mine = by_channel(findings)
    doc: dict[str, Any] = _clean({
        "format": JSON_FORMAT,
        "system": _system_document(analysis),
        "channels": [{**_channel_head(r, mine), "figures": r.figures} for r in analysis.channels],
        "findings": [finding_dict(f) for f in findings],
    })
    return doc


class _Encoded(str):
    """JSON text already encoded: :func:`_layout` writes it as it is."""


def _compact(value: Any, ascii_only: bool) -> str:
    return json.dumps(_clean(value), ensure_ascii=ascii_only, allow_nan=False)


def figures_text(result: ChannelResult) -> str:
    """A channel's figures as the JSON text the contract (and the build cache) holds."""
    return _compact(result.figures, False)


def _layout(value: Any, level: int, ascii_only: bool) -> str:
    """JSON text with the document's structure on its own lines and every list item on one line.

    Objects down to the second level open one key per line (2-space indent); a list puts each
    item on a line of its own, written compactly; everything else is compact.  One channel, one
    finding or one converter is then one line: a change to it is one line of a diff, and the
    encoder's C fast path does the work (an indented dump goes through its slow pure-Python path).
    """
    if isinstance(value, _Encoded):
        return value
    pad, end = "  " * (level + 1), "  " * level
    if isinstance(value, dict) and value and level < 2:
        items = (f"{pad}{json.dumps(str(k), ensure_ascii=ascii_only)}: {_layout(v, level + 1, ascii_only)}"
                 for k, v in value.items())
        return "{\n" + ",\n".join(items) + "\n" + end + "}"
    if isinstance(value, list | tuple) and value:
        items = (pad + (v if isinstance(v, _Encoded) else _compact(v, ascii_only)) for v in value)
        return "[\n" + ",\n".join(items) + "\n" + end + "]"
    return _compact(value, ascii_only)


def to_json(analysis: SystemAnalysis, findings: list[Finding], ascii_only: bool = False,
            memo: dict[str, str] | None = None) -> str:
    """Deterministic JSON text of :func:`spec_document`; ``ascii_only`` writes µ, ± and the like as \\u escapes.

    ``memo`` (used only without ``ascii_only``) maps a channel id to its figures as JSON text: an
    entry present is written as it is, a missing one is encoded and added.  A build cache keeps
    it, so that a rebuild encodes only the channels it analysed again.
    """
    memo = memo if memo is not None and not ascii_only else {}
    mine = by_channel(findings)

    def channel(r: ChannelResult) -> _Encoded:
        figures = memo.get(r.channel.id)
        if figures is None:
            figures = memo[r.channel.id] = _compact(r.figures, ascii_only) if ascii_only else figures_text(r)
        head = json.dumps(_channel_head(r, mine), ensure_ascii=ascii_only)  # strings only: no _clean
        return _Encoded(f'{head[:-1]}, "figures": {figures}}}')

    doc = {
        "format": JSON_FORMAT,
        "system": _system_document(analysis),
        "channels": [channel(r) for r in analysis.channels],
        "findings": [_Encoded(json.dumps(finding_dict(f), ensure_ascii=ascii_only)) for f in findings],
    }
    return _layout(doc, 0, ascii_only) + "\n"


def counts(findings: Iterable[Finding]) -> dict[str, int]:
    out = {"error": 0, "warning": 0, "info": 0, "waived": 0}
    for f in findings:
        if f.waived:
            out["waived"] += 1
        else:
            out[f.severity] += 1
    return out


def to_text(analysis: SystemAnalysis, findings: list[Finding]) -> str:
    """Findings grouped by channel (system-wide ones first), then a one-line summary."""
    lines: list[str] = []
    groups: dict[str, list[Finding]] = {}
    for f in findings:
        groups.setdefault(f.channels[0] if len(f.channels) == 1 else "", []).append(f)
    for key in sorted(groups):
        lines.append(key or "system")
        for f in groups[key]:
            tag = f"waived {f.severity}" if f.waived else f.severity
            lines.append(f"  {f.file}:{f.line}: {tag} [{f.rule}] {f.message}")
            if f.waived:
                lines.append(f"      waived: {f.waiver_reason}")
        lines.append("")
    c = counts(findings)
    n = len(analysis.channels)
    lines.append(
        f"{n} channel{'s' if n != 1 else ''} checked: {c['error']} error(s), {c['warning']} warning(s), "
        f"{c['info']} note(s), {c['waived']} waived"
    )
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------ merge-gate formats

SARIF_SCHEMA = "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
SARIF_LEVEL = {"error": "error", "warning": "warning", "info": "note"}


def _uri(prefix: str, file: str) -> str:
    prefix = prefix.strip("/").replace("\\", "/")
    return f"{prefix}/{file}" if prefix and prefix != "." else file


def to_sarif(analysis: SystemAnalysis, findings: list[Finding], prefix: str = "specs") -> str:
    """SARIF 2.1.0 log of the findings; ``prefix`` is the specs folder relative to the repository."""
    rules = all_rules()
    index = {r.id: i for i, r in enumerate(rules)}
    results = []
    for f in findings:
        result: dict[str, Any] = {
            "ruleId": f.rule,
            "level": SARIF_LEVEL[f.severity],
            "message": {"text": f.message},
            "locations": [{"physicalLocation": {
                "artifactLocation": {"uri": _uri(prefix, f.file)},
                "region": {"startLine": max(f.line, 1)},
            }}],
        }
        if f.rule in index:
            result["ruleIndex"] = index[f.rule]
        if f.channels:
            result["properties"] = {"channels": list(f.channels)}
        if f.waived:
            result["suppressions"] = [{"kind": "external", "justification": f.waiver_reason}]
        results.append(result)
    log = {
        "$schema": SARIF_SCHEMA,
        "version": "2.1.0",
        "runs": [{
            "tool": {"driver": {
                "name": "specfold",
                "version": __version__,
                "rules": [{
                    "id": r.id,
                    "name": r.title,
                    "shortDescription": {"text": r.title},
                    "fullDescription": {"text": r.explanation},
                    "defaultConfiguration": {"level": SARIF_LEVEL[r.severity]},
                } for r in rules],
            }},
            "results": results,
        }],
    }
    return json.dumps(log, indent=2, ensure_ascii=False) + "\n"


_NOT_XML = re.compile("[^\t\n\r\u0020-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")
"""Characters XML 1.0 cannot carry, even escaped (the Char production, XML 1.0 section 2.2)."""


def xml_text(text: str) -> str:
    """``text`` with every character XML 1.0 cannot carry written visibly (ESC as ``\\x1b``), so a
    control character in a spec cannot make the JUnit report unreadable."""
    return _NOT_XML.sub(lambda m: f"\\x{ord(m.group(0)):02x}" if ord(m.group(0)) < 0x100
                        else f"\\u{ord(m.group(0)):04x}", text)


def _fails(f: Finding, fail_on: str) -> bool:
    return not f.waived and fail_on != "never" and SEVERITY_RANK[f.severity] <= SEVERITY_RANK[fail_on]


def to_junit(analysis: SystemAnalysis, findings: list[Finding], fail_on: str = "error",
             prefix: str = "specs") -> str:
    """JUnit XML: a test case per (channel, rule); see the module docstring for what fails."""
    rules = [r.id for r in all_rules()]
    subjects = [(r.channel.id, _uri(prefix, r.channel.source.file)) for r in analysis.channels]
    by_case: dict[tuple[str, str], list[Finding]] = {}
    for f in findings:
        for cid in f.channels or ("",):
            by_case.setdefault((cid, f.rule), []).append(f)
    if any(cid == "" for cid, _ in by_case):
        subjects.append(("", _uri(prefix, "system.toml")))
    suite = ET.Element("testsuite", name="specfold check")
    n = failures = skipped = 0
    for cid, classname in subjects:
        for rule in rules:
            case = ET.SubElement(suite, "testcase", classname=classname, name=f"{cid or 'system'} {rule}")
            n += 1
            found = by_case.get((cid, rule), [])
            failing = [f for f in found if _fails(f, fail_on)]
            if failing:
                failures += 1
                el = ET.SubElement(case, "failure", message=failing[0].message, type=failing[0].severity)
                el.text = "\n".join(f"{f.file}:{f.line}: {f.severity} [{f.rule}] {f.message}" for f in failing)
            elif found and all(f.waived for f in found):
                skipped += 1
                ET.SubElement(case, "skipped", message="waived: " + found[0].waiver_reason)
            elif found:
                out = ET.SubElement(case, "system-out")
                out.text = "\n".join(f"{f.severity} [{f.rule}] {f.message}" for f in found)
    suite.set("tests", str(n))
    suite.set("failures", str(failures))
    suite.set("errors", "0")
    suite.set("skipped", str(skipped))
    root = ET.Element("testsuites", name="specfold", tests=str(n), failures=str(failures), errors="0",
                      skipped=str(skipped))
    root.append(suite)
    for el in root.iter():  # every text and attribute from a spec file, made fit for XML 1.0
        el.text = xml_text(el.text) if el.text else el.text
        for name, value in el.attrib.items():
            el.set(name, xml_text(value))
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"
