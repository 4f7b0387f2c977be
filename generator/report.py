"""Findings and figures -> text and the JSON contract (format 1).

Pure functions returning strings; the CLI prints them.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable
from typing import Any

from .analysis import SystemAnalysis
from .rules import Finding, channel_status

JSON_FORMAT = 1


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


def spec_document(analysis: SystemAnalysis, findings: list[Finding]) -> dict[str, Any]:
    """The JSON contract shared by ``check --format json`` and the site's data/spec.json."""
    system = analysis.spec.system
    doc: dict[str, Any] = _clean({
        "format": JSON_FORMAT,
        "system": {
            "name": system.name,
            "revision": system.revision,
            "totals": analysis.totals(),
            "converters": [
                {"id": c.id, "type": c.type, "architecture": c.architecture, "bits": c.bits,
                 "sampling": c.sampling, "max_rate_hz": c.max_rate}
                for c in system.converters.values()
            ],
            "links": [{"id": lk.id, "capacity_bps": lk.capacity_bps} for lk in system.links.values()],
            "stores": [{"id": s.id, "capacity_bytes": s.capacity_bytes} for s in system.stores.values()],
        },
        "channels": [
            {
                "id": r.channel.id,
                "kind": r.channel.kind,
                "file": r.channel.source.file,
                "status": channel_status(findings, r.channel.id),
                "figures": r.figures,
            }
            for r in analysis.channels
        ],
        "findings": [finding_dict(f) for f in findings],
    })
    return doc


def to_json(analysis: SystemAnalysis, findings: list[Finding], ascii_only: bool = False) -> str:
    """Deterministic JSON text of :func:`spec_document`; ``ascii_only`` writes µ, ± and the like as \\u escapes."""
    doc = spec_document(analysis, findings)
    return json.dumps(doc, indent=2, ensure_ascii=ascii_only, allow_nan=False) + "\n"


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
