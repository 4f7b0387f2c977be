"""Unit strings to SI values with a dimension, and SI values back to engineering notation.

Why our own parser
------------------
A requirement file says ``"±10 V"``, ``"50 g"``, ``"200 kS/s"`` or ``"20 nV/√Hz"``, and every
figure specfold computes follows from how those strings are read.  A well-known general units
library was measured on exactly these strings: it silently dropped the ``±`` and the ``√``, read
``g`` as the gram and ``kS/s`` as kilosiemens per second.  Each of those gives a plausible number
with the wrong meaning, and nothing downstream can notice.  So this module knows only the units of
data acquisition, reads them strictly, and refuses anything else with a sentence that says what
it found and what it expected.  Every failure is a :class:`~generator.errors.SpecError`.

Dimensions
----------
A value is held as an SI float plus a *dimension string*.  The base dimensions are listed in
:data:`CANONICAL_DIMS`:

``Hz`` (Hz, S/s, sps, fps, rpm), ``V``, ``A``, ``s`` (s, min, h, d), ``m``, ``m/s^2`` (m/s², g),
``m/s``, ``Pa`` (Pa, bar, psi), ``N``, ``N*m`` (N·m), ``K`` (K, °C), ``ε`` (strain), ``rad``
(rad, °, deg), ``1`` (plain ratio: %, ppm, ppb, or a bare number), ``bit/s``, ``B/s``, ``B``,
``bit``, ``cycles/m`` (cycles/mm, cy/mm, lp/mm), ``dB`` and ``dBFS``.

A unit written as *numerator/denominator* (``"100 mV/g"``, ``"2 mV/V"``, ``"41 µV/°C"``) has
the dimension ``"<numerator dim>/<denominator dim>"``: ``"V/m/s^2"``, ``"V/V"``, ``"V/K"``.
A noise density over the square root of bandwidth has ``"<numerator dim>/√Hz"``: ``"V/√Hz"``,
``"m/s^2/√Hz"``.  The denominator is never a plain ratio nor a decibel value.

Conventions
-----------
* ``g`` is standard gravity, 9.80665 m/s² exactly (3rd CGPM, 1901), never the gram.
* ``°C`` and ``K`` are temperature *differences*: the factor is 1 and 273.15 is never added,
  because every temperature a requirement gives (a sensitivity per °C, an error band) is one.
* ``psi`` is the pound-force per square inch, derived from its exact definitions
  (lb = 0.45359237 kg, in = 0.0254 m) and standard gravity.
* ``dB`` and ``dBFS`` values are kept as decibel numbers, not turned into ratios.  0 dBFS is a
  full-scale sine (the sine-referenced convention).
* ``S/s`` is samples per second and reads as a frequency; ``B`` is the byte (decimal prefixes,
  and the binary ``KiB``... for 1024-based sizes), ``bit`` the bit.  Where bit/s is expected a
  B/s value is converted (x 8), and where bytes are expected a bit count is converted (/ 8).
* The micro prefix may be written with the micro sign (U+00B5), the Greek mu (U+03BC) or ``u``.
* ``rms`` after an amplitude unit is accepted and ignored (amplitudes are read as written).
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass
from decimal import Decimal
from functools import lru_cache

from generator.errors import SpecError

__all__ = [
    "ANY",
    "CANONICAL_DIMS",
    "MAX_LENGTH",
    "PSI",
    "STANDARD_GRAVITY",
    "Quantity",
    "Span",
    "Unit",
    "dimension_name",
    "format_in_unit",
    "format_percent",
    "format_quantity",
    "parse_quantity",
    "parse_span",
    "parse_unit",
]

MAX_LENGTH = 200
"""Longest value text accepted; no real quantity comes near it, and it bounds the work per value."""

STANDARD_GRAVITY = 9.80665
"""Standard acceleration of gravity in m/s², the unit ``g`` (3rd CGPM, 1901)."""

_POUND_KG = 0.45359237  # international pound, exact by definition (1959)
_INCH_M = 0.0254  # international inch, exact by definition (1959)
PSI = _POUND_KG * STANDARD_GRAVITY / _INCH_M**2
"""One pound-force per square inch in pascals: lb x g_n / in²."""

ANY = "*"
"""In ``expect``, accepts every dimension."""

_ROOT_HZ = "√Hz"


@dataclass(frozen=True)
class Quantity:
    """A single value: ``value`` in SI units, ``dim`` a dimension string (see the module doc)."""

    value: float
    dim: str


@dataclass(frozen=True)
class Span:
    """A range such as ``"±10 V"`` (bipolar) or ``"0..5 V"`` (unipolar), ends in SI units.

    ``bipolar`` is true only for the ``±`` form, which is symmetric about zero.
    """

    low: float
    high: float
    dim: str
    bipolar: bool

    @property
    def width(self) -> float:
        """Full-scale range, high - low: 20 V for ``"±10 V"``, 5 V for ``"0..5 V"``."""
        return self.high - self.low

    @property
    def peak(self) -> float:
        """Largest magnitude either end reaches, max(|low|, |high|): the highest voltage the range
        puts on a terminal (what safety limits and a driven device's limit are about)."""
        return max(abs(self.low), abs(self.high))

    @property
    def amplitude(self) -> float:
        """Amplitude of the largest sine that fits, about the range's centre: (high - low) / 2.
        10 V for ``"±10 V"``, 2.5 V for ``"0..5 V"`` (a sine centred on 2.5 V); a full-scale sine is
        0 dBFS [AES17] on either kind of range."""
        return (self.high - self.low) / 2.0


@dataclass(frozen=True)
class Unit:
    """A unit as written (normalised spelling), the SI value of one of it, and its dimension."""

    symbol: str
    factor: float
    dim: str


# ---------------------------------------------------------------------------------------------
# The unit table
# ---------------------------------------------------------------------------------------------

# SI prefixes that are powers of 1000 (SI Brochure, 9th edition, table 7).  Centi and hecto are
# added only where the trade writes them (cm, hPa); deci and deca never, since "d" is the day
# and "dB" the decibel.
_PREFIXES: tuple[tuple[str, int], ...] = (
    ("y", -24), ("z", -21), ("a", -18), ("f", -15), ("p", -12), ("n", -9), ("µ", -6),
    ("m", -3), ("k", 3), ("M", 6), ("G", 9), ("T", 12), ("P", 15), ("E", 18), ("Z", 21),
    ("Y", 24),
)  # fmt: skip
# IEC 80000-13 binary prefixes, powers of 1024.
_BINARY_PREFIXES: tuple[tuple[str, int], ...] = (
    ("Ki", 1), ("Mi", 2), ("Gi", 3), ("Ti", 4), ("Pi", 5), ("Ei", 6),
)  # fmt: skip


@dataclass(frozen=True)
class _Entry:
    """One spelling's meaning: SI value = number x 10**exp10 x scale.

    The power of ten is kept apart from the rest so that decimal prefixes are applied in the
    decimal string before conversion to float; ``"305.2 µV"`` then reads exactly like
    ``"305.2e-6"`` and formatting then parsing returns the very same float.
    """

    symbol: str
    dim: str
    exp10: int
    scale: float

    def unit(self) -> Unit:
        return Unit(self.symbol, float(f"1e{self.exp10}") * self.scale, self.dim)


@dataclass(frozen=True)
class _Base:
    symbol: str  # canonical spelling, shown back to users
    aliases: tuple[str, ...]  # other accepted spellings, prefixed the same way
    dim: str
    exp10: int = 0
    scale: float = 1.0
    lo: int = 0  # lowest and highest decimal prefix exponent accepted (0, 0: no prefixes)
    hi: int = 0
    extra: tuple[tuple[str, int], ...] = ()
    binary: bool = False


_FULL = (-24, 24)
_BASES: tuple[_Base, ...] = (
    _Base("Hz", (), "Hz", lo=-24, hi=24),
    _Base("S/s", ("sps",), "Hz", lo=0, hi=24),
    _Base("fps", (), "Hz", lo=0, hi=3),
    _Base("rpm", (), "Hz", scale=1 / 60),  # one revolution per 60 s
    _Base("V", (), "V", lo=-24, hi=24),
    _Base("A", (), "A", lo=-24, hi=24),
    _Base("s", (), "s", lo=-24, hi=0),
    _Base("min", (), "s", scale=60.0),
    _Base("h", (), "s", scale=3600.0),
    _Base("d", (), "s", scale=86400.0),
    _Base("m", (), "m", lo=-24, hi=3, extra=(("c", -2),)),
    _Base("m/s²", ("m/s^2", "m/s2", "m/s/s"), "m/s^2", lo=-24, hi=3),
    _Base("g", (), "m/s^2", scale=STANDARD_GRAVITY, lo=-9, hi=0),
    _Base("m/s", (), "m/s", lo=-24, hi=3),
    _Base("Pa", (), "Pa", lo=-24, hi=24, extra=(("h", 2),)),
    _Base("bar", (), "Pa", exp10=5, lo=-3, hi=0),
    _Base("psi", (), "Pa", scale=PSI),
    _Base("N", (), "N", lo=-24, hi=24),
    _Base("N·m", ("N*m", "Nm"), "N*m", lo=-24, hi=24),
    _Base("K", (), "K", lo=-24, hi=3),
    _Base("°C", ("degC",), "K"),
    _Base("ε", ("strain",), "ε", lo=-24, hi=0),
    _Base("rad", (), "rad", lo=-24, hi=0),
    _Base("°", ("deg",), "rad", scale=math.pi / 180),
    _Base("%", (), "1", exp10=-2),
    _Base("ppm", (), "1", exp10=-6),
    _Base("ppb", (), "1", exp10=-9),
    _Base("dB", (), "dB"),
    _Base("dBFS", (), "dBFS"),
    _Base("bit/s", ("b/s", "bps"), "bit/s", lo=0, hi=24),
    _Base("B/s", (), "B/s", lo=0, hi=24, binary=True),
    _Base("B", (), "B", lo=0, hi=24, binary=True),
    _Base("bit", (), "bit", lo=0, hi=24),
    # spatial frequency: the prefix sits on the length in the denominator
    _Base("cycles/m", ("cy/m", "lp/m"), "cycles/m"),
    _Base("cycles/cm", ("cy/cm", "lp/cm"), "cycles/m", exp10=2),
    _Base("cycles/mm", ("cy/mm", "lp/mm"), "cycles/m", exp10=3),
    _Base("cycles/µm", ("cy/µm", "lp/µm", "cycles/um", "cy/um", "lp/um"), "cycles/m", exp10=6),
)


# Suggestions are drawn from everyday spellings only, so that a slip is never "corrected" to
# an exotic prefix (attometre for "gram").
_COMMON_EXPONENTS = frozenset({-12, -9, -6, -3, 0, 3, 6, 9, 12})


def _build_table() -> tuple[dict[str, _Entry], list[str]]:
    """Every accepted spelling -> its entry, and the everyday symbols offered as suggestions."""
    table: dict[str, _Entry] = {}
    common: set[str] = set()

    def add(key: str, entry: _Entry) -> None:
        old = table.get(key)
        if old is not None and old != entry:  # a table bug, caught on import
            raise RuntimeError(f"unit spelling {key!r} means both {old} and {entry}")
        table[key] = entry

    for base in _BASES:
        prefixes = [("", 0), *base.extra]
        prefixes += [(p, e) for p, e in _PREFIXES if base.lo <= e <= base.hi]
        for prefix, exp in prefixes:
            entry = _Entry(prefix + base.symbol, base.dim, base.exp10 + exp, base.scale)
            if exp in _COMMON_EXPONENTS:
                common.add(entry.symbol)
            for spelling in (base.symbol, *base.aliases):
                add(prefix + spelling, entry)
                if prefix == "µ":
                    add("u" + spelling, entry)
        if base.binary:
            for prefix, power in _BINARY_PREFIXES:
                entry = _Entry(prefix + base.symbol, base.dim, base.exp10, base.scale * 1024.0**power)
                add(prefix + base.symbol, entry)
                common.add(entry.symbol)
    return table, sorted(common)


_UNITS, _SYMBOLS = _build_table()
_BY_LOWER: dict[str, list[str]] = {}
for _key, _entry in _UNITS.items():
    _BY_LOWER.setdefault(_key.lower(), []).append(_entry.symbol)

# Ways of writing "per root hertz" in a noise density.
_ROOT_HZ_SPELLINGS = frozenset(
    {"√Hz", "√(Hz)", "rtHz", "sqrt(Hz)", "sqrtHz", "Hz^0.5", "Hz^(1/2)", "Hz^1/2", "Hz^½", "Hz½"}
)

CANONICAL_DIMS: tuple[str, ...] = tuple(dict.fromkeys(b.dim for b in _BASES))
"""Every base dimension string; compound ones are built from these (see the module doc)."""

_NOT_NUMERATOR = frozenset({"dB", "dBFS"})
_NOT_DENOMINATOR = frozenset({"1", "dB", "dBFS"})
# Dimensions of signal amplitudes, where "rms" after the unit is meaningful.
_AMPLITUDE_DIMS = frozenset({"V", "A", "m", "m/s", "m/s^2", "Pa", "N", "N*m", "K", "ε", "rad"})

# Values convertible to an expected dimension: (found, expected) -> multiplier.
_EQUIVALENT: dict[tuple[str, str], float] = {
    ("B/s", "bit/s"): 8.0,
    ("bit/s", "B/s"): 1 / 8,
    ("bit", "B"): 1 / 8,
    ("B", "bit"): 8.0,
}

_NAMES: dict[str, str] = {
    "Hz": "a frequency",
    "V": "a voltage",
    "A": "a current",
    "s": "a time",
    "m": "a length",
    "m/s^2": "an acceleration",
    "m/s": "a velocity",
    "Pa": "a pressure",
    "N": "a force",
    "N*m": "a torque",
    "K": "a temperature difference",
    "ε": "a strain",
    "rad": "an angle",
    "1": "a plain ratio",
    "bit/s": "a data rate",
    "B/s": "a data rate in bytes",
    "B": "a data size",
    "bit": "a number of bits",
    "cycles/m": "a spatial frequency",
    "dB": "a ratio in dB",
    "dBFS": "a level in dBFS",
    ANY: "any quantity",
}

_EXAMPLES: dict[str, str] = {
    "Hz": "20 kHz",
    "V": "10 V",
    "A": "2 A",
    "s": "1 ms",
    "m": "3.45 µm",
    "m/s^2": "50 g",
    "m/s": "10 mm/s",
    "Pa": "100 kPa",
    "N": "500 N",
    "N*m": "50 N·m",
    "K": "2 °C",
    "ε": "500 µε",
    "rad": "1 deg",
    "1": "5 %",
    "bit/s": "100 Mbit/s",
    "B/s": "50 MB/s",
    "B": "2 TB",
    "bit": "64 kbit",
    "cycles/m": "40 cycles/mm",
    "dB": "0.1 dB",
    "dBFS": "-40 dBFS",
    "V/m/s^2": "100 mV/g",
    "V/ε": "2 µV/µε",
    "V/V": "2 mV/V",
    "V/Pa": "10 mV/Pa",
    "V/K": "41 µV/°C",
    "V/√Hz": "20 nV/√Hz",
    "A/√Hz": "2 pA/√Hz",
    "m/s^2/√Hz": "50 µg/√Hz",
    "Pa/√Hz": "1 mPa/√Hz",
}

# How each base dimension is shown: symbol, prefix exponent range, and a power of ten the
# value is multiplied by for display (spatial frequency shows per millimetre, ratios in a
# compound numerator show in ppm).
_DISPLAY: dict[str, tuple[str, int, int, int]] = {
    "Hz": ("Hz", *_FULL, 0),
    "V": ("V", *_FULL, 0),
    "A": ("A", *_FULL, 0),
    "s": ("s", -24, 0, 0),
    "m": ("m", -24, 3, 0),
    "m/s^2": ("m/s²", -24, 3, 0),
    "m/s": ("m/s", -24, 3, 0),
    "Pa": ("Pa", *_FULL, 0),
    "N": ("N", *_FULL, 0),
    "N*m": ("N·m", *_FULL, 0),
    "K": ("K", -24, 3, 0),
    "ε": ("ε", -24, 0, 0),
    "rad": ("rad", -24, 0, 0),
    "1": ("", 0, 0, 0),
    "": ("", 0, 0, 0),
    "bit/s": ("bit/s", 0, 24, 0),
    "B/s": ("B/s", 0, 24, 0),
    "B": ("B", 0, 24, 0),
    "bit": ("bit", 0, 24, 0),
    "cycles/m": ("cycles/mm", 0, 0, -3),
    "dB": ("dB", 0, 0, 0),
    "dBFS": ("dBFS", 0, 0, 0),
}
_PREFIX_BY_EXP: dict[int, str] = {e: p for p, e in _PREFIXES}
_PREFIX_BY_EXP[0] = ""

# A leading number: optional sign, digits with an optional point, optional exponent.  ASCII
# digits only: Python's \d and float() would also take other scripts' digits.
_NUMBER = re.compile(r"([+-]?)([0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE]([+-]?[0-9]+))?")
_NON_FINITE = re.compile(r"[+-]?(?:nan|inf(?:inity)?)(?![a-z])", re.IGNORECASE)
_RMS = re.compile(r"[ _]?rms$")
_AROUND_OPERATORS = re.compile(r" ?([/·*^()]) ?")
_SPAN_SPLIT = re.compile(r"\.\.|…")
_PLUS_MINUS = re.compile(r"(?:±|\+/-|\+-)")

_TRANSLATE = str.maketrans(
    {
        "\u2212": "-",  # minus sign, as typeset documents write it
        "\u03bc": "µ",  # Greek mu, as many keyboards produce it, to the micro sign
        "\u22c5": "·",  # dot operator to middle dot
        "\u00ba": "°",  # masculine ordinal, often typed for the degree sign
        "\u2103": "°C",  # degree Celsius as one character
        "\u212a": "K",  # Kelvin sign
        "\u200b": None,  # zero-width space, zero-width joiners, word joiner, byte-order mark:
        "\u200c": None,  # invisible, and pasted from documents more often than one would think
        "\u200d": None,
        "\u2060": None,
        "\ufeff": None,
    }
)


# ---------------------------------------------------------------------------------------------
# Messages
# ---------------------------------------------------------------------------------------------


def _quote(text: str) -> str:
    """The text in double quotes, with anything unprintable escaped so the message stays legible."""
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ch.isprintable():
            out.append(ch)
        else:
            out.append(f"\\u{ord(ch):04x}" if ord(ch) <= 0xFFFF else f"\\U{ord(ch):08x}")
    return '"' + "".join(out) + '"'


def _lead(field: str) -> str:
    return f"{field}: " if field else ""


def _dims(expect: str | tuple[str, ...]) -> tuple[str, ...]:
    return (expect,) if isinstance(expect, str) else tuple(expect)


def _expected_names(expect: tuple[str, ...]) -> str:
    names = [dimension_name(d) for d in expect] or ["a value"]
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " or " + names[-1]


def _example(expect: tuple[str, ...]) -> str | None:
    for dim in expect:
        if dim in _EXAMPLES:
            return _EXAMPLES[dim]
    return None


def _such_as(expect: tuple[str, ...]) -> str:
    """'a frequency such as "20 kHz"' for messages about a missing or unreadable part."""
    ex = _example(expect)
    return _expected_names(expect) + (f" such as {_quote(ex)}" if ex else "")


def _eg(expect: tuple[str, ...]) -> str:
    """'a frequency (e.g. "20 kHz")' for messages about a value of the wrong kind."""
    ex = _example(expect)
    return _expected_names(expect) + (f" (e.g. {_quote(ex)})" if ex else "")


def dimension_name(dim: str) -> str:
    """A phrase naming a dimension for messages: ``"Hz"`` -> ``"a frequency"``.

    Compound dimensions read as ``"a noise density in V/√Hz"`` or ``"a quantity in V per
    m/s²"``; an unknown string is named as it is, never rejected.
    """
    if dim in _NAMES:
        return _NAMES[dim]
    if dim.endswith("/" + _ROOT_HZ):
        return f"a noise density in {_display_symbol(dim[: -len(_ROOT_HZ) - 1])}/{_ROOT_HZ}"
    split = _split_dim(dim)
    if split is not None:
        num, den = split
        if num == "1":
            return f"a ratio per {_display_symbol(den)}"
        return f"a quantity in {_display_symbol(num)} per {_display_symbol(den)}"
    return f"a quantity in {dim}"


def _display_symbol(dim: str) -> str:
    if dim == "1":
        return "1"
    return _DISPLAY[dim][0] if dim in _DISPLAY else dim


def _split_dim(dim: str) -> tuple[str, str] | None:
    """Split ``"V/m/s^2"`` into ``("V", "m/s^2")``: the first cut where both halves are known."""
    for i, ch in enumerate(dim):
        if ch == "/" and dim[:i] in _DISPLAY and dim[i + 1 :] in _DISPLAY:
            return dim[:i], dim[i + 1 :]
    return None


# ---------------------------------------------------------------------------------------------
# Parsing
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Reading:
    """A number (still as decimal text) and the unit text after it."""

    number: str  # as written, for messages
    sign: str
    mantissa: str
    exponent: int
    unit_text: str


def _normalise(text: str) -> str:
    text = text.translate(_TRANSLATE)
    return re.sub(r"\s+", " ", text).strip()


def _coerce(text: object, field: str, expect: tuple[str, ...]) -> str:
    """The raw value as text; a TOML number stands for itself, anything else is refused."""
    if isinstance(text, str):
        return text
    if isinstance(text, int | float) and not isinstance(text, bool):
        return repr(text)
    raise SpecError(f"{_lead(field)}expected {_such_as(expect)} in quotes, found {text!r}")


def _check_length(text: str, field: str, expect: tuple[str, ...]) -> None:
    if len(text) > MAX_LENGTH:
        raise SpecError(
            f"{_lead(field)}the value is {len(text)} characters long, expected at most {MAX_LENGTH}: {_such_as(expect)}"
        )


def _read_number(raw: str, text: str, field: str, expect: tuple[str, ...]) -> _Reading:
    """Split normalised ``text`` into number and unit text; ``raw`` is quoted in messages."""
    if not text:
        raise SpecError(f"{_lead(field)}{_quote(raw)} is empty, expected {_such_as(expect)}")
    if _NON_FINITE.match(text):
        raise SpecError(f"{_lead(field)}{_quote(raw)} is not a finite number, expected {_such_as(expect)}")
    match = _NUMBER.match(text)
    if match is None:
        raise SpecError(f"{_lead(field)}{_quote(raw)} does not start with a number, expected {_such_as(expect)}")
    sign, mantissa, exponent = match.groups()
    rest = text[match.end() :]
    if re.match(r" ?,[0-9]", rest):
        raise SpecError(
            f"{_lead(field)}{_quote(raw)} has a comma in the number; write a decimal point "
            f'(e.g. "1.5 kHz") and no thousands separator'
        )
    return _Reading(match.group(0), sign, mantissa, int(exponent or 0), rest.strip())


def _to_float(reading: _Reading, exp10: int, scale: float) -> float:
    # The prefix's power of ten joins the exponent in the text, so the decimal-to-binary
    # rounding happens once (exactly as for "305.2e-6"), and only a non-decimal scale
    # (g, psi, °, binary prefixes) multiplies afterwards.
    number = float(f"{reading.sign}{reading.mantissa}e{reading.exponent + exp10}")
    return number * scale if scale != 1.0 else number


def _lookup(unit_text: str) -> _Entry | None:
    """The entry for a unit, simple or compound (``num/den`` or ``num/√Hz``), or None."""
    entry = _UNITS.get(unit_text)
    if entry is not None:
        return entry
    for i, ch in enumerate(unit_text):
        if ch != "/":
            continue
        num = _UNITS.get(unit_text[:i])
        if num is None or num.dim in _NOT_NUMERATOR:
            continue
        den_text = unit_text[i + 1 :]
        if den_text in _ROOT_HZ_SPELLINGS:
            return _Entry(f"{num.symbol}/{_ROOT_HZ}", f"{num.dim}/{_ROOT_HZ}", num.exp10, num.scale)
        if len(den_text) > 2 and den_text[0] == "(" and den_text[-1] == ")":
            den_text = den_text[1:-1]
        den = _UNITS.get(den_text)
        if den is None or den.dim in _NOT_DENOMINATOR:
            continue
        den_symbol = f"({den.symbol})" if "/" in den.symbol else den.symbol
        return _Entry(
            f"{num.symbol}/{den_symbol}",
            f"{num.dim}/{den.dim}",
            num.exp10 - den.exp10,
            num.scale / den.scale,
        )
    return None


def _suggest(unit_text: str) -> str | None:
    """A known spelling close to ``unit_text``, for "did you mean ...?"."""
    if len(unit_text) > 30:
        return None
    same_letters = _BY_LOWER.get(unit_text.lower())
    if same_letters:
        return same_letters[0]
    slash = unit_text.rfind("/")
    if slash > 0:
        # a compound: keep the half that is right and mend the other
        left, right = unit_text[:slash], unit_text[slash + 1 :]
        left_ok = _UNITS.get(left)
        if left_ok is not None:
            mended = _suggest(right)
            return f"{left_ok.symbol}/{mended}" if mended else None
        right_ok = _UNITS.get(right) is not None or right in _ROOT_HZ_SPELLINGS
        mended = _suggest(left)
        if right_ok and mended:
            return f"{mended}/{right}"
    close = difflib.get_close_matches(unit_text, _SYMBOLS, n=1, cutoff=0.6)
    return close[0] if close else None


def _clean_unit(unit_text: str) -> str:
    """Spaces around operators go; a remaining space means multiplication (``"N m"``)."""
    unit_text = _AROUND_OPERATORS.sub(r"\1", unit_text)
    return unit_text.replace(" ", "·")


def _resolve_unit(raw: str, unit_text: str, field: str, expect: tuple[str, ...]) -> _Entry:
    """The unit entry for ``unit_text``; a trailing "rms" is checked and dropped."""
    rms = _RMS.search(unit_text) is not None
    if rms:
        unit_text = _RMS.sub("", unit_text)
    unit_text = _clean_unit(unit_text)
    entry = _lookup(unit_text)
    if entry is None:
        hint = _suggest(unit_text)
        tail = f"did you mean {_quote(hint)}?" if hint else f"expected {_such_as(expect)}"
        raise SpecError(f"{_lead(field)}{_quote(raw)} has an unknown unit {_quote(unit_text)}; {tail}")
    if rms and entry.dim.split("/")[0] not in _AMPLITUDE_DIMS:
        raise SpecError(
            f"{_lead(field)}{_quote(raw)}: rms applies to a signal amplitude, not to "
            f"{dimension_name(entry.dim)}; remove it"
        )
    return entry


def _value_and_dim(
    raw: str, reading: _Reading, entry: _Entry | None, field: str, expect: tuple[str, ...]
) -> tuple[float, str]:
    """SI value and dimension, checked against ``expect`` (with the B/s <-> bit/s equivalences)."""
    if entry is None:
        if "1" not in expect and ANY not in expect:
            raise SpecError(f"{_lead(field)}{_quote(raw)} has no unit, expected {_such_as(expect)}")
        value, dim = _to_float(reading, 0, 1.0), "1"
    else:
        value, dim = _to_float(reading, entry.exp10, entry.scale), entry.dim
    if dim not in expect and ANY not in expect:
        for target in expect:
            factor = _EQUIVALENT.get((dim, target))
            if factor is not None:
                value, dim = value * factor, target
                break
        else:
            raise SpecError(f"{_lead(field)}{_quote(raw)} is {dimension_name(dim)}, expected {_eg(expect)}")
    if not math.isfinite(value):
        raise SpecError(f"{_lead(field)}{_quote(raw)} is too large to hold as a number, expected {_such_as(expect)}")
    return value, dim


def _parse_one(raw: str, text: str, field: str, expect: tuple[str, ...]) -> tuple[float, str]:
    reading = _read_number(raw, text, field, expect)
    entry = _resolve_unit(raw, reading.unit_text, field, expect) if reading.unit_text else None
    return _value_and_dim(raw, reading, entry, field, expect)


def parse_quantity(text: str, expect: str | tuple[str, ...], field: str = "") -> Quantity:
    """Read one value with its unit, e.g. ``"20 kHz"`` -> ``Quantity(20000.0, "Hz")``.

    ``expect`` names the acceptable dimensions (``"*"`` accepts all); a bare number is
    accepted only where ``"1"`` (or ``"*"``) is expected.  ``field`` names the key in messages.
    Ranges (``±``, ``..``) are refused here: read them with :func:`parse_span`.  A large spec
    writes the same few values thousands of times: a value read once is remembered.
    """
    if type(text) is str and isinstance(expect, str | tuple):
        return _parse_quantity_memo(text, expect, field)
    return _parse_quantity(text, expect, field)


def _parse_quantity(text: str, expect: str | tuple[str, ...], field: str = "") -> Quantity:
    dims = _dims(expect)
    raw = _coerce(text, field, dims)
    _check_length(raw, field, dims)
    norm = _normalise(raw)
    if "±" in norm or _PLUS_MINUS.match(norm) or _SPAN_SPLIT.search(norm):
        raise SpecError(f"{_lead(field)}{_quote(raw)} is a range, expected a single value: {_such_as(dims)}")
    value, dim = _parse_one(raw, norm, field, dims)
    return Quantity(value, dim)


_parse_quantity_memo = lru_cache(maxsize=65536)(_parse_quantity)


def parse_span(text: str, expect: str | tuple[str, ...], field: str = "") -> Span:
    """Read a range: ``"±10 V"`` (bipolar, -10 V to 10 V) or ``"0..5 V"`` (unipolar).

    The ``..`` form takes the unit once at the end (``"-2..3 V"``) or on both ends
    (``"0 V..5 V"``).  The lower end must come first and be below the upper.
    """
    dims = _dims(expect)
    raw = _coerce(text, field, dims)
    _check_length(raw, field, dims)
    norm = _normalise(raw)
    lead = _lead(field)
    pm = _PLUS_MINUS.match(norm)
    if pm is not None:
        rest = norm[pm.end() :].strip()
        if rest[:1] in ("+", "-"):
            raise SpecError(f'{lead}{_quote(raw)} has a sign after ±; write the magnitude alone, e.g. "±10 V"')
        if "±" in rest or _SPAN_SPLIT.search(rest):
            raise SpecError(f"{lead}{_quote(raw)} mixes ± and ..; use one form of range")
        magnitude, dim = _parse_one(raw, rest, field, dims)
        if magnitude == 0:
            raise SpecError(f"{lead}{_quote(raw)} is an empty range; the magnitude must be above zero")
        return Span(-magnitude, magnitude, dim, True)
    if "±" in norm:
        raise SpecError(f'{lead}{_quote(raw)} has ± in the middle; write a range as "±10 V"')
    parts = _SPAN_SPLIT.split(norm)
    if len(parts) == 1:
        _parse_one(raw, norm, field, dims)  # garbage is reported as such, not as a missing range
        raise SpecError(f"{lead}{_quote(raw)} is a single value; {_span_hint(norm)}")
    if len(parts) > 2:
        raise SpecError(f'{lead}{_quote(raw)} has more than one ..; write a range as "0..5 V"')
    low_text, high_text = parts[0].strip(), parts[1].strip()
    low_reading = _read_number(raw, low_text, field, dims)
    high_reading = _read_number(raw, high_text, field, dims)
    low_entry = _resolve_unit(raw, low_reading.unit_text, field, dims) if low_reading.unit_text else None
    high_entry = _resolve_unit(raw, high_reading.unit_text, field, dims) if high_reading.unit_text else None
    if low_entry is not None and high_entry is not None and low_entry.dim != high_entry.dim:
        raise SpecError(
            f"{lead}{_quote(raw)} has ends of different kinds ({dimension_name(low_entry.dim)} "
            f"and {dimension_name(high_entry.dim)})"
        )
    # a unit written once, at either end, applies to both
    low, dim = _value_and_dim(raw, low_reading, low_entry or high_entry, field, dims)
    high, _ = _value_and_dim(raw, high_reading, high_entry or low_entry, field, dims)
    if low == high:
        raise SpecError(f"{lead}{_quote(raw)} is an empty range; the upper end must be above the lower")
    if low > high:
        raise SpecError(
            f"{lead}{_quote(raw)} has its upper end first; write the lower end first "
            f"(e.g. {_quote(_swapped(low_reading, high_reading))})"
        )
    return Span(low, high, dim, False)


def _swapped(low: _Reading, high: _Reading) -> str:
    """The range the user probably meant, ends exchanged: "5..0 V" -> "0..5 V"."""
    unit = high.unit_text or low.unit_text
    return f"{high.number}..{low.number}" + (f" {unit}" if unit else "")


def _span_hint(text: str) -> str:
    """'write "±5 V" for a bipolar range or "0..5 V" for a unipolar one', in the user's unit."""
    match = _NUMBER.match(text)
    if match is not None and not match.group(1):
        number, unit = match.group(0), text[match.end() :].strip()
        if unit:
            return f'write "±{number} {unit}" for a bipolar range or "0..{number} {unit}" for a unipolar one'
    return 'write "±10 V" for a bipolar range or "0..5 V" for a unipolar one'


def parse_unit(text: str, field: str = "") -> Unit:
    """Read a bare unit, e.g. a channel's engineering unit: ``"g"``, ``"µε"``, ``"N·m"``.

    The symbol comes back in its normalised spelling (``"uε"`` -> ``"µε"``, ``"m/s^2"`` ->
    ``"m/s²"``, ``"degC"`` -> ``"°C"``); ``factor`` is the SI value of one unit.
    """
    examples = '"g", "Pa", "µε" or "V"'
    if not isinstance(text, str):
        raise SpecError(f"{_lead(field)}expected a unit in quotes such as {examples}, found {text!r}")
    if len(text) > MAX_LENGTH:
        raise SpecError(f"{_lead(field)}the unit is {len(text)} characters long, expected at most {MAX_LENGTH}")
    norm = _normalise(text)
    if not norm:
        raise SpecError(f"{_lead(field)}{_quote(text)} is empty, expected a unit such as {examples}")
    if _NUMBER.match(norm) or norm[0] in "+-":
        raise SpecError(f"{_lead(field)}{_quote(text)} starts with a number, expected a unit alone such as {examples}")
    unit_text = _clean_unit(norm)
    entry = _lookup(unit_text)
    if entry is None:
        hint = _suggest(unit_text)
        tail = f"did you mean {_quote(hint)}?" if hint else f"expected a unit such as {examples}"
        raise SpecError(f"{_lead(field)}{_quote(text)} is not a known unit; {tail}")
    return entry.unit()


# ---------------------------------------------------------------------------------------------
# Formatting
# ---------------------------------------------------------------------------------------------


def _layout(value: float, digits: int, lo: int, hi: int, offset: int) -> tuple[str, int]:
    """Number text and prefix exponent for ``value x 10**offset``.

    The value is rounded to ``digits`` significant digits (for 17 or more, the shortest text
    that reads back as the same float) and the decimal point is then moved in the digit
    string, so no second rounding happens.  The prefix exponent is the multiple of three that
    leaves 1 <= mantissa < 1000, clamped to [lo, hi]; where clamping would leave more than six
    integer digits or more than three leading zeros, the number is written with an exponent
    instead (``"1.5e-30"``), without prefix.
    """
    if value == 0:
        return "0", 0
    sign = "-" if value < 0 else ""
    exact = Decimal(repr(abs(value)) if digits >= 17 else f"{abs(value):.{digits - 1}e}")
    parts = exact.as_tuple()
    assert isinstance(parts.exponent, int)  # finite by the caller's check
    all_digits = "".join(str(d) for d in parts.digits)
    lead = parts.exponent + len(all_digits) - 1 + offset  # power of ten of the first digit
    shown = all_digits.rstrip("0") or "0"
    e3 = min(max(3 * (lead // 3), lo), hi)
    k = lead - e3
    if -3 <= k <= 5:
        if k >= 0:
            whole, frac = shown[: k + 1].ljust(k + 1, "0"), shown[k + 1 :]
            text = whole + ("." + frac if frac else "")
        else:
            text = "0." + "0" * (-k - 1) + shown
        return sign + text, e3
    mantissa = shown[0] + ("." + shown[1:] if len(shown) > 1 else "")
    return f"{sign}{mantissa}e{lead}", 0


def _check_digits(digits: int) -> None:
    if digits < 1:
        raise ValueError(f"digits must be at least 1, got {digits}")


def _display_parts(dim: str) -> tuple[str, int, int, int]:
    """Symbol, prefix range and display offset for a base or compound dimension."""
    if dim in _DISPLAY:
        return _DISPLAY[dim]
    if dim.endswith("/" + _ROOT_HZ):
        num, den_symbol, den_offset = dim[: -len(_ROOT_HZ) - 1], _ROOT_HZ, 0
    else:
        split = _split_dim(dim)
        if split is None:
            raise ValueError(f"no display form for dimension {dim!r}")
        num, den = split
        if den in _NOT_DENOMINATOR:
            raise ValueError(f"no display form for dimension {dim!r}")
        den_symbol, _, _, den_offset = _DISPLAY[den]
        if "/" in den_symbol:
            den_symbol = f"({den_symbol})"
    if num == "1" or num == "":
        # a ratio per unit (a temperature coefficient, say) reads best in ppm
        return f"ppm/{den_symbol}", 0, 0, 6 - den_offset
    if num not in _DISPLAY or num in _NOT_NUMERATOR:
        raise ValueError(f"no display form for dimension {dim!r}")
    symbol, lo, hi, offset = _DISPLAY[num]
    return f"{symbol}/{den_symbol}", lo, hi, offset - den_offset


def format_quantity(value: float, dim: str, digits: int = 4) -> str:
    """:func:`_format_quantity`, remembered: a large system shows the same few rates, bits and
    levels thousands of times.  Zero bypasses the memo (0.0 and -0.0 are equal keys)."""
    if value == 0.0 or not math.isfinite(value):
        return _format_quantity(value, dim, digits)
    return _format_quantity_memo(value, dim, digits)


def _format_quantity(value: float, dim: str, digits: int = 4) -> str:
    """SI ``value`` of dimension ``dim`` in engineering notation: 20000, "Hz" -> ``"20 kHz"``.

    The prefix is a power of 1000 leaving a mantissa in [1, 1000); the mantissa has ``digits``
    significant digits with trailing zeros dropped.  Times stop at seconds, lengths and
    accelerations at kilo, data sizes and rates use decimal prefixes from kilo up; spatial
    frequency shows in cycles/mm; dB, dBFS and plain ratios (``"1"`` or ``""``) have no prefix.
    With ``digits`` >= 17 the text reads back (:func:`parse_quantity`) as the very same float.
    Raises ValueError for a dimension this module does not produce (a programming error).
    """
    _check_digits(digits)
    symbol, lo, hi, offset = _display_parts(dim)
    if not math.isfinite(value):
        return f"{value} {symbol}".rstrip()
    number, e3 = _layout(value, digits, lo, hi, offset)
    if not symbol:
        return number
    return f"{number} {_PREFIX_BY_EXP[e3]}{symbol}"


_format_quantity_memo = lru_cache(maxsize=65536, typed=True)(_format_quantity)


def format_in_unit(value_si: float, unit: Unit, digits: int = 4) -> str:
    """SI ``value_si`` shown in an engineering unit: 490.3325 m/s² in g -> ``"50 g"``.

    No prefix is added: the unit is shown as the user wrote it.  The angle sign follows the
    number without a space (``"30°"``), every other symbol after one space.
    """
    _check_digits(digits)
    number = value_si / unit.factor
    if not math.isfinite(number):
        return f"{number} {unit.symbol}"
    text = _layout(number, digits, 0, 0, 0)[0]
    return f"{text}{unit.symbol}" if unit.symbol == "°" else f"{text} {unit.symbol}"


def format_percent(ratio: float, digits: int = 3) -> str:
    """A plain ratio as a percentage: 0.08 -> ``"8 %"``."""
    _check_digits(digits)
    if not math.isfinite(ratio):
        return f"{ratio * 100} %"
    return f"{_layout(ratio, digits, 0, 0, 2)[0]} %"
