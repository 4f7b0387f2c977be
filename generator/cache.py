"""The build cache: what a site keeps so the next build does only the work that changed.

A site carries ``.specfold-cache/``.  ``manifest.json`` holds a key for the tool (version,
generator source, templates, the plotly bundle, library versions), a key for the inputs
(system.toml and every channel file), a key per channel page and book section, the findings (a
no-op build reports them without checking again) and the seal of every cache file:

- ``shared.pickle``: system.toml as loaded, and the numerical memos of :mod:`generator.dsp.memo`
  (filter prototypes, least orders...), so a rebuild meeting only known filters imports no scipy;
- ``channels-NN.pickle``: :data:`RESULT_SHARDS` shards by a hash of the channel file's path, each
  channel as loaded and analysed with its figures as JSON text (the memo of
  :func:`generator.report.to_json`) and its channel-rule findings, keyed by tool, system.toml and
  the file;
- ``inputs.json``: each channel file's stat beside its key, so a rebuild reads only the files
  whose stat changed (:func:`input_keys`, :func:`known_stats`).

Unpickling runs code named in the file, so a cache file is unpickled only when its seal, an
HMAC-SHA256 under a key kept outside the site (:func:`signing_key`, made once per user and
machine, readable by its owner only), is the one the manifest records.  A site copied from
elsewhere (another machine, a CI cache restored from another job) or a cache file planted in the
output folder is then never unpickled: its files are parsed again.  Anything else that does not
match means parsing again too.  The cache's bytes may differ between builds of the same
inputs (pickle's object sharing, set order under hash randomisation); the published pages never do.
"""

from __future__ import annotations

import copyreg
import hashlib
import hmac
import importlib.metadata
import io
import json
import os
import pickle
import secrets
import time
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

from . import __version__, render
from .analysis import ChannelResult, SystemAnalysis
from .dsp import memo
from .files import carry, read_whole, regular_file, write
from .load import SYSTEM_FILE, channel_files
from .model import System
from .rules import Finding

CACHE = ".specfold-cache"
MANIFEST = f"{CACHE}/manifest.json"
MANIFEST_FORMAT = 3
SHARED_CACHE = f"{CACHE}/shared.pickle"
"""system.toml as loaded, and the filter prototypes and least orders found: a rebuild under the
same system.toml does not parse it again, nor import scipy for filters it has already met."""
RESULT_SHARDS = 64
"""Every channel as loaded and analysed with its figures as JSON text, keyed by
its file, in this many pickle files by a hash of the file's path: a rebuild neither parses nor
analyses a file whose key (tool, system.toml, the file) is unchanged, and writes again only the
shards whose entries changed."""
INPUTS_CACHE = f"{CACHE}/inputs.json"
"""Each channel file's size, times and inode beside its key, and when the build took them: a
rebuild reads and hashes only the files whose stat changed (:func:`input_keys`)."""
RACY_NS = 2_000_000_000
"""A file whose change time is later than this before the start of the build that hashed it is
hashed again, stat or not: more than a file system's clock tick (2 s on FAT), and short enough
that only a file saved just before a build is read twice."""
LIBRARIES = ("numpy", "scipy", "jinja2", "markdown", "nh3", "plotly", "markupsafe")
"""Installed libraries whose versions are part of the tool key."""


def digest(*parts: str | bytes) -> str:
    h = hashlib.sha256()
    for part in parts:
        data = part.encode("utf-8") if isinstance(part, str) else part
        h.update(len(data).to_bytes(8, "little"))
        h.update(data)
    return h.hexdigest()


KEY_FILE = "cache-key"
KEY_BYTES = 32


def key_folder() -> Path:
    """Where this user's signing key lives: ``$XDG_CACHE_HOME/specfold``, else ``~/.cache/specfold``."""
    base = os.environ.get("XDG_CACHE_HOME")
    return (Path(base) if base else Path.home() / ".cache") / "specfold"


