"""A seeded, repeatable generator of broken spec files, and a runner for them.

Not a test module: ``tests/test_fuzz.py`` runs the corpus under pytest, and

    python -m tests.fuzz [--seed N]

runs it outside pytest and prints the counts (mutants tried, distinct error messages,
tracebacks, time).

Every mutant is one demo file (``specs/system.toml`` or a channel file) with one or more
mutations applied: truncations, byte flips, deleted, duplicated or swapped lines, huge and
tiny numbers, NaN and infinity, negative values, unicode look-alikes (Greek mu for the micro
sign, the minus sign, fullwidth digits, Cyrillic letters), very long strings, deeply nested
arrays and tables, binary junk, empty files, a header without its closing ``+++``, values of
the wrong type, unknown keys and misplaced tables.  The same seed always gives the same bytes.

A mutant is checked in a tree made of the demo ``system.toml`` and the mutated channel alone
(or, for a ``system.toml`` mutant, a few demo channels that between them use every converter,
group and channel kind), so each run does little besides the mutated file.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import math
import random
import re
import shutil
import sys
import time
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "specs"
SEED = 20240909
CHANNEL_MUTANTS = 118  # per demo channel file (17 of them)
SYSTEM_MUTANTS = 400
# Channels present when system.toml is the mutated file: both ADCs, the DAC, an image
# channel and both groups.
SYSTEM_TREE_CHANNELS = ("ACC-GBX-01", "ACC-GBX-02", "I-GEN-A", "TMP-GBX-01", "PITCH-VLV", "CAM-TIP")
TIME_BOUND_S = 2.0
"""Seconds a run may take before ``python -m tests.fuzz`` reports it; no test asserts on time."""

_LOCATION = re.compile(r"^(?:specfold: )?(?:[^\s:]+(?:/[^\s:]+)*\.(?:md|toml)|channels|system\.toml)(?::\d+)*: ")


@dataclass(frozen=True)
class Mutant:
    """One broken file: where it goes in the tree (``system.toml``, ``channels/X.md``) and its bytes."""

    name: str
    target: str
    data: bytes


# ------------------------------------------------------------------------- operators

Op = Callable[[random.Random, bytes], bytes]

_NUM = re.compile(rb"(?<![A-Za-z0-9_.-])[0-9]+(?:\.[0-9]+)?(?:[eE][+-]?[0-9]+)?")
_QUOTED = re.compile(rb'"([^"\n]*)"')
_ASSIGN = re.compile(rb"^([ \t]*[A-Za-z0-9_.\"-]+[ \t]*=[ \t]*)(.*)$", re.MULTILINE)
_TABLE = re.compile(rb"^\[\[?[^\]\n]*\]\]?[ \t]*$", re.MULTILINE)

EXTREME_NUMBERS = (
    "1e308", "1.7976931348623157e308", "1e309", "1e-308", "5e-324", "1e-400", "0", "0.0", "-0",
    "99999999999999999999999999", "1e30", "1e-30", "0.000000000000000000001", "1e15", "1e-15",
    "18446744073709551617", "9223372036854775808",
)  # fmt: skip
NON_FINITE = ("nan", "inf", "-inf", "+inf", "NaN", "Infinity", "-Infinity", "+nan", "-nan")
WRONG_VALUES = (
    "true", "false", "42", "-1", "0", "4.5", "-1e9", '"text"', '""', '" "', "[]", '["a", "b", "c"]',
    "[1, 2]", "{}", "{ a = 1 }", "1979-05-27T07:32:00Z", "1979-05-27", "07:32:00", '"20 kHz"', '"±10 V"',
    '"0..5 V"', '"-40 dBFS"', '"100 mV/g"', '"50 g"', '"24"', "nan", "inf", '"nan Hz"', '"inf V"',
    "'literal'", '"""multi\nline"""', "[[1], [2]]", '["1 Hz"]', '["1 Hz", "2 Hz", "3 Hz"]',
)  # fmt: skip
UNITS = (
    "Hz", "kHz", "V", "mV", "dB", "dBFS", "g", "S/s", "%", "bit/s", "TB", "°C", "", "kHzz", "KHZ",
    "µV/√Hz", "V/V", "ps", "h", "cycles/mm", "m", "Pa", "N·m", "ε", "rms", "dB FS", "hz", "m/s²",
)  # fmt: skip
# Look-alike characters: what a paste from a document or another keyboard layout produces.
LOOKALIKES: dict[str, tuple[str, ...]] = {
    "µ": ("\u03bc", "u", "\u00b5\u00b5", "\u2098"),  # Greek mu, ASCII u, doubled, subscript m
    "\u03bc": ("\u00b5",),
    "-": ("\u2212", "\u2013", "\u2010", "\ufe63"),  # minus sign, en dash, hyphen, small hyphen-minus
    "0": ("\uff10", "O", "\u0660"),  # fullwidth zero, letter O, Arabic-Indic zero
    "1": ("\uff11", "l", "\u00b9"),
    "2": ("\uff12", "\u00b2"),
    "5": ("\uff15",),
    ".": ("\u00b7", "\u3002", ",", "\u2024"),
    "k": ("\u043a", "K"),  # Cyrillic ka
    "V": ("\u2164", "\u0412"),  # Roman numeral five, Cyrillic ve
    "H": ("\u041d",),
    "z": ("\u1d22",),
    "±": ("\u2213", "+/-", "+\u2212"),
    "°": ("\u00ba", "\u02da", "\u2103"),
    " ": ("\u00a0", "\u2009", "\u200b", "\t", "\u3000"),
    '"': ("\u201c", "\u201d", "\u00ab"),
    "=": ("\uff1d", ":"),
    "+": ("\uff0b", "\u2795"),
    "[": ("\uff3b",),
    "a": ("\u0430",),  # Cyrillic a
    "e": ("\u0435",),
    "s": ("\u0455",),
}


def _lines(data: bytes) -> list[bytes]:
    return data.split(b"\n")


def _pick_line(rng: random.Random, lines: list[bytes]) -> int:
    return rng.randrange(len(lines))


def truncate(rng: random.Random, data: bytes) -> bytes:
    return data[: rng.randrange(len(data) + 1)]


def byte_flip(rng: random.Random, data: bytes) -> bytes:
    if not data:
        return bytes([rng.randrange(256)])
    buf = bytearray(data)
    for _ in range(rng.choice((1, 1, 2, 4, 16))):
        i = rng.randrange(len(buf))
        buf[i] ^= rng.choice((1 << rng.randrange(8), rng.randrange(1, 256)))
    return bytes(buf)


def delete_lines(rng: random.Random, data: bytes) -> bytes:
    lines = _lines(data)
    i = _pick_line(rng, lines)
    del lines[i : i + rng.choice((1, 1, 2, 3, 8))]
    return b"\n".join(lines)


def duplicate_line(rng: random.Random, data: bytes) -> bytes:
    lines = _lines(data)
    i = _pick_line(rng, lines)
    where = i if rng.random() < 0.6 else rng.randrange(len(lines) + 1)
    lines.insert(where, lines[i])
    return b"\n".join(lines)


def swap_lines(rng: random.Random, data: bytes) -> bytes:
    lines = _lines(data)
    i, j = _pick_line(rng, lines), _pick_line(rng, lines)
    lines[i], lines[j] = lines[j], lines[i]
    return b"\n".join(lines)


def _replace_match(
    rng: random.Random, data: bytes, pattern: re.Pattern[bytes], make: Callable[[bytes], bytes]
) -> bytes:
    found = list(pattern.finditer(data))
    if not found:
        return data
    m = rng.choice(found)
    return data[: m.start()] + make(m.group(0)) + data[m.end() :]


def extreme_number(rng: random.Random, data: bytes) -> bytes:
    return _replace_match(rng, data, _NUM, lambda _: rng.choice(EXTREME_NUMBERS).encode())


def non_finite(rng: random.Random, data: bytes) -> bytes:
    return _replace_match(rng, data, _NUM, lambda _: rng.choice(NON_FINITE).encode())


def negate(rng: random.Random, data: bytes) -> bytes:
    return _replace_match(rng, data, _NUM, lambda m: rng.choice((b"-", b"\xe2\x88\x92", b"+", b"--")) + m)


def swap_unit(rng: random.Random, data: bytes) -> bytes:
    pattern = re.compile(rb'(?<=[0-9] )[^"\n\]]{1,40}(?=")')  # bounded: a long line stays linear
    return _replace_match(rng, data, pattern, lambda _: rng.choice(UNITS).encode())


def lookalike(rng: random.Random, data: bytes) -> bytes:
    text = data.decode("utf-8", "replace")
    spots = [i for i, ch in enumerate(text) if ch in LOOKALIKES]
    if not spots:
        return data
    for i in sorted(rng.sample(spots, min(len(spots), rng.choice((1, 1, 2, 5)))), reverse=True):
        text = text[:i] + rng.choice(LOOKALIKES[text[i]]) + text[i + 1 :]
    return text.encode()


def long_string(rng: random.Random, data: bytes) -> bytes:
    n = rng.choice((201, 1000, 20_000, 300_000))
    filler = rng.choice((b"x", b"1", b"\xc2\xb5", b"9 ", b"\xe2\x80\x8b", b"\\n", b"\\u00b5"))
    body = (filler * n)[: n * len(filler)]
    how = rng.randrange(3)
    if how == 0:
        return _replace_match(rng, data, _QUOTED, lambda _: b'"' + body + b'"')
    if how == 1:  # a long key
        lines = _lines(data)
        lines.insert(_pick_line(rng, lines), b"k" * n + b' = "1"')
        return b"\n".join(lines)
    lines = _lines(data)  # a long comment or bare line
    lines.insert(_pick_line(rng, lines), rng.choice((b"# ", b"")) + body)
    return b"\n".join(lines)


def deep_nesting(rng: random.Random, data: bytes) -> bytes:
    depth = rng.choice((10, 64, 200, 1000, 5000, 50_000))
    style = rng.randrange(5)
    if style == 0:
        line = b"deep = " + b"[" * depth + b"1" + b"]" * depth
    elif style == 1:
        line = b"deep = " + b"{ a = " * depth + b"1" + b" }" * depth
    elif style == 2:
        line = b"deep." + b".".join([b"a"] * depth) + b" = 1"
    elif style == 3:
        line = b"[" + b".".join([b"t"] * depth) + b"]"
    else:  # opened and never closed
        line = b"deep = " + rng.choice((b"[", b"{ a = ")) * depth
    lines = _lines(data)
    lines.insert(_pick_line(rng, lines), line)
    return b"\n".join(lines)


def binary_junk(rng: random.Random, data: bytes) -> bytes:
    junk = rng.randbytes(rng.choice((1, 8, 64, 4096)))
    if rng.random() < 0.2:
        return junk
    if rng.random() < 0.3:
        junk = b"\x00" * len(junk)
    i = rng.randrange(len(data) + 1)
    return data[:i] + junk + data[i:]


def emptied(rng: random.Random, data: bytes) -> bytes:
    return rng.choice((b"", b"\n", b"\n\n  \n\t\n", b"\xef\xbb\xbf", b"+++\n+++\n", b"+++", b"+++\n", b"\x00",
                       b"\r\n\r\n", b"+++\n+++\n+++\n"))


def unclosed_header(rng: random.Random, data: bytes) -> bytes:
    lines = _lines(data)
    fences = [i for i, ln in enumerate(lines) if ln.strip() == b"+++"]
    if len(fences) >= 2:
        choice = rng.randrange(3)
        if choice == 0:
            del lines[fences[1]]  # no closing fence
        elif choice == 1:
            del lines[fences[0]]  # no opening fence
        else:
            lines[fences[1]] = rng.choice((b"++", b"++++", b"+ ++", b"---", b"+++ trailing"))
        return b"\n".join(lines)
    return b"+++\n" + data  # system.toml: a stray fence


def wrong_type(rng: random.Random, data: bytes) -> bytes:
    return _replace_match(rng, data, _ASSIGN, lambda m: _ASSIGN.sub(
        lambda a: a.group(1) + rng.choice(WRONG_VALUES).encode(), m))


def mangle_key(rng: random.Random, data: bytes) -> bytes:
    def mangle(line: bytes) -> bytes:
        m = _ASSIGN.match(line)
        key, rest = (m.group(1), m.group(2)) if m else (line, b"")
        k = bytearray(key)
        if len(k) > 2:
            i = rng.randrange(len(k) - 1)
            k[i], k[i + 1] = k[i + 1], k[i]
        return bytes(k) + rest

    return _replace_match(rng, data, _ASSIGN, mangle)


def mangle_table(rng: random.Random, data: bytes) -> bytes:
    names = (b"[signal]", b"[[signal]]", b"[sensor]", b"[conversion]", b"[filter]", b"[[interference]]",
             b"[[waiver]]", b"[safety]", b"[stated]", b"[system]", b"[converters.adc-ds]", b"[clocks]",
             b"[links.net0.extra]", b"[groups.x y]", b"[converters.\"a b\"]", b"[nope]", b"[]", b"[[]]",
             b"[converters]", b"[links.net0]", b"[stores.recorder]", b"[groups]")
    if rng.random() < 0.5:
        return _replace_match(rng, data, _TABLE, lambda _: rng.choice(names))
    lines = _lines(data)
    lines.insert(_pick_line(rng, lines), rng.choice(names))
    return b"\n".join(lines)


def line_endings(rng: random.Random, data: bytes) -> bytes:
    return rng.choice((data.replace(b"\n", b"\r\n"), data.replace(b"\n", b"\r"), b"\xef\xbb\xbf" + data,
                       data.replace(b"\n", b"\n\t"), data.replace(b" = ", b"=")))


OPERATORS: tuple[Op, ...] = (
    truncate, byte_flip, delete_lines, duplicate_line, swap_lines, extreme_number, non_finite, negate,
    swap_unit, lookalike, long_string, deep_nesting, binary_junk, emptied, unclosed_header, wrong_type,
    mangle_key, mangle_table, line_endings,
)  # fmt: skip
# Mutations that still leave a readable file get more weight: they reach deeper into the loader.
WEIGHTS: tuple[int, ...] = (3, 3, 4, 3, 2, 6, 5, 5, 5, 5, 2, 2, 2, 1, 2, 6, 3, 3, 1)


# ---------------------------------------------------------------------------- corpus


def targets(demo: Path = DEMO) -> list[str]:
    """The demo files the corpus mutates, as paths relative to the tree."""
    channels = sorted(p.relative_to(demo).as_posix() for p in (demo / "channels").rglob("*.md"))
    return ["system.toml", *channels]


def mutants_of(target: str, data: bytes, count: int, seed: int = SEED) -> list[Mutant]:
    """``count`` mutants of one file; the same (target, data, count, seed) gives the same bytes."""
    rng = random.Random(f"{seed}:{target}")
    out: list[Mutant] = []
    for n in range(count):
        steps = rng.choices(OPERATORS, WEIGHTS, k=rng.choice((1, 1, 1, 2, 3)))
        mutated = data
        for op in steps:
            mutated = op(rng, mutated)
        name = f"{target}#{n:03d}:" + "+".join(op.__name__ for op in steps)
        out.append(Mutant(name, target, mutated))
    return out


def corpus(seed: int = SEED, demo: Path = DEMO) -> dict[str, list[Mutant]]:
    """Every mutant, grouped by the file it replaces."""
    out: dict[str, list[Mutant]] = {}
    for target in targets(demo):
        count = SYSTEM_MUTANTS if target == "system.toml" else CHANNEL_MUTANTS
        out[target] = mutants_of(target, (demo / target).read_bytes(), count, seed)
    return out


def base_tree(target: str, dest: Path, demo: Path = DEMO) -> Path:
    """A fresh tree at ``dest`` in which mutants of ``target`` are written."""
    if dest.exists():
        shutil.rmtree(dest)
    (dest / "channels").mkdir(parents=True)
    shutil.copyfile(demo / "system.toml", dest / "system.toml")
    if target == "system.toml":
        for cid in SYSTEM_TREE_CHANNELS:
            shutil.copyfile(demo / "channels" / f"{cid}.md", dest / "channels" / f"{cid}.md")
    return dest


def error_key(stderr: str) -> str | None:
    """The first line of an error report with its file and line stripped, for counting kinds."""
    first = stderr.split("\n", 1)[0]
    if not first:
        return None
    return _LOCATION.sub("", first)


@dataclass
class Outcome:
    mutant: Mutant
    code: int | None
    stdout: str
    stderr: str
    seconds: float
    crash: str | None = None  # repr of an exception that escaped main()

    def problems(self) -> list[str]:
        """Everything wrong with this run; empty for a good one."""
        found = []
        if self.crash is not None:
            found.append(f"raised {self.crash}")
        elif self.code not in (0, 1, 2):
            found.append(f"exit code {self.code}")
        if "Traceback" in self.stdout or "Traceback" in self.stderr:
            found.append("printed a traceback")
        if self.code == 2 and not self.stderr.strip():
            found.append("exit 2 without a message")
        if self.code in (0, 1):
            if self.stdout.startswith("{"):
                found.extend(json_problems(self.stdout))
            elif "checked" not in self.stdout:
                found.append("exit 0/1 without a report")
        return found


def _refuse_constant(name: str) -> object:
    raise ValueError(f"non-finite number {name} in the JSON report")


def json_problems(text: str) -> list[str]:
    """What is wrong with a ``check --format json`` report: bad JSON, or a figure not finite or null."""
    try:
        doc = json.loads(text, parse_constant=_refuse_constant)
    except ValueError as exc:
        return [f"bad JSON report: {exc}"]
    found = []
    for ch in doc.get("channels", []):
        for key, value in ch.get("figures", {}).items():
            if isinstance(value, float) and not math.isfinite(value):
                found.append(f"figure {key} of {ch.get('id')} is {value}")
    return found


def run_mutants(
    mutants: Iterable[Mutant],
    tree: Path,
    check: Callable[[list[str]], tuple[int | None, str, str, str | None]],
) -> Iterator[Outcome]:
    """Write each mutant into ``tree`` (one file rewritten per mutant) and run ``check`` on it.

    Every other mutant is checked with ``--format json`` so the JSON writer sees the same inputs.
    """
    for i, mutant in enumerate(mutants):
        (tree / mutant.target).write_bytes(mutant.data)
        argv = ["check", str(tree)] + (["--format", "json"] if i % 2 else [])
        start = time.perf_counter()
        code, out, err, crash = check(argv)
        yield Outcome(mutant, code, out, err, time.perf_counter() - start, crash)


def check_redirected(argv: list[str]) -> tuple[int | None, str, str, str | None]:
    """generator.cli.main with stdout and stderr captured (for use outside pytest)."""
    from generator.cli import main

    out, err = io.StringIO(), io.StringIO()
    code: int | None = None
    crash = None
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main(argv)
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 2
        except Exception as exc:  # the corpus exists to find these
            crash = f"{exc!r}"[:300] + f" ({raised_at(exc)})"
    return code, out.getvalue(), err.getvalue(), crash


def raised_at(exc: BaseException) -> str:
    """``generator/<module>.py:<line>``: the innermost frame of the package an exception passed."""
    import traceback

    where = "outside generator"
    for frame in traceback.extract_tb(exc.__traceback__):
        path = Path(frame.filename).as_posix()
        if "/generator/" in path:
            where = f"generator/{path.rsplit('/generator/', 1)[1]}:{frame.lineno}"
    return where


# ------------------------------------------------------------------- boundary values
#
# The mutators above break files at random; the boundary generator below is driven from the key
# schema (generator/schema.py) instead: every numeric key of a channel file and of system.toml is
# set to 0, a negative value, tiny and huge values, each side of every bound the schema and the
# loader declare, NaN and infinity in every spelling TOML and the unit parser allow, and a few
# realistic swapped pairs; every trial then goes through every command that computes.

BOUNDARY_COMMANDS = ("check", "build", "propose", "export", "diff")
BOUNDARY_HOSTS = {"input": "TMP-GBX-01", "output": "PITCH-VLV", "image": "CAM-TIP"}
"""The channel each channel key is tried on: demo channels with a filter, a sensor and a tone."""
SYSTEM_HOSTS = {"system": ("system",), "converters.*": ("adc-ds", "adc-sar", "dac-out"),
                "clocks.*": ("mclk", "mclk-ds"), "links.*": ("net0",), "stores.*": ("recorder",),
                "groups.*": ("gearbox-pair", "phase-currents")}
"""The items of the demo system.toml each system key is tried on: every converter, both clocks."""

BOUNDARY_NUMBERS = ("0", "-0", "-1", "1", "1e-5", "1e5", "-1e5", "1e-31", "1e31", "1e-300", "5e-324", "1e300",
                    "1.7976931348623157e308", "1e309")
"""Numbers as written in a value: zero both ways, negative, tiny and huge, subnormal, the largest
float and one past it (which a float reads as infinity)."""
DB_NUMBERS = ("6000", "-6000", "6000.001", "-6000.001", "1e6", "-1e6")
"""Levels in dB far past every dB bound, and each side of the gain limit the loader once had (6000 dB,
where 10 ** (dB / 20) leaves the float range)."""
NON_FINITE_TEXT = ("nan", "NaN", "+nan", "-nan", "inf", "+inf", "-inf", "Infinity", "-Infinity")
"""NaN and infinity as the number inside a value with a unit (``"inf Hz"``)."""
TOML_NON_FINITE = ("nan", "+nan", "-nan", "inf", "+inf", "-inf")
"""Every spelling TOML 1.0 allows for a bare NaN or infinity."""
BOUNDARY_INTS = (0, -1, 1, 2**31, 2**53 + 1, 2**63, 2**64 + 1, 10**309, -(10**309))
"""Whole numbers: zero, negative, 32- and 64-bit edges and integers past the float range."""
LONGEST_INT = "1" + "0" * 4300
"""A TOML integer of 4,301 digits: past Python's int/str conversion limit (a ValueError in tomllib)."""
LONGEST_INT_LABEL = "a 4,301-digit integer"
SI_LIMIT_TEXT = ("1.0000001e30", "9.9999999e-31", "1e30", "1e-30")
"""Each side of the loader's SI_LIMIT (1e30) and its inverse."""


