"""Reference tables of the README, generated from the registries so they cannot drift.

``python -m generator.docs`` rewrites the marked sections of README.md in place; a test
fails when the README is out of date.
"""

from __future__ import annotations

import re
import sys
from collections.abc import Callable
from pathlib import Path

from . import schema
from .analysis import FIGURES
from .rules import all_rules
from .table import spelling_table


def figure_table() -> str:
    rows = ["| figure key | meaning | formula | source |", "|---|---|---|---|"]
    for info in sorted(FIGURES.values(), key=lambda i: i.key):
        rows.append(f"| `{info.key}` | {info.label} | `{info.formula}` | {info.source} |")
    return "\n".join(rows)


def rule_table() -> str:
    rows = ["| rule | severity | what it checks |", "|---|---|---|"]
    for r in all_rules():
        rows.append(f"| `{r.id}` | {r.severity} | {r.explanation} |")
    return "\n".join(rows)


def sections() -> dict[str, str]:
    return {
        "channel-keys": schema.reference_table(schema.CHANNEL_KEYS),
        "system-keys": schema.reference_table(schema.SYSTEM_KEYS),
        "figures": figure_table(),
        "rules": rule_table(),
        "csv-headers": spelling_table(),
    }


def _replacement(body: str) -> Callable[[re.Match[str]], str]:
    return lambda m: m.group(1) + body + m.group(2)


def sync(text: str) -> str:
    """Replace each ``<!-- NAME:begin -->...<!-- NAME:end -->`` section with its generated table."""
    for name, body in sections().items():
        pattern = re.compile(rf"(<!-- {name}:begin -->\n).*?(\n<!-- {name}:end -->)", re.S)
        if not pattern.search(text):
            raise ValueError(f"README has no {name} section markers")
        text = pattern.sub(_replacement(body), text)
    return text


if __name__ == "__main__":
    readme = Path(sys.argv[1] if len(sys.argv) > 1 else "README.md")
    readme.write_text(sync(readme.read_text(encoding="utf-8")), encoding="utf-8")
