"""What a spec tree may hold besides plain files: symbolic links are refused wherever they are (one
policy, said in every message, and nothing of a link's target is ever read or shown); files that are
not regular files are refused without blocking; old Mac (CR-only) line endings read like any other."""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import pytest

from generator import load
from generator.cli import EXIT_BAD_INPUT, main

from .conftest import MINIMAL

SECRET = "CI_JOB_TOKEN=do-not-print-me"


def _outside(tmp_path: Path) -> Path:
    """A file outside the tree, as a CI job's environment file would be."""
    secret = tmp_path / "environment"
    secret.write_text(f"{SECRET}\n[system]\nname = \"x\"\n", encoding="utf-8")
    return secret


def _check(capsys: pytest.CaptureFixture[str], tree: Path, *more: str) -> tuple[int, str]:
    code = main(["check", str(tree), *more])
    out, err = capsys.readouterr()
    assert SECRET not in out + err  # never: not in a message, not as a source line
    return code, err


def test_a_linked_system_file_is_refused_and_never_read(minimal_tree: Path, tmp_path: Path,
                                                        capsys: pytest.CaptureFixture[str]) -> None:
    (minimal_tree / "system.toml").unlink()
    (minimal_tree / "system.toml").symlink_to(_outside(tmp_path))
    code, err = _check(capsys, minimal_tree)
    assert code == EXIT_BAD_INPUT
    assert "system.toml: system.toml is a symbolic link; specfold reads only regular files" in err
    for argv in (["build", str(minimal_tree), "-o", str(tmp_path / "site")], ["export", str(minimal_tree)],
                 ["propose", str(minimal_tree)], ["diff", str(MINIMAL), str(minimal_tree)]):
        assert main(argv) == EXIT_BAD_INPUT, argv
        out, err = capsys.readouterr()
        assert SECRET not in out + err and "symbolic link" in err, argv


def test_a_linked_system_file_inside_the_tree_is_refused_too(minimal_tree: Path,
                                                              capsys: pytest.CaptureFixture[str]) -> None:
    (minimal_tree / "shared.toml").write_bytes((minimal_tree / "system.toml").read_bytes())
    (minimal_tree / "system.toml").unlink()
    (minimal_tree / "system.toml").symlink_to("shared.toml")
    code, err = _check(capsys, minimal_tree)
    assert code == EXIT_BAD_INPUT and "system.toml is a symbolic link" in err


def test_linked_channel_files_and_folders_are_refused_by_name(minimal_tree: Path, tmp_path: Path,
                                                              capsys: pytest.CaptureFixture[str]) -> None:
    channels = minimal_tree / "channels"
    (channels / "ACC-2.md").symlink_to(channels / "ACC-1.md")  # inside the tree: still a link
    (channels / "OUT-1.md").symlink_to(_outside(tmp_path))  # outside it
    elsewhere = tmp_path / "more"
    elsewhere.mkdir()
    shutil.copyfile(channels / "TEMP-1.md", elsewhere / "TEMP-2.md")
    (channels / "more").symlink_to(elsewhere, target_is_directory=True)
    code, err = _check(capsys, minimal_tree)
    assert code == EXIT_BAD_INPUT
    for rel in ("channels/ACC-2.md", "channels/OUT-1.md", "channels/more"):
        assert f"{rel}: {rel} is a symbolic link" in err, rel
    assert "3 problems" in err


def test_a_linked_channels_folder_is_refused(minimal_tree: Path, tmp_path: Path,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    shutil.move(minimal_tree / "channels", tmp_path / "real-channels")
    (minimal_tree / "channels").symlink_to(tmp_path / "real-channels", target_is_directory=True)
    code, err = _check(capsys, minimal_tree)
    assert code == EXIT_BAD_INPUT and "channels: channels is a symbolic link" in err


def test_the_specs_folder_itself_may_be_a_link(minimal_tree: Path, tmp_path: Path,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    # the folder named on the command line is the user's choice; links inside it are not
    (tmp_path / "specs-link").symlink_to(minimal_tree, target_is_directory=True)
    code, _ = _check(capsys, tmp_path / "specs-link")
    assert code in (0, 1)


def test_a_link_in_a_git_revision_is_refused_as_on_disk(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    repo = tmp_path / "repo"
    shutil.copytree(MINIMAL, repo / "specs")
    (repo / "specs" / "system.toml").unlink()
    (repo / "specs" / "system.toml").symlink_to(_outside(tmp_path))

    def git(*args: str) -> None:
        subprocess.run(["git", *args], cwd=repo, check=True, capture_output=True)

    git("init", "-q")
    git("-c", "user.email=t@example.invalid", "-c", "user.name=t", "add", "-A")
    git("-c", "user.email=t@example.invalid", "-c", "user.name=t", "commit", "-qm", "linked")
    monkeypatch.chdir(repo)
    assert main(["diff", "HEAD", str(MINIMAL)]) == EXIT_BAD_INPUT
    out, err = capsys.readouterr()
    assert "system.toml is a symbolic link" in err and SECRET not in out + err
    assert str(tmp_path) not in err  # the link's target is not shown either


def test_a_named_pipe_is_refused_without_waiting(minimal_tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    if not hasattr(os, "mkfifo"):
        pytest.skip("no named pipes here")
    os.mkfifo(minimal_tree / "channels" / "PIPE-1.md")  # nobody ever writes to it: a read would block
    code, err = _check(capsys, minimal_tree)
    assert code == EXIT_BAD_INPUT and "channels/PIPE-1.md: not a regular file" in err
    assert main(["build", str(minimal_tree), "-o", str(minimal_tree.parent / "site")]) == EXIT_BAD_INPUT
    assert "channels/PIPE-1.md: not a regular file" in capsys.readouterr().err


@pytest.mark.parametrize("ending", ["\r", "\r\n"], ids=["cr", "crlf"])
def test_old_mac_and_windows_line_endings_read_like_unix_ones(ending: str, minimal_tree: Path,
                                                              capsys: pytest.CaptureFixture[str]) -> None:
    expected = load.load_spec(MINIMAL)
    for path in (minimal_tree / "system.toml", *sorted((minimal_tree / "channels").iterdir())):
        path.write_bytes(path.read_bytes().replace(b"\n", ending.encode()))
    got = load.load_spec(minimal_tree)
    assert got.system == expected.system
    assert [(c.id, c.signal, c.conversion, c.filter, c.notes) for c in got.channels] == \
           [(c.id, c.signal, c.conversion, c.filter, c.notes) for c in expected.channels]
    assert main(["check", str(minimal_tree)]) == main(["check", str(MINIMAL)])


def test_a_cr_only_file_with_a_mistake_names_the_real_line(minimal_tree: Path,
                                                           capsys: pytest.CaptureFixture[str]) -> None:
    acc = minimal_tree / "channels" / "ACC-1.md"
    text = acc.read_text(encoding="utf-8").replace('converter = "ds"', 'converter = "dss"')
    line = text.split("\n").index('converter = "dss"') + 1
    acc.write_bytes(text.replace("\n", "\r").encode())
    code, err = _check(capsys, minimal_tree)
    assert code == EXIT_BAD_INPUT
    assert f"channels/ACC-1.md:{line}:1: converter 'dss' is not defined" in err
    assert "starts with a line of +++" not in err and "\r" not in err