class Raw(str):
    """TOML text written as it is, not quoted: ``+nan``, ``-inf``, ``1e309`` as a float."""


@dataclass(frozen=True)
class Trial:
    """One boundary value in one file: its name, and the files of the tree it replaces."""

    name: str
    files: tuple[tuple[str, bytes], ...]


def _toml_key(name: str) -> str:
    return name if re.fullmatch(r"[A-Za-z0-9_-]+", name) else json.dumps(name)


def _toml_value(value: object) -> str:
    if isinstance(value, Raw):
        return str(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)  # repr(nan) and repr(inf) are TOML's own spellings
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(type(value).__name__)


def _is_table_array(value: object) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, dict) for v in value)


def emit_toml(doc: dict[str, object], prefix: tuple[str, ...] = ()) -> list[str]:
    """``doc`` as TOML lines: its values, then its tables and arrays of tables."""
    lines = [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in doc.items()
             if not isinstance(v, dict) and not _is_table_array(v)]
    for k, v in doc.items():
        path = ".".join(_toml_key(p) for p in (*prefix, k))
        if isinstance(v, dict):
            lines += ["", f"[{path}]", *emit_toml(v, (*prefix, k))]
        elif _is_table_array(v):
            assert isinstance(v, list)
            for item in v:
                lines += ["", f"[[{path}]]", *emit_toml(item, (*prefix, k))]
    return lines


