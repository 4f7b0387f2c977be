"""The output folder: what the builder refuses, links it never follows, and builds killed mid-way.

A build writes into a temporary sibling ``.NAME.building-*`` (carrying ``.specfold-building``
with its process id until it is complete), swaps it in for the old site and deletes the old one
marker last.  So a build ended at any step leaves the old site or the new one complete, and what it
leaves beside it is recognisable and removed by the next build.  The tests stop builds at each of
the site writer's halt points in turn (``SPECFOLD_HALT_AT=site:N``), never at a moment chosen by a
clock.
"""

from __future__ import annotations

import errno
import hashlib
import os
import shutil
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest

from generator import files
from generator.build import output, pages, site
from generator.cli import EXIT_BAD_INPUT, main
from generator.errors import SpecError
from generator.files import write as write_inside

from .conftest import DEMO, MINIMAL, ROOT
from .test_writers import halted


def snapshot(folder: Path) -> dict[str, str]:
    """Relative path -> sha256 of every file under ``folder`` (links are not followed)."""
    out: dict[str, str] = {}
    for dirpath, _dirs, names in os.walk(folder):
        for name in names:
            path = Path(dirpath) / name
            out[path.relative_to(folder).as_posix()] = hashlib.sha256(path.read_bytes()).hexdigest()
    return out


def leftovers(out: Path) -> list[str]:
    return sorted(p.name for p in out.parent.iterdir() if p.name.startswith(f".{out.name}."))


# ---------------------------------------------------------------------------------------------
# Refusals
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("holds", [".git", "pyproject.toml"])
def test_refuses_a_repository_root_even_with_the_marker(tmp_path: Path, holds: str,
                                                        capsys: pytest.CaptureFixture[str]) -> None:
    repo = tmp_path / "repo"
    repo.mkdir()
    (repo / holds).mkdir() if holds == ".git" else (repo / holds).write_text("[project]\n", encoding="utf-8")
    (repo / output.MARKER).write_text(output.MARKER_TEXT, encoding="utf-8")  # even a marker does not make it ours
    before = snapshot(repo)
    with pytest.raises(SpecError, match="root of a repository"):
        site.build(MINIMAL, repo)
    assert main(["build", str(MINIMAL), "-o", str(repo)]) == EXIT_BAD_INPUT
    assert "refusing to build into" in capsys.readouterr().err
    assert snapshot(repo) == before and leftovers(repo) == []


def test_refuses_this_repository_and_the_demo_specs(tmp_path: Path) -> None:
    for target, reason in ((ROOT, "specs folder"), (DEMO, "specs folder"), (DEMO / "channels", "did not make")):
        with pytest.raises(SpecError, match=reason):
            output.check_output(target, DEMO)
    with pytest.raises(SpecError, match="root of a repository"):
        output.check_output(ROOT, tmp_path / "specs")  # specs kept elsewhere: the repository is still refused


def test_refuses_the_home_folder(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                 capsys: pytest.CaptureFixture[str]) -> None:
    home = tmp_path / "home"
    home.mkdir()
    monkeypatch.setenv("HOME", str(home))  # Path.home() reads HOME on POSIX
    with pytest.raises(SpecError, match="home folder"):
        site.build(MINIMAL, home)  # refused although it is empty
    assert main(["build", str(MINIMAL), "-o", str(home)]) == EXIT_BAD_INPUT
    assert "home folder" in capsys.readouterr().err
    assert list(home.iterdir()) == [] and leftovers(home) == []