def signing_key() -> bytes | None:
    """This user's key for sealing build caches, made on first use (32 random bytes, mode 0600);
    None when it can be neither read nor made (then builds neither read nor write a cache)."""
    path = key_folder() / KEY_FILE
    try:
        if not regular_file(path):
            path.parent.mkdir(parents=True, exist_ok=True)
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
            with os.fdopen(fd, "wb") as fh:
                fh.write(secrets.token_bytes(KEY_BYTES))
    except FileExistsError:
        pass  # another build made it meanwhile
    except (OSError, RuntimeError):  # RuntimeError: no home folder to be found
        return None
    try:
        data = read_whole(path) if regular_file(path) else b""
    except OSError:
        return None
    return data if len(data) >= KEY_BYTES else None


def seal(data: bytes, key: bytes) -> str:
    """HMAC-SHA256 of a cache file under the signing key [RFC 2104], hex."""
    return hmac.new(key, data, hashlib.sha256).hexdigest()


def tool_key(templates: Path, bundle: Path) -> str:
    """What the tool contributes to every page: version, generator source, ``templates``, the
    plotly ``bundle``, and the versions of the libraries that compute or write part of it."""
    parts: list[str | bytes] = [__version__]
    package = Path(__file__).resolve().parent
    for folder in (package, templates):
        for path in sorted(folder.rglob("*")):
            if path.is_file() and path.suffix in (".py", ".html", ".css", ".js"):
                parts += [path.relative_to(folder).as_posix(), path.read_bytes()]
    shipped = bundle.stat()
    parts.append(f"plotly {shipped.st_size} {shipped.st_mtime_ns}")
    for library in LIBRARIES:  # what they compute or write reaches the pages and the cache
        try:
            parts.append(f"{library} {importlib.metadata.version(library)}")
        except importlib.metadata.PackageNotFoundError:
            parts.append(f"{library} unknown")
    return digest(*parts)


Stat = tuple[int, int, int, int]
"""A file's size, modification and change times (ns) and inode: what tells it is untouched."""


@dataclass(frozen=True)
class Inputs:
    """Keys of the spec tree: the whole of it, system.toml, and each channel file by its path."""

    tree: str
    system: str
    files: dict[str, str]
    stats: dict[str, Stat]
    """each channel file's :data:`Stat`, taken before it was read"""
    taken_at: int
    """wall clock (ns) before the first file was looked at"""


def _stat(path: Path) -> Stat:
    st = os.lstat(path)
    return (st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_ino)


def input_keys(specs: Path, known: Mapping[str, tuple[Stat, str]] | None = None) -> Inputs | None:
    """Hash every file the build reads; None when one cannot be read (no shortcut is taken then).

    ``known`` (:func:`known_stats`) holds channel files' keys by the stat a previous build took
    before reading them: a file whose stat is still that one is not read again.  The change time
    moves on every write and cannot be set back by its owner, so an equal stat means an unchanged
    file, except for a write within the file system's clock tick of the previous read, which
    :func:`known_stats` rules out (common practice: the stat cache of version-control tools).
    """
    taken_at = time.time_ns()
    held = known or {}
    files: dict[str, str] = {}
    stats: dict[str, Stat] = {}
    try:
        system = digest(read_whole(specs / SYSTEM_FILE))
        for p in channel_files(specs):
            rel = p.relative_to(specs).as_posix()
            stats[rel] = mark = _stat(p)
            old = held.get(rel)
            files[rel] = old[1] if old is not None and old[0] == mark else digest(read_whole(str(p)))
    except OSError:
        return None
    return Inputs(digest(system, *(f"{k} {v}" for k, v in files.items())), system, files, stats, taken_at)


def read_sealed(path: Path, sealed: object, key: bytes | None) -> bytes | None:
    """A cache file's bytes when its seal under this user's ``key`` is ``sealed`` (the manifest's);
    None when there is no key, or the file is missing, unreadable or not sealed by this key."""
    if key is None or not isinstance(sealed, str) or not regular_file(path):
        return None
    try:
        data = read_whole(path)
    except OSError:
        return None
    return data if hmac.compare_digest(seal(data, key), sealed) else None