def _channel_parts(demo: Path, cid: str) -> tuple[dict[str, object], str]:
    import tomllib

    text = (demo / "channels" / f"{cid}.md").read_text(encoding="utf-8")
    _, header, notes = text.split("+++\n", 2)
    return tomllib.loads(header), notes


def _channel_bytes(doc: dict[str, object], notes: str) -> bytes:
    return ("+++\n" + "\n".join(emit_toml(doc)) + "\n+++\n" + notes).encode("utf-8")


def _assign(doc: dict[str, object], path: tuple[str, ...], value: object) -> None:
    """Set ``path`` in ``doc`` (an array of tables: its first item), making tables as needed;
    ``None`` removes the key."""
    here: object = doc
    for part in path[:-1]:
        assert isinstance(here, dict)
        nxt = here.get(part)
        if _is_table_array(nxt):
            assert isinstance(nxt, list)
            nxt = nxt[0]
        elif not isinstance(nxt, dict):
            nxt = here[part] = {}
        here = nxt
    assert isinstance(here, dict)
    if value is None:
        here.pop(path[-1], None)
    else:
        here[path[-1]] = value


def _unit_texts(dim: str, eng: str) -> list[str]:
    from generator import schema

    dim = dim.replace(schema.PER_ENG, f"V/{eng}").replace(schema.ENG_PER_RTHZ, f"{eng}/√Hz")
    dim = dim.replace(schema.ENG, eng)
    return [{"1": "", "B": "B", "rad": "rad"}.get(dim, dim)]


