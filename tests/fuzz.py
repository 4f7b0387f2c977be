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
        if self.seconds > TIME_BOUND_S:
            found.append(f"took {self.seconds:.2f} s (bound {TIME_BOUND_S} s)")
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
            crash = repr(exc)[:300]
    return code, out.getvalue(), err.getvalue(), crash


def _main() -> int:
    import tempfile

    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--seed", type=int, default=SEED)
    p.add_argument("--show", type=int, default=0, help="print this many distinct error messages")
    args = p.parse_args()
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


if __name__ == "__main__":
    sys.exit(_main())