def known_stats(old_site: Path, previous: Mapping[str, Any] | None, key: bytes | None) -> dict[str, tuple[Stat, str]]:
    """The channel files' stats and keys the current site's build took (its sealed
    :data:`INPUTS_CACHE`), without those whose change time falls within :data:`RACY_NS` of that
    build's start: a write so close to the read may have left the stat as it was."""
    listed = previous.get("cache") if previous is not None else None
    data = read_sealed(old_site / INPUTS_CACHE, listed.get("inputs"), key) if isinstance(listed, dict) else None
    if data is None:
        return {}
    try:
        table = json.loads(data)
        trusted_before = int(table["taken_at"]) - RACY_NS
        out: dict[str, tuple[Stat, str]] = {}
        for rel, (size, mtime, ctime, ino, file_key) in table["files"].items():
            if isinstance(ctime, int) and ctime < trusted_before and isinstance(file_key, str):
                out[rel] = ((int(size), int(mtime), ctime, int(ino)), file_key)
        return out
    except (ValueError, TypeError, KeyError, AttributeError):
        return {}


def write_inputs(tmp: Path, reuse: Reuse) -> str | None:
    """Write the inputs' stats and keys (:data:`INPUTS_CACHE`) into ``tmp``; returns the seal, or
    None (nothing written) without input keys or a signing key."""
    inputs = reuse.inputs
    if reuse.key is None or inputs is None:
        return None
    table = {"taken_at": inputs.taken_at,
             "files": {rel: [*inputs.stats[rel], key] for rel, key in inputs.files.items()}}
    data = (json.dumps(table, sort_keys=True, separators=(",", ":")) + "\n").encode("utf-8")
    write(tmp, INPUTS_CACHE, data)
    return seal(data, reuse.key)


def read_manifest(output: Path) -> dict[str, Any] | None:
    """The manifest in ``output``, or None when there is no usable one (the caller checks that
    ``output`` is a site at all)."""
    path = output / MANIFEST
    if not regular_file(path):
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("format") != MANIFEST_FORMAT or not isinstance(data.get("pages"), dict):
        return None
    return data


def unchanged(previous: dict[str, Any] | None, tool: str, inputs: Inputs | None) -> bool:
    """Whether the site ``previous`` describes was built by this very tool from these very inputs."""
    return (previous is not None and inputs is not None and previous.get("tool") == tool
            and previous.get("inputs") == inputs.tree and isinstance(previous.get("findings"), list))


@dataclass
class Cached:
    """What a build took from the current site's cache."""

    results: dict[str, ChannelResult] = field(default_factory=dict)
    """channel file -> its loaded channel and per-channel analysis, for files whose key holds"""
    figures: dict[str, str] = field(default_factory=dict)
    """channel id -> its figures as JSON text (the memo of :func:`report.to_json`)"""
    findings: dict[str, tuple[Finding, ...]] = field(default_factory=dict)
    """channel id -> its channel-rule findings before waivers (:func:`rules.channel_rule_findings`)"""
    system: System | None = None
    designs: object = None
    shards: dict[str, tuple[str, list[tuple[str, str]]]] = field(default_factory=dict)
    """shard file -> (its seal, the (file, key) pairs it held)"""

    def _unchanged(self, analysis: SystemAnalysis) -> Iterator[str]:
        """Ids of the channels ``analysis`` took from this cache unchanged: the very channel object
        (so the same file under the same system.toml and tool) with an equal budget."""
        now = analysis.by_id
        for r in self.results.values():
            cid = r.channel.id
            if cid in now and now[cid].channel is r.channel and now[cid].budget == r.budget:
                yield cid

    def figures_for(self, analysis: SystemAnalysis) -> dict[str, str]:
        """The kept figures text of the unchanged channels: the starting memo of :func:`report.to_json`."""
        return {cid: self.figures[cid] for cid in self._unchanged(analysis) if cid in self.figures}

    def findings_for(self, analysis: SystemAnalysis) -> dict[str, tuple[Finding, ...]]:
        """The kept channel-rule findings of the unchanged channels: what a channel rule returns
        depends on the channel's result and system.toml alone (the contract in :mod:`.rules`)."""
        return {cid: self.findings[cid] for cid in self._unchanged(analysis) if cid in self.findings}