def _bound_numbers(minimum: float | None, maximum: float | None, positive: bool, whole: bool) -> list[float]:
    """The schema's bounds and a value just past each (one for whole numbers)."""
    out: list[float] = []
    for bound, outward in ((minimum, -1), (maximum, 1)):
        if bound is not None:
            step = 1.0 if whole else (abs(bound) * 1e-9 or 1e-12)
            out += [bound, bound + outward * step]
    if positive:
        out += [0.0, -1e-12] if not whole else [0, -1]
    return out


def _number_text(number: float) -> str:
    return repr(number) if isinstance(number, float) else str(number)


def boundary_values(key: object, eng: str = "V") -> list[tuple[str, object]]:
    """(label, value) pairs for one schema key: the value as TOML would hold it (a :class:`Raw` for
    spellings Python would not write)."""
    from generator import schema

    assert isinstance(key, schema.Key)
    k = key.kind
    bounds = _bound_numbers(key.minimum, key.maximum, key.positive, k in (schema.INT, schema.INT_PAIR,
                                                                          schema.INT_LIST))
    raw_non_finite = [(f"toml {s}", Raw(s)) for s in TOML_NON_FINITE]
    if k in (schema.INT, schema.INT_PAIR, schema.INT_LIST):
        ints = sorted({*BOUNDARY_INTS, *(int(b) for b in bounds)})
        if k == schema.INT:
            return [(str(i), i) for i in ints] + [("1.0", 1.0), (LONGEST_INT_LABEL, Raw(LONGEST_INT)),
                                                    *raw_non_finite]
        if k == schema.INT_LIST:
            return [(f"[{i}]", [i]) for i in ints] + [("[]", []), ("[nan]", [Raw("nan")])]
        pairs = [(f"[{i}, 1]", [i, 1]) for i in ints] + [(f"[1, {i}]", [1, i]) for i in ints]
        return [*pairs, ("[4, 2] swapped", [4, 2]), ("[inf, 1]", [Raw("inf"), 1])]
    if k == schema.FLOAT:
        numbers = [*BOUNDARY_NUMBERS, *(_number_text(b) for b in bounds)]
        return ([(n, Raw(n if "." in n or "e" in n else n + ".0")) for n in numbers]
                + [(f"int {i}", i) for i in (0, 1, 10**309)] + raw_non_finite)
    if k == schema.GAIN:
        limit = schema.GAIN_LIMIT_DB
        numbers = [*BOUNDARY_NUMBERS, *DB_NUMBERS, *(_number_text(x) for x in (limit, -limit, limit + 1e-6,
                                                                               -limit - 1e-6))]
        return ([(f'"{n} dB"', f"{n} dB") for n in numbers] + [(f'"{n} dB"', f"{n} dB") for n in NON_FINITE_TEXT]
                + [(f"V/V {n}", Raw(n if "." in n or "e" in n else n + ".0"))
                   for n in (*BOUNDARY_NUMBERS, *(_number_text(b) for b in bounds))]
                + [(f"int {i}", i) for i in (0, 10**309)] + raw_non_finite)
    numbers = [*BOUNDARY_NUMBERS, *SI_LIMIT_TEXT, *(_number_text(b) for b in bounds)]
    if any(d in ("dB", "dBFS") for d in key.dims):
        numbers += DB_NUMBERS
    numbers += NON_FINITE_TEXT
    out: list[tuple[str, object]] = []
    for dim in key.dims:
        for unit in _unit_texts(dim, eng):
            texts = [f"{n} {unit}".strip() for n in numbers]
            if k == schema.QUANTITY:
                out += [(f'"{t}"', t) for t in texts]
            elif k == schema.SPAN:
                out += [(f'"±{t}"', f"±{t}") for t in texts]
                out += [(f'"0..{t}"', f"0..{t}") for t in texts]
                out += [(f'"{n}..0 {unit}" swapped', f"{n}..0 {unit}") for n in ("5", "1e300")]
            elif k == schema.PAIR:
                small = "1 " + unit
                out += [(f'["{small}", "{t}"]', [small, t]) for t in texts]
                out += [(f'["{t}", "{small}"]', [t, small]) for t in texts]
    return out + raw_non_finite


