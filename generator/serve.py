"""Live preview: build the site, serve it on the loopback address, rebuild when a spec changes.

The watcher scans the spec folder's file times and sizes every ``interval`` seconds and rebuilds
the whole site (:func:`generator.build.site.build`, a fraction of a second for a few hundred channels)
when anything changed.  Served HTML pages get a small script, added as they are sent and never
written into the built files, that asks ``/__specfold/version`` twice a second and reloads the
page when the number changes.  While the specs have errors every page is an error page listing
the messages (HTML-escaped); the server keeps running and recovers on the next good edit.

Only 127.0.0.1 is ever bound: the preview is for the engineer at this machine.  A request must
name that address (or ``localhost``) in its Host header, so a web page whose own name was made to
resolve to 127.0.0.1 (DNS rebinding) cannot read the preview; nothing whose name starts with a dot
is served (the build cache, its manifest, the site's markers); a path that is not a plain URL path
gets 400; at most :data:`MAX_CONNECTIONS` requests are handled at once and an idle connection is
closed after :data:`IDLE_S` seconds.

Any failure of a rebuild, bad specs or a bug, shows on the page and the watcher keeps watching: the
next save is built again.
"""

from __future__ import annotations

import html
import threading
import time
from collections.abc import Callable
from contextlib import suppress
from dataclasses import dataclass, field
from functools import partial
from http import HTTPStatus
from http.server import SimpleHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any
from urllib.parse import unquote

from .build.site import build
from .errors import BUG, SpecError, SpecErrors, bug_summary
from .files import walk

HOST = "127.0.0.1"
ALLOWED_HOSTS = ("127.0.0.1", "localhost")
"""Names a request's Host header may give (with or without the port)."""
MAX_CONNECTIONS = 32
"""Requests handled at once; past it a connection gets 503 (a browser opens about six per host)."""
IDLE_S = 30
"""Seconds a connection may stay silent before it is closed, freeing its thread."""
SETTLE_S = 0.05
"""Pause between the scans that must agree before a rebuild, so a save still being written is not built."""
VERSION_PATH = "/__specfold/version"
RELOAD_SCRIPT = (
    "<script>(function(){var v=null;function poll(){fetch('" + VERSION_PATH + "',{cache:'no-store'})"
    ".then(function(r){return r.text();}).then(function(t){if(v===null){v=t;}else if(t!==v){location.reload();}})"
    ".catch(function(){}).then(function(){setTimeout(poll,500);});}poll();})();</script>"
)

Event = Callable[[str], None]
"""``on_event(message)``: what the preview reports (built, rebuilt, errors); the CLI prints it."""


def snapshot(specs: Path) -> tuple[tuple[str, int, int], ...]:
    """Name, modification time and size of every file under ``specs``, sorted: what the watcher
    compares (:func:`generator.files.walk`: 10,000 files scan in about 0.05 s)."""
    out = []
    for parts, entry in walk(specs):
        try:
            if entry.is_file():
                st = entry.stat()
                out.append(("/".join(parts), st.st_mtime_ns, st.st_size))
        except OSError:
            continue  # a file removed while scanning shows up on the next scan
    return tuple(sorted(out))


def error_page(errors: list[SpecError], heading: str | None = None) -> str:
    """The page shown while the specs do not build: every message, escaped."""
    items = "\n".join(f"<li><pre>{html.escape(e.format())}</pre></li>" for e in errors)
    n = len(errors)
    title = heading or f"{n} problem{'s' if n != 1 else ''} in the specs"
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>specfold: "
        f"{html.escape(title)}</title><style>body{{font-family:sans-serif;margin:2em;max-width:60em}}"
        "pre{white-space:pre-wrap;background:#fff3f3;border-left:4px solid #b00;padding:.5em}</style></head><body>"
        f"<h1>{html.escape(title)}</h1>"
        "<p>The site is rebuilt as soon as the files are saved again.</p>"
        f"<ol>\n{items}\n</ol></body></html>\n"
    )


def internal_error(exc: BaseException) -> SpecError:
    """A rebuild that failed through a bug in specfold, as a message for the error page."""
    return SpecError(f"{bug_summary(exc)}. {BUG}; 'specfold build --traceback' shows where it happened")


