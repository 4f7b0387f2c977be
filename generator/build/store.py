"""The build cache: JSON in a folder of its own, at exactly two points of the pipeline.

1. :class:`ChannelStore` keeps, for every channel file, what was worked out from it: the channel as
   loaded, its figures (as the JSON text ``spec.json`` holds), its channel-rule findings before
   waivers, and the digest of its page's own view (everything a channel page shows that follows
   from the file alone).  An entry is keyed by the tool and the file's key (:attr:`Spec.keys`: its
   path and bytes, and system.toml's), so an unchanged file under an unchanged system.toml is
   neither parsed nor analysed nor checked again.  ``check`` uses the same store.
2. :class:`PageStore` keeps, for one published site, the digest of every page's view data and the
   status (size, times, inode) of the file written for it.  A page whose view digest is unchanged is
   carried from the current site (hard-linked) instead of rendered, but only when its file is still
   the one written then: an edited or replaced page is rendered again.

The folder (``.specfold-cache`` beside the specs folder unless told otherwise) may be deleted at
any time: the next build is a full one.  Nothing is ever executed from it (JSON only), and an entry
that does not parse or does not fit is ignored, never fatal.  Writes are atomic (a temporary file
renamed), and a cache that cannot be written only costs the next build its shortcuts.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import json
import os
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .. import __version__
from ..codec import CodecError, decode, encode
from ..model import Channel, System
from ..rules import Finding
from ..source import digest

FORMAT = 1
SHARDS = 64
"""Channel entries are kept in this many files, by a hash of the channel file's path: a rebuild
rewrites only the files holding a changed entry."""
LIBRARIES = ("numpy", "scipy", "jinja2", "markdown", "nh3", "plotly", "markupsafe")
"""Installed libraries whose versions are part of the tool key: they compute or write the output."""
TEMPLATES = Path(__file__).resolve().parent.parent.parent / "site_templates"
"""The site's templates and static assets: part of the tool key."""
CACHE_ENV = "SPECFOLD_CACHE"
"""Environment variable naming the cache folder (``off``: no cache), where ``--cache`` is not given."""


def tool_key(extra: Iterable[Path] = ()) -> str:
    """What the tool contributes to every entry: its version, its source, the files in ``extra``
    (the site templates and assets) and the versions of the libraries it computes and writes with."""
    parts: list[str | bytes] = [__version__]
    package = Path(__file__).resolve().parent.parent
    for path in sorted(package.rglob("*.py")):
        parts += [path.relative_to(package).as_posix(), path.read_bytes()]
    for folder in extra:
        for path in sorted(folder.rglob("*")):
            if path.is_file():
                parts += [path.name, path.read_bytes()]
    for library in LIBRARIES:
        try:
            parts.append(f"{library} {importlib.metadata.version(library)}")
        except importlib.metadata.PackageNotFoundError:
            parts.append(f"{library} unknown")
    return digest(*parts)


def cache_folder(specs: Path, given: str | None = None) -> Path | None:
    """The cache folder: ``given`` (``off``: none), else ``$SPECFOLD_CACHE``, else ``.specfold-cache``
    beside the specs folder."""
    chosen = given if given is not None else os.environ.get(CACHE_ENV)
    if chosen is not None:
        return None if chosen.strip().lower() == "off" else Path(chosen)
    return specs.resolve().parent / ".specfold-cache"


def _read_json(path: Path) -> Any:
    """A JSON file's content, or None when it is missing, unreadable or not JSON."""
    try:
        return json.loads(path.read_bytes())
    except (OSError, ValueError):
        return None


