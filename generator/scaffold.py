"""Channel files written by specfold: the ``new`` scaffold, and the writer ``import`` shares.

A channel document here is the parsed form of a TOML header: ``{"title": ..., "signal": {...},
"interference": [{...}]}`` with values as TOML would hold them.  :func:`render_channel` writes it
in schema order, so the same document always gives the same bytes; :func:`check_texts` runs
generated files through the loader (against the tree's ``system.toml``) before anything is
written, so specfold never writes a file it would itself refuse.

Pure apart from :func:`check_texts`, which works in a temporary folder.
"""

from __future__ import annotations

import json
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from . import schema
from .errors import SpecError, SpecErrors
from .load import load_spec, load_system
from .model import System
from .quantities import format_quantity
from .schema import Key
from .source import CHANNEL_DIR, CHANNEL_ID, SYSTEM_FILE, channel_files

# --------------------------------------------------------------------------- TOML text


def toml_string(text: str) -> str:
    """A TOML basic string: JSON escapes are all valid TOML escapes; DEL is not allowed bare."""
    return json.dumps(text, ensure_ascii=False).replace("\x7f", "\\u007f")


def toml_value(value: object) -> str:
    """One value (string, number, boolean or a list of them) as TOML text."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, str):
        return toml_string(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"no TOML form for {type(value).__name__}")  # a programming error


def _ordered(table: str, values: Mapping[str, Any]) -> list[tuple[str, Any]]:
    order = [k.name for k in schema.CHANNEL_KEYS if k.table == table]
    return sorted(values.items(), key=lambda kv: order.index(kv[0]) if kv[0] in order else len(order))


def render_channel(doc: Mapping[str, Any], notes: str = "") -> tuple[str, dict[int, str]]:
    """The channel file for ``doc`` and a map of each key's line number to its key path.

    Key paths are those of :func:`generator.load.locate_keys`: ``"signal.band"``,
    ``"interference.0.level"``.
    """
    lines = ["+++"]
    where: dict[int, str] = {}

    def put(path: str, name: str, value: Any) -> None:
        lines.append(f"{name} = {toml_value(value)}")
        where[len(lines)] = path

    for name, value in _ordered("", {k: v for k, v in doc.items() if k not in schema.CHANNEL_TABLES}):
        put(name, name, value)
    for table in schema.CHANNEL_TABLES:
        body = doc.get(table)
        if not body:
            continue
        items = body if table in schema.ARRAY_TABLES else [body]
        for i, item in enumerate(items):
            lines.append("")
            lines.append(f"[[{table}]]" if table in schema.ARRAY_TABLES else f"[{table}]")
            prefix = f"{table}.{i}" if table in schema.ARRAY_TABLES else table
            for name, value in _ordered(table, item):
                put(f"{prefix}.{name}", name, value)
    lines.append("+++")
    text = "\n".join(lines) + "\n"
    if notes.strip("\n"):
        text += "\n" + notes.strip("\n") + "\n"
    return text, where


def check_texts(specs: Path, texts: Mapping[str, str]) -> list[SpecError]:
    """Load generated channel files (``{"channels/X.md": text}``) beside ``specs/system.toml``.

    Returns every problem the loader finds in them (file names as given); an empty list means
    each file loads cleanly.
    """
    with tempfile.TemporaryDirectory(prefix="specfold-check-") as scratch:
        root = Path(scratch)
        shutil.copyfile(specs / SYSTEM_FILE, root / SYSTEM_FILE)
        (root / CHANNEL_DIR).mkdir()
        for rel, text in texts.items():
            target = root / rel
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_text(text, encoding="utf-8", newline="\n")
        try:
            load_spec(root)
        except SpecErrors as errs:
            return list(errs.errors)
    return []


def existing_channel(specs: Path, channel_id: str) -> Path | None:
    """The file already holding ``channel_id`` (ids ignore case), if any."""
    folded = channel_id.lower()
    for path in channel_files(specs):
        if path.stem.lower() == folded:
            return path
    return None


def check_id(channel_id: str) -> None:
    if not CHANNEL_ID.match(channel_id):
        raise SpecError(f"'{channel_id}' is not a usable channel id: use letters, digits, '.', '_' and '-', "
                        "at most 100 characters (the id is the file name)")


# --------------------------------------------------------------------------- scaffold

# Starting values per kind, chosen to agree with each other (a 5 kHz band under a 51.2 kS/s
# rate with an 8 kHz corner; 50 g through 100 mV/g is 5 V inside ±10 V).  Mostly the schema's
# examples; where an example would contradict the kind (an output's unit is volts) it differs.
_STARTS: dict[str, dict[str, Any]] = {
    "input": {
        "title": "Main bearing, axial acceleration", "measurand": "acceleration", "unit": "g",
        "tags": ["drivetrain"],
        "signal.band": ["0.5 Hz", "5 kHz"], "signal.peak": "50 g", "signal.resolution": "0.01 g",
        "signal.snr": "80 dB", "signal.flatness": "0.5 dB", "signal.out_of_band": "-20 dBFS",
        "signal.filtered_to_band": False,
        "sensor.sensitivity": "100 mV/g", "sensor.noise": "20 nV/√Hz",
        "conversion.rate": "51.2 kS/s", "conversion.bits": 24, "conversion.full_scale": "±10 V",
        "conversion.gain": 1, "conversion.jitter": "50 ps", "conversion.container_bits": 32,
        "filter.family": "butterworth", "filter.order": 6, "filter.corner": "8 kHz",
    },
    "output": {
        "title": "Valve drive, spool command", "measurand": "drive voltage", "unit": "V",
        "tags": ["actuator"],
        "signal.band": ["0 Hz", "50 Hz"], "signal.peak": "9 V", "signal.resolution": "5 mV",
        "signal.snr": "60 dB", "signal.flatness": "0.5 dB", "signal.image_rejection": "60 dB",
        "signal.limit": "10 V",
        "conversion.rate": "12.8 kS/s", "conversion.bits": 16, "conversion.full_scale": "±10 V",
        "conversion.gain": 1, "conversion.jitter": "50 ps", "conversion.container_bits": 16,
        "conversion.hold": "zero-order", "conversion.sinc_compensation": False,
        "filter.family": "butterworth", "filter.order": 2, "filter.corner": "1 kHz",
        "safety.powered_actuator": False,
    },
    "image": {
        "title": "Inspection camera", "measurand": "surface image", "unit": "V", "tags": ["optical"],
        "signal.detail": "40 cycles/mm", "signal.square_pixels": False,
        "sensor.pixels": [640, 480], "sensor.active_area": ["3.2 mm", "2.4 mm"],
        "conversion.rate": "5 Hz", "conversion.bits": 12, "conversion.container_bits": 16,
    },
}

# Keys left as comments: each needs a decision only the engineer can make, and a made-up value
# would raise a finding (a waiver of nothing, a stated figure that disagrees, a hazard caution).
_DECIDE = {
    "match": "name a group from system.toml's [groups] to check relative timing",
    "interference.frequency": "add one [[interference]] table per known tone outside the band",
    "safety.working_voltage": "state it where the point of measurement is above extra-low voltage",
    "safety.note": "a site-specific safety note shown with the caution",
    "stated.data_rate": "only when a document states it elsewhere; specfold checks it",
    "stated.lsb": "only when a document states it elsewhere; specfold checks it",
    "waiver.rule": "a [[waiver]] accepts one finding, with a reason; add it only after review",
}
_INHERITED = ("rate", "bits", "full_scale", "jitter", "container_bits", "link")
_CONVERTER_ATTR = {"rate": "rate", "bits": "bits", "full_scale": "full_scale", "jitter": "jitter",
                   "container_bits": "container_bits", "link": "link"}
_NOT_FOR_IMAGE = ("conversion.converter", "conversion.full_scale", "conversion.gain", "conversion.jitter")


def unit_note(key: Key, unit: str) -> str:
    """What a key's value is written in, for the scaffold's comments."""
    if key.kind == schema.CHOICE:
        return "one of " + ", ".join(key.choices)
    if key.kind == schema.REF:
        return f"id of a {schema.NAMED_TABLES[key.ref]} in system.toml"
    if key.dims:
        shown = [d.replace(schema.PER_ENG, f"V/{unit}").replace(schema.ENG_PER_RTHZ, f"{unit}/√Hz")
                 .replace(schema.ENG, unit) for d in key.dims]
        return "unit: " + " or ".join(dict.fromkeys(shown))
    return {schema.INT: "whole number", schema.INT_PAIR: "two whole numbers", schema.BOOL: "true or false",
            schema.TEXT: "text", schema.TEXT_LIST: "list of text", schema.GAIN: "V/V, or a gain in dB",
            schema.FLOAT: "number"}.get(key.kind, key.kind)


def _pick_converter(system: System, kind: str, wanted: str | None) -> str | None:
    want_type = {"input": "adc", "output": "dac"}.get(kind)
    if wanted is not None:
        conv = system.converters.get(wanted)
        if conv is None:
            known = ", ".join(system.converters) or "none"
            raise SpecError(f"converter '{wanted}' is not defined in system.toml (defined: {known})")
        if want_type and conv.type != want_type:
            raise SpecError(f"converter '{wanted}' is {'a dac' if conv.type == 'dac' else 'an adc'}; "
                            f"a {kind} channel needs {'an adc' if want_type == 'adc' else 'a dac'}")
        return wanted
    if want_type is None:
        return None
    return next((c.id for c in system.converters.values() if c.type == want_type), None)


def scaffold_text(system: System, channel_id: str, kind: str, converter: str | None = None) -> str:
    """A channel file listing every key that applies to ``kind``, each with its meaning and unit.

    Keys the channel inherits from its converter, and keys that need a decision (``match``,
    ``[[waiver]]``, ``[stated]``...), are written as comments; every other value loads as it is.
    """
    check_id(channel_id)
    if kind not in schema.CHANNEL_KINDS:
        raise SpecError(f"unknown kind '{kind}'; expected one of: {', '.join(schema.CHANNEL_KINDS)}")
    conv_id = _pick_converter(system, kind, converter)
    conv = system.converters.get(conv_id) if conv_id else None
    starts = dict(_STARTS[kind])
    unit = str(starts["unit"])
    if conv is not None and conv.rate and kind == "input" and conv.rate < 51_200:
        # keep band and corner under a slower converter's Nyquist frequency
        high = conv.rate / 10
        starts["signal.band"] = ["0.5 Hz", format_quantity(high, "Hz")]
        starts["filter.corner"] = format_quantity(high * 1.6, "Hz")
    if kind == "image" and system.links:
        starts["conversion.link"] = next(iter(system.links))
    if conv_id:
        starts["conversion.converter"] = conv_id

    article = "an" if kind[0] in "aeiou" else "a"
    out = ["+++",
           f"# Channel {channel_id} ({kind}). Every key that applies to {article} {kind} channel is listed with its",
           "# meaning and unit; edit the values, delete what you do not need. Lines starting with '#' are",
           "# comments: uncomment a key to use it. The README's key reference has the full format."]
    for table in ("", *schema.CHANNEL_TABLES):
        keys = [k for k in schema.CHANNEL_KEYS if k.table == table and kind in k.kinds]
        if not keys:
            continue
        array = table in schema.ARRAY_TABLES
        active = array is False and any(f"{k.path}" in starts or k.path == "kind" for k in keys)
        if table:
            out.append("")
            head = f"[[{table}]]" if array else f"[{table}]"
            out.append(head if active else f"# {head}")
        for k in keys:
            comment = f"# {k.meaning} ({unit_note(k, unit)}"
            comment += f"; default {k.default})" if k.default else ")"
            out.append(comment)
            value: Any
            if k.path == "kind":
                out.append(f"kind = {toml_string(kind)}")
                continue
            skip = kind == "image" and k.path in _NOT_FOR_IMAGE and not (conv_id and k.name == "converter")
            if k.path in starts and not skip:
                value = starts[k.path]
                if conv is not None and k.table == "conversion" and k.name in _INHERITED:
                    inherited = getattr(conv, _CONVERTER_ATTR[k.name])
                    if inherited is not None:
                        out.append(f"# {k.name} = {toml_value(value)}    "
                                   f"# inherited from {conv_id}: {_inherited_text(k.name, inherited)}")
                        continue
                if active:
                    out.append(f"{k.name} = {toml_value(value)}")
                else:
                    out.append(f"# {k.name} = {toml_value(value)}")
                continue
            why = _DECIDE.get(k.path) or _DECIDE.get(f"{k.table}.*", "")
            if k.path == "match" and system.groups:
                why = f"groups in system.toml: {', '.join(system.groups)}"
            if k.path == "conversion.link":
                why = "defaults to the converter's link" if conv is not None else "a link from system.toml"
                if system.links:
                    why += f" ({', '.join(system.links)})"
            if kind == "image" and k.path in _NOT_FOR_IMAGE:
                why = "rarely needed for an image channel"
            out.append(f"# {k.name} = {k.example}" + (f"    # {why}" if why else ""))
    out.append("+++")
    out.extend(["", f"What {channel_id} measures or drives, and why its band, range and resolution are what they are.",
                "", "Wiring: ...", "", "Calibration: ...", ""])
    return "\n".join(out)


def _inherited_text(name: str, value: object) -> str:
    if name == "rate" and isinstance(value, float):
        return format_quantity(value, "Hz")
    if name == "jitter" and isinstance(value, float):
        return format_quantity(value, "s")
    if name == "full_scale" and hasattr(value, "low") and hasattr(value, "high"):
        return f"{format_quantity(value.low, 'V')} to {format_quantity(value.high, 'V')}"
    return str(value)


def new_channel(specs: Path | str, channel_id: str, kind: str = "input",
                converter: str | None = None) -> tuple[Path, str]:
    """The path and text of a new channel file in ``specs``, checked by the loader; writes nothing.

    Raises :class:`SpecError` when the id is unusable or taken, or the converter does not fit.
    """
    root = Path(specs)
    check_id(channel_id)
    system = load_system(root)
    taken = existing_channel(root, channel_id)
    if taken is not None:
        raise SpecError(f"{taken.relative_to(root).as_posix()} already exists; specfold new never "
                        "overwrites a channel file (choose another id or edit that file)")
    text = scaffold_text(system, channel_id, kind, converter)
    rel = f"{CHANNEL_DIR}/{channel_id}.md"
    problems = check_texts(root, {rel: text})
    if problems:  # a scaffold that does not load is a bug in this module; say so plainly
        raise SpecErrors(problems)
    return root / rel, text
