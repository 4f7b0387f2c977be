"""The writers of spec files (``propose --write``, ``import --write``, ``new``), stopped at every step.

Each writer passes numbered halt points (``generator.files.halt_point``): with
``SPECFOLD_HALT_AT=WRITER:STEP`` the process ends right there (``os._exit``), as a kill or a power
cut would end it.  A test stops a writer at step 1, 2, 3... until a run gets through, and looks at
the disk after each stop: every spec file holds its old content or its new one, never nothing and
never a mix.  No clock decides where a stop lands.  A full disk is an OSError(ENOSPC) from the
patched low-level write, and must leave every file as it was and no temporary file behind.
"""

from __future__ import annotations

import contextlib
import errno
import io
import os
import shutil
from collections.abc import Callable
from pathlib import Path

import pytest

from generator import files
from generator.cli import EXIT_BAD_INPUT, EXIT_FINDINGS, EXIT_OK, main

from .conftest import DATA, MINIMAL, overlay

GOLDEN = DATA / "propose"


def halted(argv: list[str], halt: str | None) -> int:
    """``main(argv)`` in a forked child, ``SPECFOLD_HALT_AT=halt`` in its environment; its exit status.

    A fork starts in a moment (a new interpreter would import numpy and scipy again for every step)
    and a halt there ends only the child."""
    pid = os.fork()
    if pid == 0:  # the child: never returns into pytest
        code = 70
        try:
            if halt is not None:
                os.environ[files.HALT_ENV] = halt
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, 1)
            os.dup2(devnull, 2)
            code = main(argv)
        finally:
            os._exit(code)
    _, status = os.waitpid(pid, 0)
    return os.waitstatus_to_exitcode(status)


def parts(folder: Path) -> list[str]:
    """Temporary files of the spec writers in ``folder``."""
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(files.PART_SUFFIX) or
                  p.name.endswith(".importing"))


def every_step(writer: str, fresh: Callable[[int], list[str]], check: Callable[[int], None]) -> int:
    """Stop ``writer`` at step 1, 2, ... (``fresh(k)`` prepares a tree and gives the arguments) until
    a run completes; ``check(k)`` looks at the disk after each stop.  Returns the number of stops."""
    k = 1
    while True:
        argv = fresh(k)
        code = halted(argv, f"{writer}:{k}")
        if code != files.HALT_EXIT:
            assert code in (EXIT_OK, EXIT_FINDINGS), f"{writer}:{k} ended with {code}"
            return k - 1
        check(k)
        k += 1


# ------------------------------------------------------------------------------- propose --write


def test_propose_write_stopped_at_every_step_leaves_each_file_old_or_new(tmp_path: Path) -> None:
    names = ("DRP-1.md", "NOF-1.md")
    old = {n: (GOLDEN / "input" / "channels" / n).read_text(encoding="utf-8") for n in names}
    new = {n: (GOLDEN / "expected" / "channels" / n).read_text(encoding="utf-8") for n in names}
    assert all(old[n] != new[n] for n in names)
    seen: set[tuple[bool, ...]] = set()

    def fresh(k: int) -> list[str]:
        tree = overlay(GOLDEN / "input", tmp_path / f"t{k}")
        return ["propose", str(tree), "DRP-1", "NOF-1", "--write"]

    def check(k: int) -> None:
        channels = tmp_path / f"t{k}" / "channels"
        now = {n: (channels / n).read_text(encoding="utf-8") for n in names}
        assert all(now[n] in (old[n], new[n]) for n in names), f"step {k}: a file is neither old nor new"
        seen.add(tuple(now[n] == new[n] for n in names))

    warm = overlay(GOLDEN / "input", tmp_path / "warm")
    with contextlib.redirect_stdout(io.StringIO()):  # the designs, found once here, are inherited by each fork
        assert main(["propose", str(warm), "DRP-1", "NOF-1"]) == EXIT_OK
    stops = every_step("propose", fresh, check)
    # four steps a file (made, half written, synced, in place): every one of them was stopped at
    assert stops == 4 * len(names)
    # both files old while anything was being written; then the first in place, then both
    assert seen == {(False, False), (True, False), (True, True)}
    # the next run after a stop finds its work to do again and cleans what the stopped one left
    tree = tmp_path / "t6"  # stopped with both files staged and neither in place
    assert len(parts(tree / "channels")) == 2, sorted(os.listdir(tree / "channels"))
    assert halted(["propose", str(tree), "DRP-1", "NOF-1", "--write"], None) == EXIT_OK
    assert {n: (tree / "channels" / n).read_text(encoding="utf-8") for n in names} == new
    assert parts(tree / "channels") == []