SWAPPED: tuple[tuple[str, str, tuple[tuple[str, object], ...]], ...] = (
    # (kind of the host, label, settings): pairs of values in the wrong order, as a typing slip makes them
    ("input", "elliptic ripple above its stopband", (("filter.family", "elliptic"), ("filter.ripple", "40 dB"),
                                                      ("filter.stopband_attenuation", "3 dB"))),
    ("output", "elliptic ripple above its stopband", (("filter.family", "elliptic"), ("filter.ripple", "40 dB"),
                                                       ("filter.stopband_attenuation", "3 dB"))),
    ("output", "elliptic ripple above its stopband, no order", (
        ("filter.family", "elliptic"), ("filter.ripple", "40 dB"), ("filter.stopband_attenuation", "3 dB"),
        ("filter.order", None))),
    ("output", "elliptic ripple far above its stopband", (("filter.family", "elliptic"), ("filter.ripple", "80 dB"),
                                                           ("filter.stopband_attenuation", "0.5 dB"))),
    ("input", "elliptic ripple equal to its stopband", (("filter.family", "elliptic"), ("filter.ripple", "40 dB"),
                                                         ("filter.stopband_attenuation", "40 dB"))),
    ("output", "elliptic ripple equal to its stopband", (("filter.family", "elliptic"), ("filter.ripple", "40 dB"),
                                                          ("filter.stopband_attenuation", "40 dB"))),
    ("input", "peak below resolution", (("signal.peak", "0.1 °C"), ("signal.resolution", "95 °C"))),
    ("output", "limit below peak", (("signal.peak", "10 V"), ("signal.limit", "9 V"))),
    ("output", "resolution above peak", (("signal.peak", "5 mV"), ("signal.resolution", "9 V"))),
    ("input", "band swapped", (("signal.band", ["0.5 Hz", "0 Hz"]),)),
    ("output", "band swapped", (("signal.band", ["50 Hz", "0 Hz"]),)),
    ("input", "tone inside the band", (("interference.frequency", "0.1 Hz"),)),
    ("input", "container below bits", (("conversion.bits", 16), ("conversion.container_bits", 8))),
    ("image", "area swapped", (("sensor.active_area", ["0.014 mm", "28.672 mm"]),)),
    ("image", "pixels swapped", (("sensor.pixels", [1, 2048]),)),
    ("system", "passband above stopband", (("converters.adc-ds.passband", 0.5465),
                                           ("converters.adc-ds.stopband", 0.4535))),
    ("system", "divider range swapped", (("clocks.mclk.divider_range", [65536, 4]),)),
    ("system", "rate above max_rate", (("converters.dac-out.rate", "200 kS/s"),
                                       ("converters.dac-out.max_rate", "12.8 kS/s"))),
    ("system", "full scale swapped", (("converters.adc-sar.full_scale", "10..-10 V"),)),
)


