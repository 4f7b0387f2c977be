"""Unit strings against independently known SI values, messages for bad input, and formatting.

Sources named beside each expected value:
* SI Brochure, 9th edition (BIPM 2019): prefixes (table 7); minute, hour, day, degree (table 8);
  a temperature interval in °C equals the same interval in K (section 2.3.1).
* Standard gravity g_n = 9.80665 m/s², 3rd CGPM (1901), also quoted in the SI Brochure.
* IEC 80000-13: binary prefixes Ki = 1024, Mi = 1024², ... (from memory).
* NIST SP 811, appendix B: psi = 6894.757 Pa, bar = 1e5 Pa (from memory); the exact psi
  6894.757293168 follows from lb = 0.45359237 kg and in = 0.0254 m (from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from generator.errors import SpecError
from generator.quantities import (
    CANONICAL_DIMS,
    Quantity,
    Span,
    Unit,
    format_in_unit,
    format_percent,
    format_quantity,
    parse_quantity,
    parse_span,
    parse_unit,
)

G_N = 9.80665  # standard gravity, 3rd CGPM 1901 / SI Brochure
PSI_PA = 6894.757293168  # lbf/in², NIST SP 811 (from memory)

# (text, expected dimension(s), SI value, dimension returned)
GOOD: list[tuple[str, str | tuple[str, ...], float, str]] = [
    # frequency
    ("20 kHz", "Hz", 20e3, "Hz"),  # SI Brochure 9th ed., prefixes: k = 1e3
    ("20kHz", "Hz", 20e3, "Hz"),  # SI Brochure 9th ed., prefixes
    ("20\u2009kHz", "Hz", 20e3, "Hz"),  # thin space; SI Brochure 9th ed., prefixes
    ("20\u00a0kHz", "Hz", 20e3, "Hz"),  # no-break space; SI Brochure 9th ed., prefixes
    ("1.5e6 Hz", "Hz", 1.5e6, "Hz"),  # plain exponent notation
    ("2.5 MHz", "Hz", 2.5e6, "Hz"),  # SI Brochure 9th ed., prefixes: M = 1e6
    ("200 kS/s", "Hz", 200e3, "Hz"),  # samples per second, common practice; SI prefixes
    ("51.2 kS/s", "Hz", 51.2e3, "Hz"),  # common practice; SI prefixes
    ("1 Msps", "Hz", 1e6, "Hz"),  # samples per second, common practice
    ("30 fps", "Hz", 30.0, "Hz"),  # frames per second, common practice
    ("3000 rpm", "Hz", 50.0, "Hz"),  # one revolution per minute = 1/60 Hz, common practice
    # time
    ("1.5 ps", "s", 1.5e-12, "s"),  # SI Brochure 9th ed., prefixes: p = 1e-12
    ("41.59 µs", "s", 41.59e-6, "s"),  # SI Brochure 9th ed., prefixes: µ = 1e-6
    ("6 h", "s", 21600.0, "s"),  # SI Brochure 9th ed., table 8: h = 3600 s
    ("2 min", "s", 120.0, "s"),  # SI Brochure 9th ed., table 8: min = 60 s
    ("1 d", "s", 86400.0, "s"),  # SI Brochure 9th ed., table 8: d = 86 400 s
    # voltage and current; the three spellings of micro
    ("10 V", "V", 10.0, "V"),  # SI unit
    ("\u22123 V", "V", -3.0, "V"),  # U+2212 minus sign, typeset style
    ("1e-3 V", "V", 1e-3, "V"),  # plain exponent notation
    ("305.2 \u00b5V", "V", 305.2e-6, "V"),  # micro sign; SI Brochure 9th ed., prefixes
    ("305.2 \u03bcV", "V", 305.2e-6, "V"),  # Greek mu; SI Brochure 9th ed., prefixes
    ("305.2 uV", "V", 305.2e-6, "V"),  # "u" for micro, common practice in plain ASCII
    ("5 µV rms", "V", 5e-6, "V"),  # rms marks an amplitude, common practice
    ("500 mA", "A", 0.5, "A"),  # SI Brochure 9th ed., prefixes: m = 1e-3
    # length, acceleration, velocity
    ("3.45 µm", "m", 3.45e-6, "m"),  # SI Brochure 9th ed., prefixes
    ("3.45 um", "m", 3.45e-6, "m"),  # "u" for micro, common practice
    ("3.45 μm", "m", 3.45e-6, "m"),  # Greek mu; SI Brochure 9th ed., prefixes
    ("1.5 cm", "m", 0.015, "m"),  # SI Brochure 9th ed., prefixes: c = 1e-2
    ("50 g", "m/s^2", 50 * G_N, "m/s^2"),  # standard gravity, CGPM 1901 / SI Brochure
    ("10 mg", "m/s^2", 10e-3 * G_N, "m/s^2"),  # standard gravity; SI prefixes
    ("9.81 m/s²", "m/s^2", 9.81, "m/s^2"),  # SI unit
    ("9.81 m/s^2", "m/s^2", 9.81, "m/s^2"),  # SI unit, ASCII spelling
    ("10 mm/s", "m/s", 0.01, "m/s"),  # SI Brochure 9th ed., prefixes
    # pressure, force, torque
    ("101.325 kPa", "Pa", 101325.0, "Pa"),  # SI Brochure 9th ed., prefixes
    ("1 bar", "Pa", 1e5, "Pa"),  # bar = 1e5 Pa, NIST SP 811 (from memory)
    ("10 mbar", "Pa", 1e3, "Pa"),  # bar = 1e5 Pa, NIST SP 811 (from memory)
    ("1 psi", "Pa", PSI_PA, "Pa"),  # psi = 6894.757 Pa, NIST SP 811 (from memory)
    ("500 N", "N", 500.0, "N"),  # SI unit
    ("50 N·m", "N*m", 50.0, "N*m"),  # SI Brochure 9th ed.: N m
    ("50 N*m", "N*m", 50.0, "N*m"),  # SI Brochure 9th ed.: N m, ASCII spelling
    ("50 Nm", "N*m", 50.0, "N*m"),  # common practice
    ("50 N m", "N*m", 50.0, "N*m"),  # SI Brochure 9th ed.: a space is multiplication
    ("2 kN·m", "N*m", 2e3, "N*m"),  # SI Brochure 9th ed., prefixes
    # temperature difference, strain, angle
    ("2 °C", "K", 2.0, "K"),  # SI Brochure 9th ed., 2.3.1: an interval in °C equals one in K
    ("2 degC", "K", 2.0, "K"),  # SI Brochure 9th ed., 2.3.1
    ("500 µε", "ε", 500e-6, "ε"),  # microstrain = 1e-6, common practice; SI prefixes
    ("500 ustrain", "ε", 500e-6, "ε"),  # common practice
    ("1 deg", "rad", math.pi / 180, "rad"),  # SI Brochure 9th ed., table 8: ° = π/180 rad
    ("90°", "rad", math.pi / 2, "rad"),  # SI Brochure 9th ed., table 8
    ("5 mrad", "rad", 5e-3, "rad"),  # SI Brochure 9th ed., prefixes
    # plain ratios and decibels
    ("8 %", "1", 0.08, "1"),  # percent = 0.01, SI Brochure 9th ed., 5.4.7 (from memory)
    ("50 ppm", "1", 50e-6, "1"),  # parts per million, common practice
    ("0.25", "1", 0.25, "1"),  # a bare number is a plain ratio, common practice
    ("-40 dBFS", "dBFS", -40.0, "dBFS"),  # decibels stay decibels (DESIGN.md convention)
    ("0.1 dB", "dB", 0.1, "dB"),  # decibels stay decibels (DESIGN.md convention)
    ("-0.5 dB", ("dB", "1"), -0.5, "dB"),  # decibels stay decibels (DESIGN.md convention)
    # data rates and sizes
    ("100 Mbit/s", "bit/s", 100e6, "bit/s"),  # SI Brochure 9th ed., prefixes
    ("100 Mbps", "bit/s", 100e6, "bit/s"),  # common practice
    ("100 Mb/s", "bit/s", 100e6, "bit/s"),  # common practice
    ("12.5 MB/s", "bit/s", 100e6, "bit/s"),  # 1 byte = 8 bits, IEC 80000-13 (from memory)
    ("2 TB", "B", 2e12, "B"),  # SI Brochure 9th ed., prefixes: T = 1e12
    ("1 KiB", "B", 1024.0, "B"),  # IEC 80000-13 (from memory)
    ("1 GiB", "B", 1024.0**3, "B"),  # IEC 80000-13 (from memory)
    ("64 kbit", "B", 8000.0, "B"),  # 8 bits per byte, IEC 80000-13 (from memory)
    # spatial frequency
    ("40 cycles/mm", "cycles/m", 40e3, "cycles/m"),  # SI Brochure 9th ed., prefixes
    ("40 lp/mm", "cycles/m", 40e3, "cycles/m"),  # a line pair is one cycle, common practice
    ("40 cy/mm", "cycles/m", 40e3, "cycles/m"),  # common practice
    # sensitivities and densities
    ("100 mV/g", "V/m/s^2", 0.1 / G_N, "V/m/s^2"),  # standard gravity, CGPM 1901
    ("2 µV/µε", "V/ε", 2.0, "V/ε"),  # SI prefixes cancel: µ/µ = 1
    ("2 mV/V", "V/V", 2e-3, "V/V"),  # bridge output per volt of excitation, common practice
    ("10 mV/Pa", "V/Pa", 0.01, "V/Pa"),  # SI Brochure 9th ed., prefixes
    ("41 µV/°C", "V/K", 41e-6, "V/K"),  # SI Brochure 9th ed., 2.3.1 and prefixes
    ("100 mV / (m/s²)", "V/m/s^2", 0.1, "V/m/s^2"),  # SI Brochure 9th ed., prefixes
    ("20 nV/√Hz", "V/√Hz", 20e-9, "V/√Hz"),  # SI Brochure 9th ed., prefixes
    ("20 nV/rtHz", "V/√Hz", 20e-9, "V/√Hz"),  # root hertz spelt out, common practice
    ("20 nV/sqrt(Hz)", "V/√Hz", 20e-9, "V/√Hz"),  # common practice
    ("20 nV/Hz^0.5", "V/√Hz", 20e-9, "V/√Hz"),  # common practice
    ("50 µg/√Hz", "m/s^2/√Hz", 50e-6 * G_N, "m/s^2/√Hz"),  # standard gravity, CGPM 1901
    ("50 ppm/°C", "1/K", 50e-6, "1/K"),  # temperature coefficient, common practice
    # anything goes
    ("20 kHz", "*", 20e3, "Hz"),  # SI Brochure 9th ed., prefixes
]


@pytest.mark.parametrize(("text", "expect", "value", "dim"), GOOD, ids=[g[0] for g in GOOD])
def test_parse_quantity_good(text: str, expect: str | tuple[str, ...], value: float, dim: str) -> None:
    q = parse_quantity(text, expect)
    assert isinstance(q, Quantity)
    assert q.dim == dim
    assert_allclose(q.value, value, rtol=1e-12)


# (text, expected dimension, low, high, bipolar, width, peak)
SPANS: list[tuple[str, str, float, float, bool, float, float]] = [
    # "±10 V" is bipolar: range 20 V, peak 10 V (DESIGN.md convention; common practice)
    ("±10 V", "V", -10.0, 10.0, True, 20.0, 10.0),
    ("+/-10 V", "V", -10.0, 10.0, True, 20.0, 10.0),  # ASCII spelling, common practice
    ("+-10 V", "V", -10.0, 10.0, True, 20.0, 10.0),  # ASCII spelling, common practice
    ("±2.5 mV", "V", -2.5e-3, 2.5e-3, True, 5e-3, 2.5e-3),  # SI Brochure 9th ed., prefixes
    ("0..5 V", "V", 0.0, 5.0, False, 5.0, 5.0),  # unipolar: range 5 V (DESIGN.md convention)
    ("0 .. 5 V", "V", 0.0, 5.0, False, 5.0, 5.0),  # DESIGN.md convention
    ("-2..3 V", "V", -2.0, 3.0, False, 5.0, 3.0),  # width = high - low, peak = max |end|
    ("0 mV..500 mV", "V", 0.0, 0.5, False, 0.5, 0.5),  # SI Brochure 9th ed., prefixes
    ("±50 g", "m/s^2", -50 * G_N, 50 * G_N, True, 100 * G_N, 50 * G_N),  # standard gravity
]


@pytest.mark.parametrize(
    ("text", "expect", "low", "high", "bipolar", "width", "peak"), SPANS, ids=[s[0] for s in SPANS]
)
def test_parse_span_good(
    text: str, expect: str, low: float, high: float, bipolar: bool, width: float, peak: float
) -> None:
    span = parse_span(text, expect)
    assert isinstance(span, Span)
    assert span.dim == expect
    assert span.bipolar is bipolar
    assert_allclose([span.low, span.high, span.width, span.peak], [low, high, width, peak], rtol=1e-12)


# (text, normalised symbol, SI factor, dimension)
UNITS: list[tuple[str, str, float, str]] = [
    ("g", "g", G_N, "m/s^2"),  # standard gravity, CGPM 1901 / SI Brochure
    ("Pa", "Pa", 1.0, "Pa"),  # SI unit
    ("µε", "µε", 1e-6, "ε"),  # SI Brochure 9th ed., prefixes
    ("uε", "µε", 1e-6, "ε"),  # "u" for micro, common practice
    ("με", "µε", 1e-6, "ε"),  # Greek mu; SI Brochure 9th ed., prefixes
    ("N·m", "N·m", 1.0, "N*m"),  # SI unit
    ("Nm", "N·m", 1.0, "N*m"),  # common practice
    ("°C", "°C", 1.0, "K"),  # SI Brochure 9th ed., 2.3.1 (differences)
    ("A", "A", 1.0, "A"),  # SI unit
    ("V", "V", 1.0, "V"),  # SI unit
    ("rpm", "rpm", 1 / 60, "Hz"),  # one revolution per minute, common practice
    ("m/s^2", "m/s²", 1.0, "m/s^2"),  # SI unit
    ("kPa", "kPa", 1e3, "Pa"),  # SI Brochure 9th ed., prefixes
    ("mV/g", "mV/g", 1e-3 / G_N, "V/m/s^2"),  # standard gravity, CGPM 1901
]


@pytest.mark.parametrize(("text", "symbol", "factor", "dim"), UNITS, ids=[u[0] for u in UNITS])
def test_parse_unit_good(text: str, symbol: str, factor: float, dim: str) -> None:
    unit = parse_unit(text)
    assert isinstance(unit, Unit)
    assert (unit.symbol, unit.dim) == (symbol, dim)
    assert_allclose(unit.factor, factor, rtol=1e-12)


# (function, text, expected dimension, message fragment); the field is always "rate"
BAD: list[tuple[str, str, str | tuple[str, ...], str]] = [
    ("quantity", "10 V", "Hz", 'rate: "10 V" is a voltage, expected a frequency (e.g. "20 kHz")'),
    ("quantity", "20", "Hz", 'rate: "20" has no unit, expected a frequency such as "20 kHz"'),
    ("quantity", "20 kHzz", "Hz", 'unknown unit "kHzz"; did you mean "kHz"?'),
    ("quantity", "20 KHz", "Hz", 'did you mean "kHz"?'),
    ("quantity", "20 dB FS", "dBFS", 'did you mean "dBFS"?'),
    ("quantity", "10 mV/gg", "V/m/s^2", 'did you mean "mV/g"?'),
    ("quantity", "5 °F", "K", 'unknown unit "°F"'),
    ("quantity", "20 ☃", "Hz", "unknown unit"),
    ("quantity", "kHz", "Hz", "does not start with a number"),
    ("quantity", "\x00\x01", "Hz", '"\\u0000\\u0001" does not start with a number'),
    ("quantity", "nan Hz", "Hz", "is not a finite number"),
    ("quantity", "inf Hz", "Hz", "is not a finite number"),
    ("quantity", "-Infinity", "1", "is not a finite number"),
    ("quantity", "1e400 Hz", "Hz", "too large"),
    ("quantity", "1e300 TB", "B", "too large"),
    ("quantity", "±10 V", "V", "is a range, expected a single value"),
    ("quantity", "0..5 V", "V", "is a range, expected a single value"),
    ("quantity", "", "Hz", 'rate: "" is empty, expected a frequency'),
    ("quantity", "   ", "Hz", "is empty"),
    ("quantity", "1" * 201, "Hz", "expected at most 200"),
    ("quantity", "1,5 kHz", "Hz", "write a decimal point"),
    ("quantity", "20 kHz rms", "Hz", "rms applies to a signal amplitude, not to a frequency"),
    ("quantity", "50 g", "Pa", "is an acceleration, expected a pressure"),
    ("quantity", "100 MB", "bit/s", "is a data size, expected a data rate"),
    ("quantity", "10 V", ("Hz", "s"), "expected a frequency or a time"),
    (
        "quantity",
        "10 mV/Pa",
        "V/m/s^2",
        "is a quantity in V per Pa, expected a quantity in V per m/s²",
    ),
    ("quantity", "20 nV/√Hz", "V", "is a noise density in V/√Hz, expected a voltage"),
    ("quantity", "3 dB/%", "dB", 'unknown unit "dB/%"'),
    ("span", "5 V", "V", 'write "±5 V" for a bipolar range or "0..5 V" for a unipolar one'),
    ("span", "5..0 V", "V", 'upper end first; write the lower end first (e.g. "0..5 V")'),
    ("span", "0..0 V", "V", "is an empty range"),
    ("span", "±0 V", "V", "is an empty range"),
    ("span", "±-5 V", "V", "sign after ±"),
    ("span", "0 V..5 Hz", "V", "ends of different kinds"),
    ("span", "0..5..10 V", "V", "more than one .."),
    ("span", "±5 Hz", "V", "is a frequency, expected a voltage"),
    ("span", "gram", "V", "does not start with a number"),
    ("span", "x" * 1_000_000, "V", "expected at most 200"),
    ("unit", "5 V", "", "starts with a number"),
    ("unit", "", "", "is empty"),
    ("unit", "gramm", "", "is not a known unit"),
    ("unit", "mV/gg", "", 'did you mean "mV/g"?'),
]


@pytest.mark.parametrize(("kind", "text", "expect", "fragment"), BAD, ids=[f"{b[0]}:{b[1][:20]!r}" for b in BAD])
def test_bad_input_message(kind: str, text: str, expect: str | tuple[str, ...], fragment: str) -> None:
    with pytest.raises(SpecError) as caught:
        if kind == "quantity":
            parse_quantity(text, expect, "rate")
        elif kind == "span":
            parse_span(text, expect, "rate")
        else:
            parse_unit(text, "rate")
    message = caught.value.message
    assert fragment in message
    assert message.startswith("rate: ")


def test_message_without_field() -> None:
    with pytest.raises(SpecError) as caught:
        parse_quantity("10 V", "Hz")
    assert caught.value.message == '"10 V" is a voltage, expected a frequency (e.g. "20 kHz")'


# (value, dimension, expected text); SI prefixes from the SI Brochure 9th ed., table 7
FORMATS: list[tuple[float, str, str]] = [
    (20000.0, "Hz", "20 kHz"),  # k = 1e3
    (
        3.05176e-4,
        "V",
        "305.2 µV",
    ),  # 20 V / 2**16, LSB of a ±10 V 16-bit converter (common practice)
    (2e12, "B", "2 TB"),  # T = 1e12
    (1.4112e6, "bit/s", "1.411 Mbit/s"),  # CD audio 44.1 kHz x 16 bit x 2 (from memory)
    (0.0, "Hz", "0 Hz"),  # zero takes no prefix
    (-40.0, "dBFS", "-40 dBFS"),  # decibels take no prefix (common practice)
    (0.1, "dB", "0.1 dB"),  # decibels take no prefix (common practice)
    (144.9e3, "cycles/m", "144.9 cycles/mm"),  # m = 1e-3: per mm is 1e3 per m
    (2e-8, "V/√Hz", "20 nV/√Hz"),  # n = 1e-9
    (4.159e-5, "s", "41.59 µs"),  # µ = 1e-6
    (G_N, "m/s^2", "9.807 m/s²"),  # standard gravity to 4 digits, CGPM 1901
    (-2.5e-3, "A", "-2.5 mA"),  # m = 1e-3
    (999.96, "Hz", "1 kHz"),  # rounds to 1000 Hz at 4 digits, then k = 1e3
    (50.0, "N*m", "50 N·m"),  # SI Brochure 9th ed.: N m
    (0.25, "1", "0.25"),  # a plain ratio is a plain number
    (0.1 / G_N, "V/m/s^2", "10.2 mV/(m/s²)"),  # 100 mV/g, standard gravity, CGPM 1901
]


@pytest.mark.parametrize(("value", "dim", "text"), FORMATS, ids=[f[2] for f in FORMATS])
def test_format_quantity(value: float, dim: str, text: str) -> None:
    assert format_quantity(value, dim) == text


def test_format_in_unit_and_percent() -> None:
    # standard gravity, CGPM 1901: 490.3325 m/s² is 50 g
    assert format_in_unit(490.3325, parse_unit("g")) == "50 g"
    # SI Brochure 9th ed., prefixes: 5e-4 strain is 500 µε
    assert format_in_unit(5e-4, parse_unit("uε")) == "500 µε"
    # percent = 0.01, SI Brochure 9th ed., 5.4.7 (from memory)
    assert format_percent(0.08) == "8 %"
    assert format_percent(0.12345) == "12.3 %"


ROUND_TRIP_DIMS = [
    *CANONICAL_DIMS,
    "V/m/s^2",
    "V/√Hz",
    "V/ε",
    "V/V",
    "V/Pa",
    "V/K",
    "m/s^2/√Hz",
    "1/K",
]


@settings(max_examples=400, deadline=None)
@given(
    magnitude=st.floats(min_value=1e-15, max_value=1e15),
    negative=st.booleans(),
    dim=st.sampled_from(ROUND_TRIP_DIMS),
)
def test_round_trip(magnitude: float, negative: bool, dim: str) -> None:
    value = -magnitude if negative else magnitude
    exact = parse_quantity(format_quantity(value, dim, digits=17), dim)
    assert exact.dim == dim
    assert math.isclose(exact.value, value, rel_tol=1e-12)
    # 4 significant digits: off by at most half a unit in the 4th digit
    rounded = parse_quantity(format_quantity(value, dim), dim)
    assert abs(rounded.value - value) <= 5e-4 * abs(value) * (1 + 1e-9)


UNIT_ALPHABET = "0123456789.eE+-±/ √µμu²^()kKmMGTnpHzVABbitsSgPa%°Cε·*rmsdF,…"


@settings(max_examples=500, deadline=None)
@given(
    text=st.one_of(st.text(max_size=300), st.text(alphabet=UNIT_ALPHABET, max_size=40)),
    expect=st.sampled_from(["Hz", "*", ("1", "dB"), "V/√Hz", "bit/s", ("V", "dBFS")]),
)
def test_arbitrary_text_raises_only_spec_error(text: str, expect: str | tuple[str, ...]) -> None:
    for call in (
        lambda: parse_quantity(text, expect, "field"),
        lambda: parse_span(text, expect, "field"),
        lambda: parse_unit(text, "field"),
    ):
        try:
            result = call()
        except SpecError as err:
            assert err.message.startswith("field: ")
        else:
            assert isinstance(result, Quantity | Span | Unit)
            numbers = [result.value] if isinstance(result, Quantity) else []
            if isinstance(result, Span):
                numbers = [result.low, result.high]
            if isinstance(result, Unit):
                numbers = [result.factor]
            assert np.all(np.isfinite(numbers))


def test_remembered_formatting_keeps_signed_zero_and_types_apart() -> None:
    # format_quantity remembers its texts; equal keys (0.0 == -0.0, 1 == 1.0) must not share one.
    # Reference: the unremembered formatter.
    from generator.quantities import _format_quantity

    for value in (0.0, -0.0, 1, 1.0, -1e-9, 2.5e6, 2.5e6):
        assert format_quantity(value, "Hz") == _format_quantity(value, "Hz")
    assert format_quantity(-0.0, "V") == _format_quantity(-0.0, "V")
    assert format_quantity(0.0, "V") == _format_quantity(0.0, "V")
    assert format_quantity(20000.0, "Hz") == "20 kHz"  # from memory: 20 kHz is 20,000 Hz