def _disk_fills_after(monkeypatch: pytest.MonkeyPatch, allowed: int) -> list[int]:
    """Make the writers' low-level write take ``allowed`` bytes in all, then fail as a full disk does."""
    written = [0]
    real = files._write_bytes

    def write(fd: int, data: bytes) -> None:
        room = allowed - written[0]
        if len(data) > room:
            real(fd, data[:max(room, 0)])
            written[0] = allowed
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real(fd, data)
        written[0] += len(data)

    monkeypatch.setattr(files, "_write_bytes", write)
    return written


@pytest.mark.parametrize("fills", ["at once", "in the first file", "in the second file"])
def test_propose_write_on_a_full_disk_changes_nothing(fills: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                      capsys: pytest.CaptureFixture[str]) -> None:
    tree = overlay(GOLDEN / "input", tmp_path / "specs")
    before = {p.name: p.read_bytes() for p in (tree / "channels").iterdir()}
    first = len((GOLDEN / "expected" / "channels" / "DRP-1.md").read_bytes())  # written first
    _disk_fills_after(monkeypatch, {"at once": 0, "in the first file": 100, "in the second file": first + 50}[fills])
    code = main(["propose", str(tree), "DRP-1", "NOF-1", "--write"])
    err = capsys.readouterr().err
    assert code == EXIT_BAD_INPUT, err
    assert "no space left on the device" in err and "no file was changed" in err and "Traceback" not in err
    assert {p.name: p.read_bytes() for p in (tree / "channels").iterdir()} == before  # and no temporary file


# ------------------------------------------------------------------------------- import --write


def _exported(tmp_path: Path) -> Path:
    """The minimal tree's channels as specfold export writes them."""
    table = tmp_path / "channels.csv"
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert main(["export", str(MINIMAL)]) == EXIT_OK
    table.write_text(out.getvalue(), encoding="utf-8")
    return table


def _empty_tree(dest: Path) -> Path:
    (dest / "channels").mkdir(parents=True)
    shutil.copyfile(MINIMAL / "system.toml", dest / "system.toml")
    return dest


def test_import_write_stopped_at_every_step_writes_whole_files_or_none(tmp_path: Path) -> None:
    table = _exported(tmp_path)
    done = _empty_tree(tmp_path / "done")
    assert halted(["import", str(table), "--specs", str(done), "--write"], None) == EXIT_OK
    want = {p.name: p.read_text(encoding="utf-8") for p in (done / "channels").iterdir()}
    # one file new, one replacing an older version of itself
    older = want["TEMP-1.md"] + "Older notes.\n"
    assert older != want["TEMP-1.md"]

    def fresh(k: int) -> list[str]:
        tree = _empty_tree(tmp_path / f"t{k}")
        (tree / "channels" / "TEMP-1.md").write_text(older, encoding="utf-8")
        return ["import", str(table), "--specs", str(tree), "--write", "--force"]

    def check(k: int) -> None:
        channels = tmp_path / f"t{k}" / "channels"
        acc = channels / "ACC-1.md"
        assert not acc.exists() or acc.read_text(encoding="utf-8") == want["ACC-1.md"], f"step {k}"
        assert (channels / "TEMP-1.md").read_text(encoding="utf-8") in (older, want["TEMP-1.md"]), f"step {k}"

    assert every_step("import", fresh, check) == 8
    tree = tmp_path / "t8"
    (tree / "channels" / ".ACC-1.md.importing").write_text("what an earlier import left", encoding="utf-8")
    assert halted(["import", str(table), "--specs", str(tree), "--write", "--force"], None) == EXIT_OK
    assert {p.name: p.read_text(encoding="utf-8") for p in (tree / "channels").iterdir()} == want