def inject(page: bytes) -> bytes:
    """The page with the reload script before ``</body>`` (or at the end)."""
    script = RELOAD_SCRIPT.encode()
    at = page.rfind(b"</body>")
    return page[:at] + script + page[at:] if at >= 0 else page + script


@dataclass
class Preview:
    """A running preview: build state, the HTTP server and the watcher thread."""

    specs: Path
    output: Path
    port: int = 0
    interval: float = 0.5
    on_event: Event | None = None
    version: int = 0
    errors: list[SpecError] = field(default_factory=list)
    heading: str | None = None
    last_build_s: float = 0.0
    _server: ThreadingHTTPServer | None = None
    _threads: list[threading.Thread] = field(default_factory=list)
    _stop: threading.Event = field(default_factory=threading.Event)
    _lock: threading.Lock = field(default_factory=threading.Lock)

    def _say(self, message: str) -> None:
        if self.on_event is not None:
            self.on_event(message)

    def rebuild(self) -> None:
        """Build once; on bad specs keep the messages for the error page instead of raising."""
        started = time.perf_counter()
        heading = None
        try:
            summary = build(self.specs, self.output)
            errors: list[SpecError] = []
            note = f"built {summary.channels} channels"
        except SpecErrors as errs:
            errors = list(errs.errors)
            note = f"{len(errors)} problem(s) in the specs; showing them in the browser"
        except SpecError as err:
            errors, heading = [err], "the site cannot be built"
            note = f"cannot build: {err.format()}"
        except Exception as exc:  # a bug: shown on the page, and the next save is built again
            errors, heading = [internal_error(exc)], "specfold failed"
            note = f"cannot build: {errors[0].format()}"
        with self._lock:
            self.errors, self.heading = errors, heading
            self.version += 1
            self.last_build_s = time.perf_counter() - started
        self._say(f"{note} in {self.last_build_s:.2f} s")

    def start(self) -> int:
        """First build, then serve and watch in daemon threads; returns the port actually bound."""
        # taken before the first build, so an edit saved while it runs is not missed
        seen = snapshot(self.specs)
        self.rebuild()
        handler = partial(_Handler, preview=self)
        self._server = _Server((HOST, self.port), handler)
        self.port = int(self._server.server_address[1])
        serving = threading.Thread(target=self._server.serve_forever, kwargs={"poll_interval": 0.2},
                                   name="specfold-serve", daemon=True)
        watching = threading.Thread(target=self._watch, args=(seen,), name="specfold-watch", daemon=True)
        self._threads = [serving, watching]
        for t in self._threads:
            t.start()
        return self.port

    def _watch(self, seen: tuple[tuple[str, int, int], ...]) -> None:
        """Watch until stopped; nothing a scan or a rebuild raises ends the watching."""
        while not self._stop.is_set():
            try:
                seen = self._watch_once(seen)
            except Exception as exc:  # the watcher outlives any failure, and says so
                self._say(f"watching the specs failed ({type(exc).__name__}: {exc}); still watching")
                self._stop.wait(self.interval)

    def _watch_once(self, seen: tuple[tuple[str, int, int], ...]) -> tuple[tuple[str, int, int], ...]:
        """Wait for a change and rebuild; returns the scan the rebuild saw."""
        while not self._stop.wait(self.interval):
            now = snapshot(self.specs)
            if now == seen:
                continue
            # Editors truncate then write: build only once two scans SETTLE_S apart agree, so a
            # half-written file does not flash a false error page before the real one.
            while not self._stop.wait(SETTLE_S):
                again = snapshot(self.specs)
                if again == now:
                    break
                now = again
            else:
                return seen
            self.rebuild()
            return now
        return seen

    def stop(self) -> None:
        """Stop watching and serving; returns when both threads have ended."""
        self._stop.set()
        if self._server is not None:
            self._server.shutdown()
            self._server.server_close()
        for t in self._threads:
            t.join(timeout=5)

    @property
    def url(self) -> str:
        return f"http://{HOST}:{self.port}/"


