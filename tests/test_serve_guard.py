"""The live preview keeps going and keeps to itself: any failed rebuild shows on the page and the next
save is built; requests for another host name, for the build cache or with a malformed path are
refused with a status, and no more than MAX_CONNECTIONS are handled at once.

Nothing here waits on a clock: rebuilds are called directly or through a scripted watcher, and
requests go over real sockets to a preview on a free port."""

from __future__ import annotations

import http.client
import shutil
import socket
from collections.abc import Iterator
from pathlib import Path

import pytest

from generator import serve
from generator.serve import Preview

from .conftest import MINIMAL


@pytest.fixture(scope="module")
def preview(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Preview]:
    """One preview for the module (a test that rebuilds it leaves it built and healthy)."""
    tmp_path = tmp_path_factory.mktemp("preview")
    specs = tmp_path / "specs"
    shutil.copytree(MINIMAL, specs)
    p = Preview(specs, tmp_path / "site", port=0, interval=3600)  # the watcher never fires on its own
    p.start()
    try:
        yield p
    finally:
        p.stop()


def _request(p: Preview, path: str, host: str | None = "127.0.0.1") -> tuple[int, str]:
    conn = http.client.HTTPConnection("127.0.0.1", p.port, timeout=30)
    try:
        conn.putrequest("GET", path, skip_host=True, skip_accept_encoding=True)
        if host is not None:
            conn.putheader("Host", host.replace("PORT", str(p.port)))
        conn.endheaders()
        resp = conn.getresponse()
        return resp.status, resp.read().decode("utf-8", "replace")
    finally:
        conn.close()


def _raw(p: Preview, request_line: bytes) -> bytes:
    with socket.create_connection(("127.0.0.1", p.port), timeout=30) as s:
        s.sendall(request_line + b"\r\nHost: 127.0.0.1\r\nConnection: close\r\n\r\n")
        chunks = []
        while chunk := s.recv(65536):
            chunks.append(chunk)
    return b"".join(chunks)


def test_a_failed_rebuild_shows_on_the_page_and_the_next_one_works(preview: Preview,
                                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    real_build = serve.build

    def broken(*_: object, **__: object) -> None:
        raise RuntimeError("boom in the renderer")

    monkeypatch.setattr(serve, "build", broken)
    before = preview.version
    preview.rebuild()
    assert preview.version == before + 1
    status, page = _request(preview, "/index.html")
    assert status == 200 and "specfold failed" in page and "RuntimeError: boom in the renderer" in page
    assert "bug in specfold" in page
    monkeypatch.setattr(serve, "build", real_build)
    preview.rebuild()
    status, page = _request(preview, "/channels/ACC-1.html")
    assert status == 200 and "Test accelerometer" in page and "specfold failed" not in page


def test_the_watcher_outlives_a_failing_scan_and_a_failing_build(tmp_path: Path,
                                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    # scripted scans: the first raises (the folder vanished mid-scan), then a change, then the same;
    # the first rebuild raises a bug; the watcher must go on to the second change and build it
    start = (("channels/A.md", 1, 9),)
    changed = (("channels/A.md", 2, 9),)
    again = (("channels/A.md", 3, 9),)
    script: list[object] = [OSError("scandir failed"), changed, changed, again, again]
    preview = Preview(tmp_path, tmp_path / "site", interval=0.001)
    built: list[int] = []
    said: list[str] = []
    preview.on_event = said.append

    def fake_snapshot(specs: Path) -> object:
        step = script.pop(0) if script else again
        if isinstance(step, Exception):
            raise step
        return step

    def fake_rebuild() -> None:
        built.append(len(script))
        if len(built) == 1:
            raise ZeroDivisionError("a bug outside build()")
        preview._stop.set()

    monkeypatch.setattr(serve, "snapshot", fake_snapshot)
    monkeypatch.setattr(serve, "SETTLE_S", 0.001)
    monkeypatch.setattr(preview, "rebuild", fake_rebuild)
    preview._watch(start)
    assert built == [2, 0]  # after the change settled, and after the next one
    assert any("scandir failed" in s and "still watching" in s for s in said)
    assert any("ZeroDivisionError" in s for s in said)


@pytest.mark.parametrize("host", ["127.0.0.1:PORT", "localhost:PORT", "127.0.0.1", "LOCALHOST"])
def test_loopback_hosts_are_served(preview: Preview, host: str) -> None:
    assert _request(preview, "/index.html", host)[0] == 200


@pytest.mark.parametrize("host", ["evil.example", "evil.example:PORT", "127.0.0.1.evil.example:PORT",
                                  "127.0.0.1:1", "", None])
def test_other_hosts_are_refused(preview: Preview, host: str | None) -> None:
    # DNS rebinding: a page of evil.example whose name now resolves to 127.0.0.1 sends its own Host
    status, body = _request(preview, "/index.html", host)
    assert status == 403 and "127.0.0.1 or localhost" in body


@pytest.mark.parametrize("path", ["/.specfold-site", "/%2especfold-site", "/channels/../.specfold-site",
                                  "/.gitignore", "/.secret/"])
def test_markers_and_dot_files_are_never_served(preview: Preview, path: str) -> None:
    (preview.output / ".gitignore").write_text("*\n", encoding="utf-8")  # a dot-file in the site, as a user may add
    assert (preview.output / ".specfold-site").is_file()  # the marker is there
    status, body = _request(preview, path)
    assert status == 404 and "specfold-site" not in body.lower()


@pytest.mark.parametrize("line", [b"GET /%00 HTTP/1.1", b"GET /index.html%00.html HTTP/1.1",
                                  b"GET /%ff%fe HTTP/1.1", b"GET index.html HTTP/1.1",
                                  b"GET http://127.0.0.1/ HTTP/1.1", b"GET /a\\..\\b HTTP/1.1"])
def test_a_malformed_path_gets_400(preview: Preview, line: bytes) -> None:
    answer = _raw(preview, line)
    assert answer.startswith(b"HTTP/1.0 400") or answer.startswith(b"HTTP/1.1 400"), answer[:200]
    assert _request(preview, "/index.html")[0] == 200  # and the server goes on


def test_connections_past_the_cap_get_503(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(serve, "MAX_CONNECTIONS", 2)
    specs = tmp_path / "specs"
    shutil.copytree(MINIMAL, specs)
    p = Preview(specs, tmp_path / "site", port=0, interval=3600)
    p.start()
    idle = []
    try:
        # two connections that send nothing hold both slots (each handler waits for its request line)
        # (connections are accepted in the order they arrive, so both are taken in before the third)
        idle = [socket.create_connection(("127.0.0.1", p.port), timeout=30) for _ in range(2)]
        third = _raw(p, b"GET /index.html HTTP/1.1")
        assert third.startswith(b"HTTP/1.0 503"), third[:100]
    finally:
        for s in idle:
            s.close()
        p.stop()