def test_import_write_on_a_full_disk_writes_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    table = _exported(tmp_path)
    tree = _empty_tree(tmp_path / "specs")
    _disk_fills_after(monkeypatch, 200)
    assert main(["import", str(table), "--specs", str(tree), "--write"]) == EXIT_BAD_INPUT
    assert "no space left on the device" in capsys.readouterr().err
    assert list((tree / "channels").iterdir()) == []


# ------------------------------------------------------------------------------------------ new


def test_new_stopped_at_every_step_never_leaves_a_partial_file(tmp_path: Path) -> None:
    made: list[str] = []

    def fresh(k: int) -> list[str]:
        tree = tmp_path / f"t{k}"
        shutil.copytree(MINIMAL, tree)
        return ["new", "ACC-9", "--specs", str(tree)]

    def check(k: int) -> None:
        target = tmp_path / f"t{k}" / "channels" / "ACC-9.md"
        if target.exists():
            made.append(target.read_text(encoding="utf-8"))

    assert every_step("new", fresh, check) == 4
    whole = (tmp_path / "t4" / "channels" / "ACC-9.md").read_text(encoding="utf-8")
    assert made == [] or all(text == whole for text in made)
    assert whole.startswith("+++\n") and "\n+++\n" in whole[4:]


def test_new_on_a_full_disk_leaves_no_file(minimal_tree: Path, monkeypatch: pytest.MonkeyPatch,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    _disk_fills_after(monkeypatch, 10)
    assert main(["new", "ACC-9", "--specs", str(minimal_tree)]) == EXIT_BAD_INPUT
    assert "no space left on the device" in capsys.readouterr().err
    assert sorted(p.name for p in (minimal_tree / "channels").iterdir()) == ["ACC-1.md", "TEMP-1.md"]


def test_the_writer_never_replaces_a_file_that_appeared(tmp_path: Path) -> None:
    target = tmp_path / "X.md"
    target.write_text("someone else's", encoding="utf-8")
    with pytest.raises(files.SpecError, match="exists already; no file was changed"):
        files.write_files([(target, "mine", False)], "new")
    assert target.read_text(encoding="utf-8") == "someone else's" and parts(tmp_path) == []


def test_a_replaced_file_keeps_its_permissions(tmp_path: Path) -> None:
    target = tmp_path / "X.md"
    target.write_text("old", encoding="utf-8")
    target.chmod(0o640)
    files.write_files([(target, "new", True)], "propose")
    assert target.read_text(encoding="utf-8") == "new" and (target.stat().st_mode & 0o777) == 0o640


def test_leftovers_of_live_writers_are_kept(tmp_path: Path) -> None:
    # a temporary file of a running writer (this process) is not cleaned; a dead one's is
    mine = tmp_path / f".A.md.{os.getpid()}-0123abcd{files.PART_SUFFIX}"
    mine.write_text("being written", encoding="utf-8")
    dead_pid = _dead_pid()
    theirs = tmp_path / f".B.md.{dead_pid}-0123abcd{files.PART_SUFFIX}"
    theirs.write_text("left by a kill", encoding="utf-8")
    stranger = tmp_path / ".B.md.tmp"
    stranger.write_text("not ours", encoding="utf-8")
    assert files.clean_parts(tmp_path) == [theirs]
    assert mine.exists() and stranger.exists()


def _dead_pid() -> int:
    pid = os.fork()
    if pid == 0:
        os._exit(0)
    os.waitpid(pid, 0)
    return pid