@dataclass
class Reuse:
    """What a build may take from the site it replaces."""

    tool: str
    inputs: Inputs | None
    previous: dict[str, Any] | None
    old_site: Path
    key: bytes | None = None
    """The signing key (:func:`signing_key`); without one no cache is read or written."""
    reused: int = 0
    _result_keys: dict[str, str] = field(default_factory=dict, repr=False)

    def page_key(self, result: ChannelResult, ctx: render.Context, rel: str) -> str | None:
        """A channel page's key: its channel's :meth:`result_key` (tool, system.toml, the file), the
        page path, and what other channels bear on the page (status, budget, findings and the pages
        they link to, proposal)."""
        ch = result.channel
        source = self.result_key(ch.source.file)
        if source is None:
            return None
        linked = [(repr(f), [ctx.paths.get(c, "") for c in f.channels]) for f in ctx.by_channel.get(ch.id, ())]
        return digest(source, rel, ctx.status[ch.id], repr(result.budget), repr(linked),
                      repr(ctx.proposals.get(ch.id)))

    def section_key(self, section: render.BookSection, channel_keys: list[str | None]) -> str | None:
        """A book section's key: its path, its label and the keys of its channels' pages (which
        cover everything a sheet shows)."""
        members = [channel_keys[i] for i in section.channels]
        if any(k is None for k in members):
            return None
        return digest(self.tool, "book section", section.path, section.label, *(k or "" for k in members))

    def result_key(self, rel: str) -> str | None:
        """Key of one channel file's loaded channel and per-channel analysis."""
        if self.inputs is None or rel not in self.inputs.files:
            return None
        key = self._result_keys.get(rel)
        if key is None:
            key = self._result_keys[rel] = digest(self.tool, "channel result", self.inputs.system, rel,
                                                  self.inputs.files[rel])
        return key

    def system_key(self) -> str | None:
        return None if self.inputs is None else digest(self.tool, "system", self.inputs.system)

    def _unpickle(self, rel: str, sealed: object) -> Any:
        """A cache file of the current site, unpickled only when its seal under this user's key is
        the manifest's; None when it is missing, damaged, or not sealed by this key."""
        data = read_sealed(self.old_site / rel, sealed, self.key) if self.previous is not None else None
        if data is None:
            return None  # not a file this user's builds wrote: never unpickled
        try:
            return pickle.loads(data)  # sealed by this user's key, checked above
        except Exception:  # a damaged cache only means parsing again
            return None

    def load_cache(self) -> Cached:
        """What the current site's cache still holds for this build: the loaded system.toml (when
        it is unchanged), the filter prototypes, and the channels whose keys still hold."""
        cached = Cached()
        listed = self.previous.get("cache") if self.previous is not None else None
        if not isinstance(listed, dict):
            return cached
        shared = self._unpickle(SHARED_CACHE, listed.get("shared"))
        if isinstance(shared, dict):
            system = shared.get("system")
            if isinstance(system, tuple) and len(system) == 2 and system[0] == self.system_key():
                cached.system = system[1] if isinstance(system[1], System) else None
            cached.designs = shared.get("designs")
        shards = listed.get("shards")
        for name, sealed in sorted(shards.items()) if isinstance(shards, dict) else ():
            entries = self._unpickle(name, sealed) if isinstance(name, str) else None
            if not isinstance(entries, dict):
                continue
            held: list[tuple[str, str]] = []
            for rel, entry in entries.items():
                if not (isinstance(entry, tuple) and len(entry) == 4 and isinstance(entry[1], ChannelResult)
                        and isinstance(entry[2], str) and isinstance(entry[3], (tuple, type(None)))):
                    continue
                held.append((rel, entry[0]))
                if entry[0] == self.result_key(rel):
                    cid = entry[1].channel.id
                    cached.results[rel] = entry[1]
                    cached.figures[cid] = entry[2]
                    if entry[3] is not None:
                        cached.findings[cid] = entry[3]
            cached.shards[name] = (sealed, held)
        return cached

    def take(self, rel: str, key: str | None, tmp: Path) -> bool:
        """Link (or copy) an unchanged page from the current site; False when it must be rendered."""
        if key is None or self.previous is None or self.previous["pages"].get(rel) != key:
            return False
        return carry(os.path.join(self.old_site, rel), os.path.join(tmp, rel))  # str: 10,000 Paths cost 0.2 s


