"""The channel table's format, shared by ``import`` and ``export``: its columns (every key of the
format in its order, a pair key as two columns), the spellings a header may use for each (generated
into the README), and how a cell is kept from being read as a spreadsheet formula.
:mod:`.importing` reads a table into channel files, :mod:`.exporting` writes one."""

from __future__ import annotations

import re
from dataclasses import dataclass

from . import schema
from .schema import Key

TABLE_FORMAT = 1
FIGURE_PREFIX = "figure."
IGNORED = ("status",)

# Halves of the pair keys, as separate columns.
PAIR_PARTS: dict[str, tuple[str, str]] = {
    "signal.band": ("low", "high"),
    "sensor.pixels": ("across", "down"),
    "sensor.active_area": ("width", "height"),
}

# Extra header spellings per column (the key's own name and dotted path always work).
SPELLINGS: dict[str, tuple[str, ...]] = {
    "id": ("channel", "channel id", "ch", "chan", "channel no", "channel number", "tag number"),
    "title": ("name", "channel name", "description", "desc", "label"),
    "kind": ("type", "direction", "channel type", "io"),
    "measurand": ("quantity", "physical quantity", "measured quantity"),
    "unit": ("units", "eng unit", "engineering unit", "eu"),
    "tags": ("tag", "labels"),
    "match": ("match group", "timing group", "phase group"),
    "signal.band": ("frequency band", "frequency range"),
    "signal.band.low": ("f low", "fmin", "f min", "low frequency", "lower frequency", "frequency low",
                        "lower band edge", "band start", "low edge"),
    "signal.band.high": ("f high", "fmax", "f max", "high frequency", "upper frequency", "frequency high",
                         "upper band edge", "band end", "bandwidth", "high edge"),
    "signal.peak": ("peak value", "peak amplitude", "max amplitude", "amplitude", "largest amplitude"),
    "signal.snr": ("s n", "signal to noise", "signal to noise ratio", "required snr"),
    "signal.flatness": ("band edge flatness", "gain flatness", "passband flatness"),
    "signal.out_of_band": ("out of band level", "oob", "oob level"),
    "signal.limit": ("drive limit", "max drive"),
    "signal.detail": ("spatial detail", "finest detail"),
    "sensor.sensitivity": ("sens", "sensor sensitivity", "transducer sensitivity"),
    "sensor.noise": ("sensor noise", "noise density"),
    "sensor.pixels.across": ("pixels x", "horizontal pixels", "width px"),
    "sensor.pixels.down": ("pixels y", "vertical pixels", "height px"),
    "sensor.active_area.width": ("active width", "sensor width"),
    "sensor.active_area.height": ("active height", "sensor height"),
    "conversion.converter": ("adc", "dac", "converter id"),
    "conversion.link": ("network",),
    "conversion.rate": ("sample rate", "sampling rate", "sample frequency", "sampling frequency", "fs",
                        "samples per second", "frame rate", "line rate"),
    "conversion.bits": ("adc bits", "bit depth", "word length", "number of bits", "resolution bits"),
    "conversion.full_scale": ("range", "input range", "output range", "adc range", "fsr"),
    "conversion.gain": ("amplifier gain", "amp gain", "preamp gain"),
    "conversion.jitter": ("clock jitter", "aperture jitter"),
    "conversion.container_bits": ("container", "word size", "storage bits"),
    "filter.family": ("filter", "filter type", "aaf", "anti alias filter"),
    "filter.order": ("poles",),
    "filter.corner": ("cutoff", "cut off", "corner frequency", "cutoff frequency", "fc", "f c"),
    "filter.ripple": ("passband ripple",),
    "filter.stopband_attenuation": ("stopband", "stop band attenuation", "attenuation"),
    "safety.working_voltage": ("voltage to earth",),
    "safety.note": ("safety note",),
    "stated.data_rate": ("data rate",),
    "stated.lsb": ("lsb", "lsb size"),
    "notes": ("remarks", "comments", "comment", "note", "rationale"),
}
# Bare key names that would mislead as headers: "note" means the notes column, not [safety] note.
_NOT_BARE = ("note",)
ARRAY_WORDS = {"interference": "interference", "tone": "interference", "waiver": "waiver"}
CHOICE_WORDS = {"chebyshevi": "chebyshev1", "chebyshevii": "chebyshev2", "cauer": "elliptic",
                 "ai": "input", "ao": "output", "in": "input", "out": "output", "camera": "image"}
BITS_UNITS = ("bit", "bits", "b")


@dataclass(frozen=True)
class Field:
    """Where one column's values go."""

    path: str  # the canonical column name: "conversion.rate", "signal.band.low", "waiver.1.rule"
    key: Key | None = None  # None for "id" and "notes"
    part: int | None = None  # 0 or 1: a half of a pair key
    index: int = 0  # item of an array table (0-based)


def normalised_header(text: str) -> str:
    return re.sub(r"[^0-9a-zµ]+", "_", text.strip().lower()).strip("_")