def _write_json(path: Path, value: Any) -> bool:
    """Write ``value`` as JSON atomically (a temporary file renamed over); False when it cannot be
    written (a read-only or full disk costs only the next build's shortcuts)."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp.write_text(json.dumps(value, sort_keys=True, separators=(",", ":")), encoding="utf-8")
        os.replace(tmp, path)
        return True
    except OSError:
        tmp.unlink(missing_ok=True)
        return False


# --------------------------------------------------------------------------- point 1: channels


@dataclass(frozen=True)
class Kept:
    """What the store holds of one channel file under one key."""

    key: str
    channel: Channel
    figures: str  # the figures as JSON text, as spec.json writes them
    findings: tuple[Finding, ...]  # channel-rule findings, before waivers
    sheet: str  # digest of the channel page's own view ("" when only `check` has seen the file)


def _finding(data: Any, channel: Channel) -> Finding:
    rule, severity, line, message = data
    if not (isinstance(rule, str) and severity in ("error", "warning", "info") and type(line) is int
            and isinstance(message, str)):
        raise CodecError("not a finding")
    return Finding(rule, severity, (channel.id,), channel.source.file, line, message)


class ChannelStore:
    """Point 1 of the build cache (see the module docstring); ``folder`` None: no cache at all."""

    def __init__(self, folder: Path | None, tool: str, read: bool = True) -> None:
        self.folder = folder / "channels" if folder is not None else None
        self.tool = tool
        self._raw: dict[str, dict[str, Any]] = {}  # shard name -> {rel: entry as read}
        self._kept: dict[str, Kept] = {}  # rel -> entry decoded for this build
        self._system_doc: Any = None
        if read and self.folder is not None and self.folder.is_dir():
            doc = _read_json(self.folder / "system.json")
            self._system_doc = doc if isinstance(doc, dict) and doc.get("format") == FORMAT else None
            for n in range(SHARDS):
                doc = _read_json(self.folder / f"{n:02d}.json")
                if isinstance(doc, dict) and doc.get("format") == FORMAT and isinstance(doc.get("entries"), dict):
                    self._raw[f"{n:02d}"] = doc["entries"]

    @staticmethod
    def _shard(rel: str) -> str:
        return f"{hashlib.sha256(rel.encode('utf-8')).digest()[0] % SHARDS:02d}"

    def _key(self, file_key: str) -> str:
        return digest(self.tool, file_key)

    def channel(self, rel: str, file_key: str) -> Channel | None:
        """The channel loaded earlier from this very file (the loader's ``cached`` hook), or None."""
        entry = self._raw.get(self._shard(rel), {}).get(rel)
        if not isinstance(entry, dict) or entry.get("key") != self._key(file_key):
            return None
        try:
            channel: Channel = decode(Channel, entry["channel"])
            findings = tuple(_finding(f, channel) for f in entry["findings"])
            kept = Kept(entry["key"], channel, entry["figures"], findings, entry["sheet"])
        except (CodecError, KeyError, TypeError, ValueError):
            return None
        if not (isinstance(kept.figures, str) and isinstance(kept.sheet, str) and channel.source.file == rel):
            return None
        self._kept[rel] = kept
        return channel

    def system(self, key: str) -> System | None:
        """The system loaded earlier from a system.toml of this key (the loader's cache), or None."""
        entry = self._system_doc
        if not isinstance(entry, dict) or entry.get("key") != self._key(key):
            return None
        try:
            system: System = decode(System, entry["system"])
        except (CodecError, KeyError, TypeError, ValueError):
            return None
        return system

    def kept(self, channel: Channel) -> Kept | None:
        """What the store kept for ``channel``, if the loader took it from the store."""
        kept = self._kept.get(channel.source.file)
        return kept if kept is not None and kept.channel is channel else None

    def figures(self, channels: Iterable[Channel]) -> dict[str, str]:
        """Channel id -> kept figures text, for the channels the loader took from the store."""
        return {ch.id: k.figures for ch in channels if (k := self.kept(ch)) is not None}

    def findings(self, channels: Iterable[Channel]) -> dict[str, tuple[Finding, ...]]:
        """Channel id -> kept channel-rule findings, for the channels the loader took from the store."""
        return {ch.id: k.findings for ch in channels if (k := self.kept(ch)) is not None}

    def sheets(self, channels: Iterable[Channel]) -> dict[str, str]:
        """Channel id -> kept digest of the channel page's own view."""
        return {ch.id: k.sheet for ch in channels if (k := self.kept(ch)) is not None and k.sheet}

    def save(self, keys: Mapping[str, str], system: System, channels: Iterable[Channel], figures: Mapping[str, str],
             findings: Mapping[str, tuple[Finding, ...]], sheets: Mapping[str, str]) -> None:
        """Keep system.toml as loaded and every channel's entry (``keys``: the spec's file keys);
        entries of files gone are dropped, and only the files whose entries changed are written."""
        if self.folder is None:
            return
        system_key = self._key(keys.get("system.toml", ""))
        if not (isinstance(self._system_doc, dict) and self._system_doc.get("key") == system_key):
            _write_json(self.folder / "system.json", {"format": FORMAT, "key": system_key, "system": encode(system)})
        shards: dict[str, dict[str, Any]] = {}
        for ch in channels:
            rel = ch.source.file
            if rel not in keys or ch.id not in figures or ch.id not in findings:
                continue
            key = self._key(keys[rel])
            old = self._raw.get(self._shard(rel), {}).get(rel)
            sheet = sheets.get(ch.id, "")
            if isinstance(old, dict) and old.get("key") == key and rel in self._kept and old.get("sheet") == sheet:
                entry = old  # unchanged: kept as read
            else:
                entry = {"key": key, "channel": encode(ch), "figures": figures[ch.id], "sheet": sheet,
                         "findings": [[f.rule, f.severity, f.line, f.message] for f in findings[ch.id]]}
            shards.setdefault(self._shard(rel), {})[rel] = entry
        for n in range(SHARDS):
            name = f"{n:02d}"
            new = shards.get(name, {})
            if new == self._raw.get(name, {}):
                continue
            if new:
                _write_json(self.folder / f"{name}.json", {"format": FORMAT, "entries": new})
            else:
                (self.folder / f"{name}.json").unlink(missing_ok=True)


# ------------------------------------------------------------------------------ point 2: pages


Stat = tuple[int, int, int, int]
"""A file's size, modification and change times (ns) and inode: what tells it is the one written."""


def file_stat(path: str | Path) -> Stat | None:
    try:
        st = os.lstat(path)
    except OSError:
        return None
    return (st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_ino)


class PageStore:
    """Point 2 of the build cache (see the module docstring) for the site published at ``output``."""

    def __init__(self, folder: Path | None, output: Path, tool: str, read: bool = True) -> None:
        self.path = (folder / "sites" / f"{digest(str(output.resolve()))[:32]}.json"
                     if folder is not None else None)
        self.tool = tool
        doc = _read_json(self.path) if self.path is not None and read else None
        fits = isinstance(doc, dict) and doc.get("format") == FORMAT and doc.get("tool") == tool
        self._doc: dict[str, Any] = doc if fits and isinstance(doc, dict) else {}
        pages = self._doc.get("pages")
        self.pages: dict[str, Any] = pages if isinstance(pages, dict) else {}

    def unchanged(self, inputs: str) -> tuple[int, int, list[Finding]] | None:
        """(pages, channels, findings) of the site as published, when it was built by this tool
        from inputs of this very digest; None otherwise (the caller checks the site's files)."""
        if self._doc.get("inputs") != inputs:
            return None
        try:
            found = [Finding(r[0], r[1], tuple(r[2]), r[3], r[4], r[5], r[6], r[7]) for r in self._doc["findings"]]
            return int(self._doc["count"]), int(self._doc["channels"]), found
        except (KeyError, TypeError, ValueError, IndexError):
            return None

    def carried(self, rel: str, view: str, site: Path) -> bool:
        """Whether the current site's page ``rel`` was written for a view of digest ``view`` and is
        still the very file written then."""
        entry = self.pages.get(rel)
        if not (isinstance(entry, list) and len(entry) == 5 and entry[0] == view):
            return False
        return file_stat(os.path.join(site, rel)) == tuple(entry[1:])

    def intact(self, site: Path) -> bool:
        """Whether every page the store lists is still the very file written for it."""
        return bool(self.pages) and all(
            isinstance(e, list) and len(e) == 5 and file_stat(os.path.join(site, rel)) == tuple(e[1:])
            for rel, e in self.pages.items())

    def save(self, site: Path, views: Mapping[str, str], inputs: str, count: int, channels: int,
             findings: list[Finding]) -> None:
        """Record the published site: each page's view digest and its file's status now."""
        if self.path is None:
            return
        pages = {}
        for rel, view in views.items():
            st = file_stat(os.path.join(site, rel))
            if st is not None:
                pages[rel] = [view, *st]
        _write_json(self.path, {
            "format": FORMAT, "tool": self.tool, "inputs": inputs, "pages": pages, "count": count,
            "channels": channels, "output": str(site),
            "findings": [[f.rule, f.severity, list(f.channels), f.file, f.line, f.message, f.waived, f.waiver_reason]
                         for f in findings]})