NUMERIC_KINDS = ("quantity", "span", "pair", "int", "int-pair", "int-list", "float", "gain")
"""The schema's kinds of value that hold a number (generator.schema)."""

FILTER_FAMILIES = {"ripple": ("chebyshev1", "elliptic"), "stopband_attenuation": ("chebyshev2", "elliptic"),
                   "order": ("elliptic",), "corner": ("elliptic",)}
"""Families each filter key is also tried with (besides the host's own), where it matters."""


def boundary_trials(demo: Path = DEMO) -> list[Trial]:
    """Every boundary trial, in a fixed order (the same list on every run)."""
    from generator import schema

    trials: list[Trial] = []
    hosts = {kind: _channel_parts(demo, cid) for kind, cid in BOUNDARY_HOSTS.items()}

    def channel_trial(kind: str, label: str, settings: tuple[tuple[str, object], ...]) -> None:
        doc, notes = hosts[kind]
        doc = json.loads(json.dumps(doc))  # a deep copy of plain TOML data
        for path, value in settings:
            _assign(doc, tuple(path.split(".")), value)
        target = f"channels/{BOUNDARY_HOSTS[kind]}.md"
        trials.append(Trial(f"{target} {label}", ((target, _channel_bytes(doc, notes)),)))

    for key in schema.CHANNEL_KEYS:
        if key.kind not in NUMERIC_KINDS:
            continue
        for kind in key.kinds:
            doc, _ = hosts[kind]
            eng = str(doc.get("unit", "V"))
            variants: list[tuple[tuple[str, object], ...]] = [()]
            if key.table == "filter" and key.name in FILTER_FAMILIES:
                for family in FILTER_FAMILIES[key.name]:
                    variants.append((("filter.family", family),))
                    variants.append((("filter.family", family), ("filter.order", None)))
            for label, value in boundary_values(key, eng):
                for extra in variants:
                    shown = ", ".join(f"{p}={v}" for p, v in extra)
                    channel_trial(kind, f"{key.path} = {label}" + (f" ({shown})" if shown else ""),
                                  ((key.path, value), *extra))
    import tomllib

    system_doc = tomllib.loads((demo / "system.toml").read_text(encoding="utf-8"))

    def system_trial(label: str, settings: tuple[tuple[str, object], ...]) -> None:
        doc = json.loads(json.dumps(system_doc))
        for path, value in settings:
            _assign(doc, tuple(path.split(".")), value)
        trials.append(Trial(f"system.toml {label}", (("system.toml", "\n".join(emit_toml(doc)).encode() + b"\n"),)))

    for key in schema.SYSTEM_KEYS:
        if key.kind not in NUMERIC_KINDS:
            continue
        for item in SYSTEM_HOSTS.get(key.table, ()):
            base = "system" if key.table == "system" else f"{key.table[:-2]}.{item}"
            for label, value in boundary_values(key):
                system_trial(f"{base}.{key.name} = {label}", ((f"{base}.{key.name}", value),))
    for kind, label, settings in SWAPPED:
        if kind == "system":
            system_trial(label, settings)
        else:
            channel_trial(kind, label, settings)
    return trials


