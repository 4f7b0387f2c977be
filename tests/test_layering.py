"""Imports point one way through the pipeline (see DEVELOPERS.md)."""

from __future__ import annotations

import ast
from pathlib import Path

from .conftest import ROOT

PACKAGE = ROOT / "generator"
# module -> the generator modules it must never import (directly)
_SITE = {"charts", "render", "site", "cache"}
FORBIDDEN = {
    "errors": {"quantities", "schema", "model", "load", "dsp", "analysis", "rules", "report", "cli", *_SITE},
    "quantities": {"schema", "model", "load", "dsp", "analysis", "rules", "report", "cli", *_SITE},
    "model": {"load", "dsp", "analysis", "rules", "report", "cli", *_SITE},
    "load": {"dsp", "analysis", "rules", "report", "cli", *_SITE},
    "dsp": {"quantities", "schema", "model", "load", "analysis", "rules", "report", "cli", *_SITE},
    "analysis": {"load", "rules", "report", "cli", "diff", *_SITE},
    "rules": {"load", "report", "cli", "diff", *_SITE},
    "report": {"cli", "diff", *_SITE},
    "diff": {"cli", *_SITE},
    "propose": {"report", "cli", "diff", *_SITE},
    "charts": {"load", "rules", "report", "render", "site", "cache", "cli"},
    "render": {"load", "site", "cache", "cli"},
    "site": {"cli"},
    "cache": {"site", "cli", "charts", "propose", "report"},
    "files": {"quantities", "schema", "model", "load", "dsp", "analysis", "rules", "report", "cli", "diff",
              "propose", *_SITE},
    "scaffold": {"dsp", "analysis", "rules", "report", "cli", "diff", "table", "serve", *_SITE},
    "table": {"cli", "diff", "serve", *_SITE},
    "serve": {"cli", "table", "scaffold"},
}


def _top(module: Path) -> str:
    rel = module.relative_to(PACKAGE).with_suffix("")
    return rel.parts[0]


def _imports(module: Path) -> set[str]:
    tree = ast.parse(module.read_text(encoding="utf-8"))
    here = module.relative_to(PACKAGE).parts
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level == 0 and node.module and node.module.startswith("generator"):
                parts = node.module.split(".")[1:]
            elif node.level:
                base = list(here[:-1])[: len(here) - node.level]
                parts = [*base, *(node.module.split(".") if node.module else [])]
            else:
                continue
            if parts:
                found.add(parts[0])
            else:
                found.update(a.name for a in node.names)
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("generator."):
                    found.add(alias.name.split(".")[1])
    return found


def test_imports_point_one_way() -> None:
    bad = []
    for module in sorted(PACKAGE.rglob("*.py")):
        top = _top(module)
        for target in _imports(module):
            if target != top and target in FORBIDDEN.get(top, set()):
                bad.append(f"{module.relative_to(ROOT)} imports {target}")
    assert not bad, "\n".join(bad)


def test_only_cli_prints() -> None:
    offenders = []
    for module in sorted(PACKAGE.rglob("*.py")):
        if module.name in ("cli.py", "docs.py", "__main__.py"):
            continue
        for node in ast.walk(ast.parse(module.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id == "print":
                offenders.append(f"{module.relative_to(ROOT)}:{node.lineno}")
    assert not offenders, offenders


def test_the_checker_sees_a_violation() -> None:
    # the walker must actually resolve relative imports, or the test above proves nothing
    assert "cli" not in _imports(PACKAGE / "report.py")
    assert {"analysis", "rules"} <= _imports(PACKAGE / "report.py")
    assert "analysis" in _imports(PACKAGE / "rules" / "sampling.py")