class _Server(ThreadingHTTPServer):
    """A threading server that handles at most :data:`MAX_CONNECTIONS` requests at once."""

    daemon_threads = True

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        self._slots = threading.BoundedSemaphore(MAX_CONNECTIONS)
        super().__init__(*args, **kwargs)

    def process_request(self, request: Any, client_address: Any) -> None:
        if not self._slots.acquire(blocking=False):
            with suppress(OSError):  # too many at once: a short answer, then the connection is closed
                request.sendall(b"HTTP/1.0 503 Service Unavailable\r\nContent-Length: 0\r\nRetry-After: 1\r\n\r\n")
            self.shutdown_request(request)
            return
        try:
            super().process_request(request, client_address)
        except BaseException:
            self._slots.release()
            raise

    def process_request_thread(self, request: Any, client_address: Any) -> None:
        try:
            super().process_request_thread(request, client_address)
        finally:
            self._slots.release()

    def handle_error(self, request: Any, client_address: Any) -> None:
        pass  # a client that went away mid-answer is no news; the handler answers every error itself


class _Handler(SimpleHTTPRequestHandler):
    """Static files from the output folder, the version endpoint, and the reload script in HTML."""

    timeout = IDLE_S

    def __init__(self, *args: Any, preview: Preview, **kwargs: Any) -> None:
        self.preview = preview
        super().__init__(*args, directory=str(preview.output), **kwargs)

    def log_message(self, format: str, *args: Any) -> None:
        pass  # a request log would bury the build messages

    def _refusal(self) -> tuple[HTTPStatus, str] | None:
        """Why this request is refused, or None: a Host other than the loopback address, a path that
        is not a plain URL path, or a name starting with a dot (cache, manifest, markers)."""
        name, _, port = (self.headers.get("Host") or "").strip().lower().partition(":")
        if name not in ALLOWED_HOSTS or (port and port != str(self.preview.port)):
            return HTTPStatus.FORBIDDEN, "the preview answers only requests for 127.0.0.1 or localhost"
        raw = self.path.split("?", 1)[0].split("#", 1)[0]
        try:
            path = unquote(raw, errors="strict")
        except UnicodeDecodeError:
            return HTTPStatus.BAD_REQUEST, "the path is not UTF-8"
        if not raw.startswith("/") or any(ord(c) < 0x20 or c == "\x7f" for c in path) or "\\" in path:
            return HTTPStatus.BAD_REQUEST, "not a path of this site"
        if any(part.startswith(".") for part in path.split("/") if part):
            return HTTPStatus.NOT_FOUND, "no such page"
        return None

    def _send(self, body: bytes, content_type: str, status: HTTPStatus = HTTPStatus.OK) -> None:
        self.send_response(status)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(len(body)))
        self.send_header("Cache-Control", "no-store")
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    def do_HEAD(self) -> None:
        self.do_GET()

    def do_GET(self) -> None:
        refused = self._refusal()
        if refused is not None:
            self.send_error(*refused)
            return
        try:
            self._get()
        except (OSError, ValueError):
            # a file removed by a rebuild mid-answer, or a name the file system cannot take
            with suppress(OSError):
                self.send_error(HTTPStatus.NOT_FOUND, "no such page")

    def _get(self) -> None:
        path = self.path.split("?", 1)[0].split("#", 1)[0]
        with self.preview._lock:
            version, errors, heading = self.preview.version, list(self.preview.errors), self.preview.heading
        if path == VERSION_PATH:
            self._send(str(version).encode(), "text/plain; charset=utf-8")
            return
        wants_page = path.endswith((".html", "/"))
        if errors and wants_page:
            self._send(inject(error_page(errors, heading).encode("utf-8")), "text/html; charset=utf-8")
            return
        if wants_page:
            target = Path(self.translate_path(path))
            if target.is_dir():
                target = target / "index.html"
            try:
                page = target.read_bytes()
            except OSError:
                self.send_error(HTTPStatus.NOT_FOUND, "no such page")
                return
            self._send(inject(page), "text/html; charset=utf-8")
            return
        super().do_GET()
