"""Imports point one way through the pipeline, layer by layer (the chain DEVELOPERS.md draws)."""

from __future__ import annotations

import ast
import re
from pathlib import Path

from .conftest import ROOT

PACKAGE = ROOT / "generator"

LAYERS: tuple[tuple[str, tuple[str, ...]], ...] = (
    ("base", ("errors", "files", "quantities", "schema", "model", "codec")),
    ("read", ("source", "values", "load")),
    ("compute", ("dsp", "analysis")),
    ("check", ("rules",)),
    ("design", ("propose",)),
    ("present", ("report", "charts", "edit", "views", "table", "scaffold", "importing", "exporting", "diff")),
    ("build", ("build",)),
    ("app", ("serve", "docs", "cli", "__main__")),
)
"""The allow-list, in order: a module may import the modules listed before it (in its own layer or
an earlier one), never one listed after it.  A package (dsp, analysis, rules, build) is one entry."""

ORDER = [module for _, modules in LAYERS for module in modules]


def _top(module: Path) -> str:
    return module.relative_to(PACKAGE).with_suffix("").parts[0]


def _imports(module: Path) -> set[str]:
    """The generator modules (top-level names) that ``module`` imports, relative imports resolved."""
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


def test_every_module_has_a_place_in_the_layers() -> None:
    tops = {_top(m) for m in PACKAGE.rglob("*.py")} - {"__init__"}
    assert tops == set(ORDER), (sorted(tops - set(ORDER)), sorted(set(ORDER) - tops))


def test_imports_point_one_way() -> None:
    bad = []
    for module in sorted(PACKAGE.rglob("*.py")):
        top = _top(module)
        if top == "__init__":
            continue
        for target in _imports(module):
            if target != top and target in ORDER and ORDER.index(target) > ORDER.index(top):
                bad.append(f"{module.relative_to(ROOT)} imports {target}, listed after {top}")
    assert not bad, "\n".join(bad)


def test_developers_md_draws_the_same_chain() -> None:
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    drawn = re.search(r"<!-- layers -->\n```\n(.*?)\n```", text, re.S)
    assert drawn, "DEVELOPERS.md lost its layer drawing"
    rows = [line.split(":", 1) for line in drawn.group(1).splitlines() if ":" in line]
    assert [(name.strip(), tuple(m.strip() for m in mods.split(","))) for name, mods in rows] == list(LAYERS)


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
    # the walker must actually resolve relative imports, or the tests above prove nothing
    assert "cli" not in _imports(PACKAGE / "report.py")
    assert {"analysis", "rules"} <= _imports(PACKAGE / "report.py")
    assert "analysis" in _imports(PACKAGE / "rules" / "sampling.py")
    assert "store" in _imports(PACKAGE / "build" / "site.py") or "build" in _imports(PACKAGE / "build" / "site.py")
