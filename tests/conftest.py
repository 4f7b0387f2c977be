"""Shared fixtures: paths to the demo and to the fixture spec trees."""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
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


@pytest.fixture(autouse=True, scope="session")
def _cache_folder(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    """Builds and checks keep their cache beside the spec folder unless $SPECFOLD_CACHE names one:
    the tests keep theirs in a folder of the session, never beside the demo in the repository
    (child processes inherit it)."""
    folder = tmp_path_factory.mktemp("specfold-cache")
    before = os.environ.get("SPECFOLD_CACHE")
    os.environ["SPECFOLD_CACHE"] = str(folder)
    yield
    if before is None:
        os.environ.pop("SPECFOLD_CACHE", None)
    else:
        os.environ["SPECFOLD_CACHE"] = before