def _proxy(items: dict[str, Any]) -> MappingProxyType[str, Any]:
    return MappingProxyType(items)


def _pickled(value: object) -> bytes:
    buffer = io.BytesIO()
    pickler = pickle.Pickler(buffer, protocol=pickle.HIGHEST_PROTOCOL)
    table = copyreg.dispatch_table.copy()
    table[MappingProxyType] = lambda m: (_proxy, (dict(m),))
    pickler.dispatch_table = table
    pickler.dump(value)
    return buffer.getvalue()


def shard_of(rel: str) -> str:
    """The cache file holding the channel file ``rel`` (a stable hash of its path)."""
    return f"{CACHE}/channels-{hashlib.sha256(rel.encode('utf-8')).digest()[0] % RESULT_SHARDS:02d}.pickle"


def write_shards(tmp: Path, reuse: Reuse, analysis: SystemAnalysis, figures: dict[str, str],
                 cached: Cached, findings: Mapping[str, tuple[Finding, ...]]) -> dict[str, str] | None:
    """Write the channel shards of the build cache into ``tmp``; returns file -> seal, or None
    (nothing written) without inputs keys or a signing key.  Each entry holds a channel file's key,
    its result, its ``figures`` text and its channel-rule ``findings`` (None when not given).

    A shard whose entries are the very ones read from the current site is carried over (linked)
    rather than pickled again."""
    signing = reuse.key
    if signing is None or reuse.inputs is None:
        return None
    shards: dict[str, dict[str, tuple[str, ChannelResult, str, tuple[Finding, ...] | None]]] = {}
    for r in analysis.channels:
        rel, cid = r.channel.source.file, r.channel.id
        key = reuse.result_key(rel)
        if key is not None and cid in figures:
            shards.setdefault(shard_of(rel), {})[rel] = (key, r, figures[cid], findings.get(cid))
    listing: dict[str, str] = {}
    for name, entries in sorted(shards.items()):
        old = cached.shards.get(name)
        if (old is not None and old[1] == [(rel, e[0]) for rel, e in entries.items()]
                and carry(reuse.old_site / name, tmp / name)):
            listing[name] = old[0]
            continue
        data = _pickled(entries)
        write(tmp, name, data)
        listing[name] = seal(data, signing)
    return listing


def write_shared(tmp: Path, reuse: Reuse, analysis: SystemAnalysis) -> str | None:
    """Write the loaded system and this process's numerical memos (``dsp.memo``) into ``tmp``;
    returns the file's seal, or None (nothing written) without a signing key.  Written last, once
    every page (and with it every chart's filter designs) is done."""
    if reuse.key is None:
        return None
    data = _pickled({"system": (reuse.system_key(), analysis.spec.system), "designs": memo.known()})
    write(tmp, SHARED_CACHE, data)
    return seal(data, reuse.key)


def manifest_text(reuse: Reuse, keys: dict[str, str], count: int, channels: int, findings: list[Finding],
                  listing: dict[str, Any]) -> str:
    """The manifest of a new site: keys, page count, the findings and the cache files' seals."""
    manifest = {
        "cache": listing,
        "format": MANIFEST_FORMAT,
        "tool": reuse.tool,
        "inputs": reuse.inputs.tree if reuse.inputs is not None else None,
        "pages": keys,
        "count": count,
        "channels": channels,
        "findings": [[f.rule, f.severity, list(f.channels), f.file, f.line, f.message, f.waived,
                      f.waiver_reason] for f in findings],
    }
    return json.dumps(manifest, sort_keys=True, separators=(",", ":")) + "\n"


def manifest_findings(previous: dict[str, Any]) -> list[Finding]:
    """The findings a manifest recorded (a no-op build reports them)."""
    return [Finding(r[0], r[1], tuple(r[2]), r[3], r[4], r[5], r[6], r[7]) for r in previous["findings"]]