def test_refuses_the_file_system_root(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SpecError, match="root of the file system"):
        output.check_output(Path("/"), MINIMAL)
    assert main(["build", str(MINIMAL), "-o", "/"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "refusing to build into /" in err and "Traceback" not in err


def test_refuses_an_unmarked_folder_and_a_linked_marker(tmp_path: Path) -> None:
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("keep", encoding="utf-8")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    (elsewhere / output.MARKER).write_text(output.MARKER_TEXT, encoding="utf-8")
    (out / output.MARKER).symlink_to(elsewhere / output.MARKER)  # a marker by link is no marker
    with pytest.raises(SpecError, match="did not make"):
        site.build(MINIMAL, out)
    assert (out / "notes.txt").read_text(encoding="utf-8") == "keep"


# ---------------------------------------------------------------------------------------------
# Links inside an old site
# ---------------------------------------------------------------------------------------------


def test_links_in_the_old_site_are_never_followed(tmp_path: Path) -> None:
    out = tmp_path / "site"
    site.build(MINIMAL, out)
    built = snapshot(out)
    precious = tmp_path / "precious"
    precious.mkdir()
    (precious / "ACC-1.html").write_text("not yours", encoding="utf-8")
    (precious / "data.bin").write_bytes(b"\x00keep")
    secret = tmp_path / "secret.txt"
    secret.write_text("do not publish", encoding="utf-8")
    outside_page = tmp_path / "outside.html"
    outside_page.write_text("outside", encoding="utf-8")
    shutil.rmtree(out / "channels")
    (out / "channels").symlink_to(precious, target_is_directory=True)
    (out / "index.html").unlink()
    (out / "index.html").symlink_to(outside_page)
    (out / ".gitignore").symlink_to(secret)  # a kept file, but by link: not carried over
    guarded = {p: snapshot(p) for p in (precious,)}
    site.build(MINIMAL, out)
    assert snapshot(precious) == guarded[precious]
    assert secret.read_text(encoding="utf-8") == "do not publish"
    assert outside_page.read_text(encoding="utf-8") == "outside"
    assert not (out / "channels").is_symlink() and not (out / "index.html").is_symlink()
    assert not (out / ".gitignore").exists()
    assert snapshot(out) == built  # rebuilt in full: the same site
    assert leftovers(out) == []


# ---------------------------------------------------------------------------------------------
# Leftovers of killed builds
# ---------------------------------------------------------------------------------------------


def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_leftovers_with_the_marker_are_cleaned_others_kept(tmp_path: Path) -> None:
    out = tmp_path / "site"
    site.build(MINIMAL, out)
    dead = tmp_path / ".site.building-dead"
    dead.mkdir()
    (dead / output.BUILDING_MARKER).write_text(f"{_dead_pid()}\n", encoding="utf-8")
    (dead / "index.html").write_text("half", encoding="utf-8")
    live = tmp_path / ".site.building-live"
    live.mkdir()
    (live / output.BUILDING_MARKER).write_text(f"{os.getpid()}\n", encoding="utf-8")  # a build still running
    old = tmp_path / ".site.old-x"
    old.mkdir()
    (old / output.MARKER).write_text(output.MARKER_TEXT, encoding="utf-8")
    stranger = tmp_path / ".site.building-notours"
    stranger.mkdir()
    (stranger / "thesis.tex").write_text("mine", encoding="utf-8")
    site.build(MINIMAL, out)
    assert leftovers(out) == [".site.building-live", ".site.building-notours"]
    assert (stranger / "thesis.tex").read_text(encoding="utf-8") == "mine"


def test_an_old_site_caught_between_the_two_renames_comes_back(tmp_path: Path) -> None:
    out = tmp_path / "site"
    site.build(MINIMAL, out)
    built = snapshot(out)
    out.rename(tmp_path / ".site.old-abc")  # as if killed right after the first rename of a swap
    site.build(MINIMAL, out)
    assert snapshot(out) == built and leftovers(out) == []


def _big_tree(dest: Path, channels: int = 300) -> Path:
    """The demo with its channels copied under new ids up to ``channels`` files."""
    shutil.copytree(DEMO, dest)
    demo = sorted((DEMO / "channels").glob("*.md"))
    for i in range(channels - len(demo)):
        src = demo[i % len(demo)]
        shutil.copyfile(src, dest / "channels" / f"{src.stem}-X{i:03d}.md")
    return dest


SITE_STEPS = 8
"""Halt points a build that replaces a site passes (generator.build.output and .pages): folder made,
marked, the channel pages written, every page written, unmarked, old site aside, new site in, old
site emptied but its marker."""


def _halted_build(command: list[str], step: int | None) -> int:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    if step is not None:
        env[files.HALT_ENV] = f"site:{step}"
    proc = subprocess.run(command, cwd=ROOT, env=env, capture_output=True, text=True, timeout=600)
    assert step is not None or proc.returncode == 0, proc.stderr
    return proc.returncode


def _every_build_step(specs: Path, out: Path, run: Callable[[list[str], int | None], int]) -> int:
    """Build ``specs`` into ``out`` (which holds another site), stopped at step 1, 2, ... until a build
    completes; after each stop the site at ``out`` is the old one whole (or, stopped between the two
    renames of the swap, the old one whole beside it, put back by the next build), never a mix, and
    never carries the building marker.  Returns the number of stops."""
    previous = snapshot(out)
    pristine = out.parent / "pristine"  # a sibling not named like the site's own temporary folders
    shutil.copytree(out, pristine, symlinks=True)
    command = [sys.executable, "-m", "generator", "build", str(specs), "-o", str(out)]
    step = 1
    while (code := run(command, step)) == files.HALT_EXIT:
        left = leftovers(out)
        if out.exists():
            now = snapshot(out)
            assert now == previous or (now != previous and _whole(out)), f"step {step}"
            assert output.BUILDING_MARKER not in now, f"step {step}: the building marker is in the site"
            if now != previous:  # stopped after the swap: the old site back, so the next step has work
                shutil.rmtree(out)
                shutil.copytree(pristine, out, symlinks=True)
        else:  # between the two renames: the old site whole, aside (the next build puts it back)
            aside = [name for name in left if ".old-" in name]
            assert len(aside) == 1 and snapshot(out.parent / aside[0]) == previous, f"step {step}"
        step += 1
    assert code == 0
    assert leftovers(out) == []  # the completed build cleared what each stopped one left
    assert _whole(out)
    return step - 1


def _edited(specs: Path) -> None:
    """An edit that changes a channel page, the shared pages and spec.json."""
    acc = specs / "channels" / "ACC-1.md"
    if not acc.exists():
        acc = sorted((specs / "channels").glob("*.md"))[0]
    acc.write_text(acc.read_text(encoding="utf-8").replace('title = "', 'title = "Edited: ', 1), encoding="utf-8")


def test_a_build_stopped_at_every_step_leaves_a_whole_site(tmp_path: Path) -> None:
    specs = tmp_path / "specs"
    shutil.copytree(MINIMAL, specs)
    out = tmp_path / "site"
    site.build(specs, out)
    _edited(specs)
    expected = tmp_path / "expected"
    site.build(specs, expected)

    def forked(command: list[str], step: int | None) -> int:
        return halted(command[3:], f"site:{step}" if step is not None else None)

    assert _every_build_step(specs, out, forked) == SITE_STEPS
    assert snapshot(out) == snapshot(expected)


@pytest.mark.slow
def test_a_large_build_stopped_at_every_step_leaves_a_whole_site(tmp_path: Path) -> None:
    # 300 channels: pages rendered by forked workers, spec.json and the cache by a side worker
    specs = _big_tree(tmp_path / "specs")
    out = tmp_path / "site"
    assert _halted_build([sys.executable, "-m", "generator", "build", str(specs), "-o", str(out)], None) == 0
    _edited(specs)
    assert _every_build_step(specs, out, _halted_build) == SITE_STEPS


def test_a_writer_never_makes_a_removed_build_folder_again(tmp_path: Path) -> None:
    # A worker of a killed build may still be writing when the next build clears its folder: the
    # write must fail rather than make the folder again (it would be left with no marker, for good).
    root = tmp_path / ".site.building-x"
    root.mkdir()
    write_inside(root, "channels/A.html", "page")  # folders below the root are made as needed
    assert (root / "channels" / "A.html").read_text(encoding="utf-8") == "page"
    shutil.rmtree(root)
    with pytest.raises(FileNotFoundError):
        write_inside(root, "book/b.html", "late")
    with pytest.raises(FileNotFoundError):
        write_inside(root, "index.html", "late")
    assert not root.exists()


def test_pool_workers_end_with_a_killed_build(tmp_path: Path) -> None:
    # A build's forked workers are killed with it (PR_SET_PDEATHSIG on Linux), so SIGKILL on the
    # build leaves no worker writing on.  Reference: the kernel's process table (os.kill(pid, 0)).
    if not sys.platform.startswith("linux"):
        pytest.skip("parent-death signal is Linux only")
    # the worker is busy (a 30 s task) when its build is killed, as a page worker mid-chunk would be;
    # an idle worker would end anyway, on the end of its task pipe
    code = ("import os, time; import multiprocessing; from generator.build import pages; "
            "p = multiprocessing.get_context('fork').Pool(1, initializer=pages._die_with_parent, "
            "initargs=(os.getpid(),)); pid = p.apply(os.getpid); "
            "p.apply_async(time.sleep, (30,)); time.sleep(0.2); print(pid, flush=True); time.sleep(60)")
    child = subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, stdout=subprocess.PIPE, text=True)
    worker = 0
    try:
        assert child.stdout is not None
        worker = int(child.stdout.readline())
        os.kill(worker, 0)  # alive while the build runs
        child.send_signal(signal.SIGKILL)
        child.wait()
        deadline = time.monotonic() + 5
        while _running(worker) and time.monotonic() < deadline:
            time.sleep(0.02)
        assert not _running(worker), "a worker outlived its killed build"
    finally:
        if child.poll() is None:
            child.kill()
        if worker and _running(worker):
            os.kill(worker, signal.SIGKILL)  # a failed run leaves nothing behind


def _running(pid: int) -> bool:
    """Whether ``pid`` is a live process (a zombie, dead but not yet reaped by init, is not)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return False
    return state != "Z"


def _whole(out: Path) -> bool:
    """Whether ``out`` is a whole site: its marker, its pages and its JSON contract, no building marker."""
    return ((out / output.MARKER).is_file() and (out / "index.html").is_file() and (out / pages.SPEC_JSON).is_file()
            and not (out / output.BUILDING_MARKER).exists())


# ---------------------------------------------------------------------------------------------
# File names from ids
# ---------------------------------------------------------------------------------------------


def test_ids_made_of_dots_stay_inside_the_site(tmp_path: Path) -> None:
    # the loader admits '.', '_' and '-' in ids, so '..' and '.' are ids; their pages stay in channels/
    specs = tmp_path / "specs"
    shutil.copytree(MINIMAL, specs)
    for stem in ("..", ".", "...", ".hidden"):
        shutil.copyfile(specs / "channels" / "ACC-1.md", specs / "channels" / f"{stem}.md")
    out = tmp_path / "deep" / "site"
    out.parent.mkdir()
    site.build(specs, out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["deep", "specs"]
    assert sorted(p.name for p in out.parent.iterdir()) == ["site"]
    pages = sorted(p.name for p in (out / "channels").iterdir())
    assert len(pages) == len(list((specs / "channels").glob("*.md")))
    assert all(not name.startswith(".") and name.endswith(".html") for name in pages), pages


@pytest.mark.parametrize("rel", ["../escape.html", "/tmp/escape.html", "channels/../../escape.html", "."])
def test_the_writer_refuses_a_path_out_of_the_site(tmp_path: Path, rel: str) -> None:
    root = tmp_path / "site"
    root.mkdir()
    with pytest.raises(SpecError, match="outside the site folder"):
        write_inside(root, rel, "x")
    assert not (tmp_path / "escape.html").exists()


# ---------------------------------------------------------------------------------------------
# Two builds into one output, and what killed builds leave
# ---------------------------------------------------------------------------------------------


def test_a_second_build_into_the_same_output_is_refused_while_one_runs(tmp_path: Path,
                                                                         capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "site"
    site.build(MINIMAL, out)
    before = snapshot(out)
    with output.output_lock(out.resolve()):  # as a build in another process holds it
        with pytest.raises(SpecError, match="another specfold build is writing"):
            site.build(MINIMAL, out, fresh=True)
        assert main(["build", str(MINIMAL), "-o", str(out), "--fresh"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "another specfold build is writing into" in err and "Traceback" not in err
    assert snapshot(out) == before and leftovers(out) == []
    site.build(MINIMAL, out, fresh=True)  # the lock is gone with the holder
    assert snapshot(out) == before


def test_leftovers_a_killed_swap_can_leave_are_all_recognised(tmp_path: Path) -> None:
    out = tmp_path / "site"
    site.build(MINIMAL, out)
    # an old site emptied down to its marker (killed while it was being deleted)
    emptied = tmp_path / ".site.old-emptied"
    emptied.mkdir()
    (emptied / output.MARKER).write_text(output.MARKER_TEXT, encoding="utf-8")
    # a complete new site unmarked as building and not yet swapped in
    complete = tmp_path / ".site.building-complete"
    shutil.copytree(out, complete)
    # a folder made and never marked
    (tmp_path / ".site.building-empty").mkdir()
    # an older specfold's published site that kept the building marker of a dead process
    (out / output.BUILDING_MARKER).write_text(f"{_dead_pid()}\n", encoding="utf-8")
    site.build(MINIMAL, out, fresh=True)
    assert leftovers(out) == [] and not (out / output.BUILDING_MARKER).exists()


@pytest.mark.parametrize("length", [240, 255])
def test_an_output_name_near_the_name_limit(length: int, tmp_path: Path) -> None:
    # the temporary siblings would need ".NAME.building-XXXXXXXX", over 255 bytes: they are named
    # by a digest of the name instead, and still recognised as this output's
    out = tmp_path / ("s" * length)
    site.build(MINIMAL, out)
    assert (out / "index.html").is_file()
    prefix = output.sibling_prefix(out.resolve())
    assert len(f"{prefix}building-12345678".encode()) <= 255
    (tmp_path / f"{prefix}old-x").mkdir()
    (tmp_path / f"{prefix}old-x" / output.MARKER).write_text(output.MARKER_TEXT, encoding="utf-8")
    site.build(MINIMAL, out, fresh=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == [out.name]


# ---------------------------------------------------------------------------------------------
# File-system errors: one sentence, exit 2, the old site intact
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("where", "err", "words"), [
    ("mkdtemp", errno.EROFS, "read-only"),          # a read-only file system
    ("mkdtemp", errno.EACCES, "permission denied"),  # a folder not writable
    ("replace", errno.EPERM, "not permitted"),       # an immutable output folder (chattr +i)
    ("write", errno.ENOSPC, "no space left"),        # the disk fills while pages are written
    ("write", errno.EDQUOT, "quota"),
])
def test_file_system_errors_are_one_sentence_and_leave_the_old_site(
        where: str, err: int, words: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "site"
    site.build(MINIMAL, out)
    before = snapshot(out)
    failure = OSError(err, os.strerror(err), str(tmp_path))
    if where == "mkdtemp":
        def mkdtemp(*args: object, **kwargs: object) -> str:
            raise failure
        monkeypatch.setattr(output.tempfile, "mkdtemp", mkdtemp)
    elif where == "replace":
        real_replace = os.replace

        def replace(src: object, dst: object) -> None:
            if Path(str(src)) == out.resolve():  # moving the old site aside
                raise failure
            real_replace(src, dst)  # type: ignore[arg-type]
        monkeypatch.setattr(output.os, "replace", replace)
    else:
        real_write = pages.write
        count = [0]

        def write(root: Path, rel: str, data: str | bytes) -> None:
            count[0] += 1
            if count[0] > 3:
                raise failure
            real_write(root, rel, data)
        monkeypatch.setattr(pages, "write", write)
    code = main(["build", str(MINIMAL), "-o", str(out), "--fresh"])
    stderr = capsys.readouterr().err
    assert code == EXIT_BAD_INPUT, stderr
    assert stderr.count("\n") == 1 and f"cannot build into {out}" in stderr and words in stderr, stderr
    assert "previous site" in stderr and "Traceback" not in stderr
    assert snapshot(out) == before and leftovers(out) == []