def boundary_tree(dest: Path, demo: Path = DEMO) -> Path:
    """The tree every boundary trial is laid over: the demo system and the channels that use every
    converter, group and channel kind (the hosts among them)."""
    return base_tree("system.toml", dest, demo)


@dataclass
class Run:
    """One command on one trial."""

    trial: str
    command: str
    code: int | None
    stdout: str
    stderr: str
    crash: str | None = None

    def problems(self) -> list[str]:
        """Everything wrong with this run; empty for a good one."""
        from generator.cli import EXIT_INTERNAL

        found = []
        if self.crash is not None:
            found.append(f"raised {self.crash}")
        elif self.code == EXIT_INTERNAL:
            found.append("internal error: " + self.stderr.strip().split("\n")[0][:300])
        elif self.code not in (0, 1, 2):
            found.append(f"exit code {self.code}")
        if "Traceback" in self.stdout or "Traceback" in self.stderr:
            found.append("printed a traceback")
        if self.code == 2 and not self.stderr.strip():
            found.append("exit 2 without a message")
        if self.command == "check" and self.code in (0, 1) and self.stdout.startswith("{"):
            found.extend(json_problems(self.stdout))
        return found

    def cause(self) -> str:
        """What broke, without the values: the exception type and where it was raised."""
        text = self.crash or self.stderr
        m = re.search(r"([A-Za-z]+(?:Error|Exception|Overflow)\b).*?\((generator/[\w/]+\.py:\d+)", text, re.S)
        if m:
            return f"{m.group(1)} at {m.group(2)}"
        return (self.crash or self.stderr.strip().split("\n")[0])[:120]


