"""Shared fixtures: paths to the demo and to the fixture spec trees."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
DATA = Path(__file__).resolve().parent / "data"
DEMO = ROOT / "specs"
MINIMAL = DATA / "minimal"


def overlay(case: Path, dest: Path) -> Path:
    """A spec tree at ``dest``: the minimal fixture with ``case``'s files laid over it.

    ``overlay.txt`` in the case may list ``REMOVE <path>`` lines.
    """
    shutil.copytree(MINIMAL, dest)
    for path in sorted(case.rglob("*")):
        rel = path.relative_to(case)
        if path.is_dir() or rel.name in ("expected.txt", "overlay.txt"):
            continue
        target = dest / rel
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(path, target)
    script = case / "overlay.txt"
    if script.exists():
        for line in script.read_text().splitlines():
            verb, _, arg = line.partition(" ")
            if verb == "REMOVE":
                (dest / arg).unlink()
    return dest


@pytest.fixture
def minimal_tree(tmp_path: Path) -> Path:
    """A writable copy of the minimal fixture tree."""
    dest = tmp_path / "specs"
    shutil.copytree(MINIMAL, dest)
    return dest