_UNIT_SUFFIX = re.compile(r"^(.*?)\s*[\(\[]([^()\[\]]*)[\)\]]\s*$")


def split_header(header: str) -> tuple[str, str | None]:
    """``"Rate (Hz)"`` -> ``("Rate", "Hz")``; a header without brackets has no unit."""
    m = _UNIT_SUFFIX.match(header.strip())
    if m and m.group(1).strip():
        return m.group(1).strip(), m.group(2).strip() or None
    return header.strip(), None


def field_for_path(path: str) -> Field | None:
    """The field a canonical column name (or a mapping file's key path) stands for."""
    if path in ("id", "notes"):
        return Field(path)
    parts = path.split(".")
    if len(parts) == 3 and parts[0] in schema.ARRAY_TABLES and parts[1].isdigit() and int(parts[1]) >= 1:
        key = schema.keys_of(parts[0]).get(parts[2])
        return Field(path, key, None, int(parts[1]) - 1) if key else None
    if len(parts) == 3 and ".".join(parts[:2]) in PAIR_PARTS:
        names = PAIR_PARTS[".".join(parts[:2])]
        if parts[2] in names:
            return Field(path, schema.keys_of(parts[0])[parts[1]], names.index(parts[2]))
        return None
    table, name = (parts[0], parts[1]) if len(parts) == 2 else ("", parts[0])
    if len(parts) > 2 or table in schema.ARRAY_TABLES:
        return None
    key = schema.keys_of(table).get(name) if table in ("", *schema.CHANNEL_TABLES) else None
    return Field(path, key) if key else None


def canonical_columns() -> list[str]:
    """Every single-valued column in the format's order (array tables add ``table.N.key``)."""
    out = ["id"]
    for k in schema.CHANNEL_KEYS:
        if k.table in schema.ARRAY_TABLES:
            continue
        if k.path in PAIR_PARTS:
            out.extend(f"{k.path}.{p}" for p in PAIR_PARTS[k.path])
        else:
            out.append(k.path)
    out.append("notes")
    return out


def _aliases() -> dict[str, str]:
    table: dict[str, str] = {}
    for path in canonical_columns():
        field = field_for_path(path)
        assert field is not None
        table[normalised_header(path)] = path
        key = field.key
        if key is not None and key.name not in _NOT_BARE:
            bare = key.name if field.part is None else f"{key.name}.{path.rsplit('.', 1)[1]}"
            table.setdefault(normalised_header(bare), path)
    for path in PAIR_PARTS:  # the whole pair in one cell: "2 Hz .. 20 kHz", "2048 x 1536"
        table[normalised_header(path)] = path
        table.setdefault(normalised_header(path.split(".")[1]), path)
    for path, spellings in SPELLINGS.items():
        for s in spellings:
            table[normalised_header(s)] = path
    return table


ALIASES = _aliases()


def spelling_table() -> str:
    """The README's table of accepted header spellings, generated from :data:`ALIASES`."""
    by_path: dict[str, list[str]] = {}
    for spelling, path in ALIASES.items():
        by_path.setdefault(path, []).append(spelling.replace("_", " "))
    order = canonical_columns() + list(PAIR_PARTS)
    rows = ["| column (as exported) | also accepted (any case; spaces, dots, dashes or underscores) |",
            "|---|---|"]
    for path in sorted(by_path, key=lambda p: (order.index(p) if p in order else len(order), p)):
        others = sorted(s for s in by_path[path] if s != path.replace(".", " ").replace("_", " "))
        rows.append(f"| `{path}` | {', '.join(others)} |")
    rows.append("| `interference.N.frequency` (`level`, `source`) | `interference N frequency`, "
                "`tone N frequency`; without N: the first |")
    rows.append("| `waiver.N.rule` (`reason`, `until`) | `waiver N rule`; without N: the first |")
    return "\n".join(rows)


# --------------------------------------------------------------------------- headers




FORMULA_START = ("=", "+", "-", "@", "\t", "\r", "\0")
"""First characters that make a spreadsheet read a cell as a formula.  OWASP's CSV Injection page
lists = + - @ tab and carriage return, to be neutralised by a leading apostrophe, and advises quoting
every cell (owasp.org/www-community/attacks/CSV_Injection, from memory); OWASP ASVS 5.0
requirement 1.2.10 adds the null character."""
_PLAIN_NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")


def guard_cell(text: str) -> str:
    """A cell as export writes it: one starting like a formula (and not a plain number such as
    ``-3.5``, which no spreadsheet runs) gets a leading apostrophe, the spreadsheets' own mark for
    text; so does one already starting with an apostrophe, so :func:`unguard_cell` undoes exactly this."""
    if text[:1] == "'" or (text[:1] in FORMULA_START and text and not _PLAIN_NUMBER.fullmatch(text)):
        return "'" + text
    return text


def unguard_cell(text: str) -> str:
    """A cell as import reads it: the apostrophe :func:`guard_cell` adds (or a spreadsheet kept) is dropped."""
    if text[:1] == "'" and text[1:2] and text[1:2] in (*FORMULA_START, "'"):
        return text[1:]
    return text