def run_trial(trial: Trial, tree: Path, base: Path, output: Path,
              call: Callable[[list[str]], tuple[int | None, str, str, str | None]],
              commands: Iterable[str] = BOUNDARY_COMMANDS) -> list[Run]:
    """Lay ``trial`` over ``tree`` (a copy of ``base``), run each command on it, put the files back."""
    for rel, data in trial.files:
        (tree / rel).write_bytes(data)
    argvs = {
        "check": ["check", str(tree), "--format", "json"],
        "build": ["build", str(tree), "-o", str(output)],
        "propose": ["propose", str(tree)],
        "export": ["export", str(tree)],
        "diff": ["diff", str(base), str(tree), "--format", "markdown"],
    }
    runs = []
    try:
        for command in commands:
            code, out, err, crash = call(argvs[command])
            runs.append(Run(trial.name, command, code, out, err, crash))
    finally:
        for rel, _ in trial.files:
            shutil.copyfile(base / rel, tree / rel)
    return runs


def trial_problems(runs: list[Run]) -> list[str]:
    """Each run's problems, and a value one command accepts but another refuses as bad input."""
    found = [f"{r.command}: {p}" for r in runs for p in r.problems()]
    accepted = [r.command for r in runs if r.code in (0, 1)]
    refused = [r.command for r in runs if r.code == 2]
    if accepted and refused:
        found.append(f"accepted by {', '.join(accepted)} but refused by {', '.join(refused)}")
    return found


def boundary_sample(trials: list[Trial], n: int) -> list[Trial]:
    """``n`` trials spread evenly over the list, the swapped pairs always among them."""
    swapped = [t for t in trials if not re.search(r" = ", t.name)]
    rest = [t for t in trials if t not in swapped]
    step = max(len(rest) // max(n - len(swapped), 1), 1)
    return swapped + rest[::step][: max(n - len(swapped), 0)]


def _main() -> int:
    import tempfile

    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--seed", type=int, default=SEED)
    p.add_argument("--show", type=int, default=0, help="print this many distinct error messages")
    p.add_argument("--boundary", action="store_true",
                   help="run the boundary-value trials through every command instead of the mutants")
    p.add_argument("--sample", type=int, default=0, help="with --boundary: only this many trials, spread evenly")
    args = p.parse_args()
    if args.boundary:
        return _boundary_main(args.sample)
    start = time.perf_counter()
    total = bad = 0
    kinds: dict[str, int] = {}
    codes: dict[int | None, int] = {}
    slowest = 0.0
    with tempfile.TemporaryDirectory() as tmp:
        for target, group in corpus(args.seed).items():
            tree = base_tree(target, Path(tmp) / "specs")
            for outcome in run_mutants(group, tree, check_redirected):
                total += 1
                codes[outcome.code] = codes.get(outcome.code, 0) + 1
                slowest = max(slowest, outcome.seconds)
                key = error_key(outcome.stderr) if outcome.code == 2 else None
                if key:
                    kinds[key] = kinds.get(key, 0) + 1
                problems = outcome.problems()
                if outcome.seconds > TIME_BOUND_S:  # reported here, never asserted by a test
                    problems.append(f"took {outcome.seconds:.2f} s (bound {TIME_BOUND_S} s)")
                if problems:
                    bad += 1
                    print(f"FAIL {outcome.mutant.name}: {'; '.join(problems)}")
    elapsed = time.perf_counter() - start
    tracebacks = bad
    print(f"mutants tried: {total}")
    print(f"exit codes: {dict(sorted(codes.items(), key=lambda kv: str(kv[0])))}")
    print(f"distinct error messages (first line, location stripped): {len(kinds)}")
    print(f"failed runs (tracebacks, crashes, bad exits, too slow): {tracebacks}")
    print(f"slowest run: {slowest:.3f} s; corpus time: {elapsed:.1f} s")
    for key, n in sorted(kinds.items(), key=lambda kv: -kv[1])[: args.show]:
        print(f"{n:5d}  {key[:150]}")
    return 1 if bad else 0


def _boundary_main(sample: int) -> int:
    import tempfile

    trials = boundary_trials()
    if sample:
        trials = boundary_sample(trials, sample)
    start = time.perf_counter()
    runs_per_command: dict[str, int] = {}
    codes: dict[str, dict[int | None, int]] = {}
    causes: dict[str, list[str]] = {}
    bad_trials = 0
    with tempfile.TemporaryDirectory() as tmp:
        base = boundary_tree(Path(tmp) / "base")
        tree = boundary_tree(Path(tmp) / "specs")
        for trial in trials:
            runs = run_trial(trial, tree, base, Path(tmp) / "site", check_redirected)
            for r in runs:
                runs_per_command[r.command] = runs_per_command.get(r.command, 0) + 1
                by_code = codes.setdefault(r.command, {})
                by_code[r.code] = by_code.get(r.code, 0) + 1
                if r.problems():
                    causes.setdefault(r.cause(), []).append(f"{r.command}: {trial.name}")
            problems = trial_problems(runs)
            if problems:
                bad_trials += 1
                print(f"FAIL {trial.name}: {'; '.join(problems)[:400]}")
    print(f"boundary trials: {len(trials)}")
    for command, n in runs_per_command.items():
        print(f"  {command}: {n} runs, exit codes {dict(sorted(codes[command].items(), key=lambda kv: str(kv[0])))}")
    print(f"trials with a problem: {bad_trials}")
    print(f"distinct causes: {len(causes)}")
    for cause, where in sorted(causes.items(), key=lambda kv: -len(kv[1])):
        print(f"{len(where):5d}  {cause}  (e.g. {where[0][:150]})")
    print(f"campaign time: {time.perf_counter() - start:.1f} s")
    return 1 if bad_trials else 0


if __name__ == "__main__":
    sys.exit(_main())
