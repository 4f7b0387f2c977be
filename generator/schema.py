"""The requirement-file format: every key, its type, unit and meaning, in one table.

The loader validates against this table, ``specfold new`` writes a scaffold from it,
the README's key reference is generated from it, and the fuzz tests build random
headers from it.  Adding a key starts here.

Format version 1.  ``specs/system.toml`` may say ``format = 1`` under ``[system]``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

FORMAT_VERSION = 1

# Kinds of value a key can hold.
QUANTITY = "quantity"  # a string with a unit, e.g. "20 kHz"
SPAN = "span"  # a range, e.g. "±10 V" or "0..5 V"
PAIR = "pair"  # two quantities, e.g. ["10 Hz", "2 kHz"]
INT = "int"
INT_PAIR = "int-pair"
INT_LIST = "int-list"
FLOAT = "float"  # a plain number
TEXT = "text"
TEXT_LIST = "text-list"
BOOL = "bool"
CHOICE = "choice"
REF = "ref"  # an id defined in system.toml
GAIN = "gain"  # a plain number (V/V) or a quantity in dB

# Pseudo-dimension: the channel's own engineering unit (its ``unit`` key).
ENG = "<unit>"
ENG_PER_RTHZ = "<unit>/√Hz"
PER_ENG = "V/<unit>"


@dataclass(frozen=True)
class Key:
    """One key of the format."""

    table: str  # "" for the top level of a channel file; "converters.*" for system tables
    name: str
    kind: str
    meaning: str
    dims: tuple[str, ...] = ()
    choices: tuple[str, ...] = ()
    ref: str = ""  # for REF: which system table the id must exist in
    default: str = ""
    example: str = ""
    kinds: tuple[str, ...] = ("input", "output", "image")  # channel kinds it applies to
    required: bool = False
    minimum: float | None = None  # inclusive lower bound on the SI value / number
    positive: bool = False  # strictly greater than zero
    maximum: float | None = None
    families: tuple[str, ...] = ()  # a [filter] key that shapes only these families (others refuse it)

    @property
    def path(self) -> str:
        return f"{self.table}.{self.name}" if self.table else self.name


FAMILIES = ("butterworth", "bessel", "chebyshev1", "chebyshev2", "elliptic")

# Bounds of the values a spec may hold.  Each is wide enough for any real system and narrow enough
# that every figure of every command stays inside the float range (the boundary-value trials of
# tests/fuzz.py run every command at each side of each bound).
DB_LIMIT = 400.0
"""Largest ratio in dB (SNR, rejection, stopband attenuation): the ideal SQNR of a 64-bit converter,
the widest the format allows, is 6.02 x 64 + 1.76 = 387 dB (common practice: 6.02 N + 1.76 dB)."""
OVER_FULL_SCALE_DB = 100.0
"""Highest level above full scale (dBFS) for content outside the band or a tone."""
LOSS_LIMIT_DB = 60.0
"""Largest passband loss or ripple in dB: a band edge 60 dB down is no longer captured."""
FINE_DB = 1e-4
"""Finest flatness or ripple in dB (0.1 mdB, about 12 parts per million of amplitude); finer ones
need orders and corners no filter design reaches, and their prototypes leave the float range."""
GAIN_LIMIT_DB = 200.0
"""Largest gain or attenuation, in dB either way (1e-10 to 1e10 V/V)."""
MAX_PIXELS = 1_000_000
"""Most pixels along one side of a sensor (line sensors have tens of thousands)."""
MAX_RATIO = 2**32
"""Largest clock divider or oversampling ratio (a 32-bit counter)."""
MAX_CONVERTER_CHANNELS = 1_000_000
"""Most inputs or outputs one converter may declare."""
CHANNEL_KINDS = ("input", "output", "image")

CHANNEL_KEYS: tuple[Key, ...] = (
    Key("", "title", TEXT, "Short human name of the channel.", required=True,
        example='"Main bearing, axial acceleration"'),
    Key("", "kind", CHOICE, "What the channel does: input (sensor to A/D), output (D/A to actuator) "
        "or image (area or line sensor).", choices=CHANNEL_KINDS, required=True, example='"input"'),
    Key("", "measurand", TEXT, "The physical quantity measured or driven.", example='"acceleration"'),
    Key("", "unit", TEXT, "Engineering unit of the measurand; every value marked <unit> uses it.",
        default='"V"', example='"g"'),
    Key("", "tags", TEXT_LIST, "Free labels for filtering the channel table.", example='["drivetrain"]'),
    Key("", "match", REF, "Group of channels whose relative timing matters.", ref="groups",
        example='"gearbox-pair"'),
    # [signal]
    Key("signal", "band", PAIR, "Lowest and highest frequency that must be captured or produced.",
        dims=("Hz",), example='["0.5 Hz", "5 kHz"]', kinds=("input", "output"), required=True),
    Key("signal", "peak", QUANTITY, "Largest amplitude of the signal about its own centre (a sine of "
        "this amplitude), in the engineering unit.",
        dims=(ENG,), example='"50 g"', kinds=("input", "output"), positive=True),
    Key("signal", "resolution", QUANTITY, "Smallest change that must be resolved (one LSB at most).",
        dims=(ENG,), example='"0.01 g"', kinds=("input", "output"), positive=True),
    Key("signal", "snr", QUANTITY, "Signal-to-noise ratio required in band, for a signal at `peak`.",
        dims=("dB",), example='"80 dB"', kinds=("input", "output"), minimum=0.0, maximum=DB_LIMIT),
    Key("signal", "flatness", QUANTITY, "Largest loss allowed anywhere in the band, relative to the "
        "filter's peak gain (dB).", dims=("dB",), default='"0.5 dB"', example='"0.1 dB"', kinds=("input", "output"),
        minimum=FINE_DB, maximum=LOSS_LIMIT_DB),
    Key("signal", "out_of_band", QUANTITY, "Worst level of content above the band, sine-referenced dBFS.",
        dims=("dBFS",), default='"0 dBFS"', example='"-20 dBFS"', kinds=("input",), minimum=-DB_LIMIT,
        maximum=OVER_FULL_SCALE_DB),
    Key("signal", "filtered_to_band", BOOL, "Data are digitally filtered to the band after sampling "
        "(earns processing gain).", default="false", example="true", kinds=("input",)),
    Key("signal", "image_rejection", QUANTITY, "Required suppression of every image below its tone.",
        dims=("dB",), example='"60 dB"', kinds=("output",), positive=True, maximum=DB_LIMIT),
    Key("signal", "limit", QUANTITY, "Largest amplitude the driven device accepts, in the engineering unit.",
        dims=(ENG,), example='"10 V"', kinds=("output",), positive=True),
    Key("signal", "detail", QUANTITY, "Finest spatial frequency that must be captured.",
        dims=("cycles/m",), example='"40 cycles/mm"', kinds=("image",), positive=True),
    Key("signal", "square_pixels", BOOL, "The analysis downstream assumes square pixels.",
        default="false", example="true", kinds=("image",)),
    # [sensor]
    Key("sensor", "sensitivity", QUANTITY, "Sensor output per engineering unit.", dims=(PER_ENG,),
        example='"100 mV/g"', kinds=("input",), positive=True),
    Key("sensor", "noise", QUANTITY, "Sensor noise: rms over the band, or a density per √Hz; in volts "
        "or in the engineering unit.", dims=("V", ENG, "V/√Hz", ENG_PER_RTHZ),
        example='"20 nV/√Hz"', kinds=("input",), minimum=0.0),
    Key("sensor", "pixels", INT_PAIR, "Pixels across and down (a line sensor has 1 row).",
        example="[2048, 1536]", kinds=("image",), required=True, positive=True, maximum=MAX_PIXELS),
    Key("sensor", "active_area", PAIR, "Width and height of the active area.", dims=("m",),
        example='["7.0656 mm", "5.2992 mm"]', kinds=("image",), required=True, positive=True),
    # [conversion]
    Key("conversion", "converter", REF, "Converter id from system.toml; values below default to its own.",
        ref="converters", example='"adc-ds"'),
    Key("conversion", "link", REF, "Link carrying the data, when the channel has no converter or "
        "uses another link than its converter.", ref="links", example='"net0"'),
    Key("conversion", "rate", QUANTITY, "Sample rate (frame or line rate for image channels).",
        dims=("Hz",), example='"51.2 kS/s"', positive=True),
    Key("conversion", "bits", INT, "Converter resolution.", example="24", minimum=1, maximum=64),
    Key("conversion", "full_scale", SPAN, "Converter input (or output) range: \"±10 V\" (bipolar) or \"0..5 V\" "
        "(unipolar); a full-scale sine has half its width as amplitude.", dims=("V",),
        example='"±10 V"', kinds=("input", "output")),
    Key("conversion", "gain", GAIN, "Gain between sensor and converter (or converter and actuator), "
        "V/V or dB.", default="1", example='"20 dB"', minimum=10 ** (-GAIN_LIMIT_DB / 20),
        maximum=10 ** (GAIN_LIMIT_DB / 20), kinds=("input", "output")),
    Key("conversion", "jitter", QUANTITY, "Total rms sampling jitter at this channel; without it the "
        "converter's aperture jitter and its clock's jitter add as a root sum of squares.", dims=("s",),
        example='"50 ps"', minimum=0.0, kinds=("input", "output")),
    Key("conversion", "container_bits", INT, "Bits each sample occupies on the link and in storage.",
        example="32", minimum=1, maximum=128),
    Key("conversion", "hold", CHOICE, "Reconstruction hold of a D/A output.",
        choices=("zero-order", "none"), default='"zero-order"', example='"zero-order"', kinds=("output",)),
    Key("conversion", "sinc_compensation", BOOL, "The output stream is pre-corrected for the hold's "
        "sinc droop.", default="false", example="true", kinds=("output",)),
    # [filter]
    Key("filter", "family", CHOICE, "Analog anti-aliasing (input) or anti-imaging (output) filter family.",
        choices=FAMILIES, example='"butterworth"', kinds=("input", "output")),
    Key("filter", "order", INT, "Filter order.", example="6", minimum=1, maximum=20, kinds=("input", "output")),
    Key("filter", "corner", QUANTITY, "Corner frequency: -3 dB point (butterworth, bessel), ripple-band "
        "edge (chebyshev1, elliptic), stopband edge (chebyshev2).", dims=("Hz",), example='"8 kHz"',
        positive=True, kinds=("input", "output")),
    Key("filter", "ripple", QUANTITY, "Passband ripple (chebyshev1, elliptic); an elliptic filter's "
        "is below its stopband attenuation.", dims=("dB",), default='"0.1 dB"', example='"0.5 dB"',
        minimum=FINE_DB, maximum=LOSS_LIMIT_DB, kinds=("input", "output"), families=("chebyshev1", "elliptic")),
    Key("filter", "stopband_attenuation", QUANTITY, "Stopband attenuation (chebyshev2, elliptic).",
        dims=("dB",), default='"80 dB"', example='"80 dB"', minimum=1.0, maximum=DB_LIMIT,
        kinds=("input", "output"), families=("chebyshev2", "elliptic")),
    # [[interference]]
    Key("interference", "frequency", QUANTITY, "Frequency of a known tone outside the band.",
        dims=("Hz",), example='"50 kHz"', required=True, positive=True, kinds=("input",)),
    Key("interference", "level", QUANTITY, "Its level: dBFS, volts at the sensor output, or the "
        "engineering unit.", dims=("dBFS", "V", ENG), example='"-30 dBFS"', required=True,
        kinds=("input",), minimum=-DB_LIMIT, maximum=OVER_FULL_SCALE_DB),
    Key("interference", "source", TEXT, "Where it comes from.", example='"inverter switching"',
        kinds=("input",)),
    # [safety]
    Key("safety", "working_voltage", QUANTITY, "Highest rms voltage to earth at the point of measurement "
        "or drive.", dims=("V",), example='"690 V"', minimum=0.0),
    Key("safety", "powered_actuator", BOOL, "The output commands a powered actuator.", default="false",
        example="true", kinds=("output",)),
    Key("safety", "note", TEXT, "Site-specific safety note shown with the caution.",
        example='"Lock out the HPU before work on the valve."'),
    # [stated]
    Key("stated", "data_rate", QUANTITY, "Data rate the spec states elsewhere; checked against the "
        "computed one.", dims=("bit/s",), example='"1.536 Mbit/s"', positive=True),
    Key("stated", "lsb", QUANTITY, "LSB size the spec states elsewhere; checked against the computed one.",
        dims=("V",), example='"2.384 µV"', positive=True, kinds=("input", "output")),
    # [[waiver]]
    Key("waiver", "rule", TEXT, "Id of the rule whose finding on this channel is accepted.",
        example='"band-edge-droop"', required=True),
    Key("waiver", "reason", TEXT, "Why the deviation is accepted; shown wherever the finding is.",
        example='"Accepted by the drivetrain team, review 12"', required=True),
    Key("waiver", "until", TEXT, "System revision after which the waiver lapses.", example='"C"'),
)

ARRAY_TABLES = ("interference", "waiver")
CHANNEL_TABLES = ("signal", "sensor", "conversion", "filter", "safety", "stated", *ARRAY_TABLES)

ARCHITECTURES = ("sar", "delta-sigma", "pipeline", "flash", "r-2r", "string", "other")

SYSTEM_KEYS: tuple[Key, ...] = (
    Key("system", "name", TEXT, "Name of the system.", required=True, example='"Skerry Sound test unit"'),
    Key("system", "revision", TEXT, "Revision of the spec.", default='""', example='"B"'),
    Key("system", "format", INT, "Version of this file format.", default="1", example="1",
        minimum=1, maximum=FORMAT_VERSION),
    Key("system", "record_duration", QUANTITY, "Length of one recording, for storage budgets.",
        dims=("s",), example='"6 h"', positive=True),
    Key("system", "description", TEXT, "One paragraph about the system.", example='"..."'),
    Key("converters.*", "type", CHOICE, "adc (input) or dac (output).", choices=("adc", "dac"),
        required=True, example='"adc"'),
    Key("converters.*", "architecture", CHOICE, "Converter architecture.", choices=ARCHITECTURES,
        required=True, example='"delta-sigma"'),
    Key("converters.*", "bits", INT, "Resolution.", required=True, example="24", minimum=1, maximum=64),
    Key("converters.*", "full_scale", SPAN, "Input or output range.", dims=("V",), required=True,
        example='"±10 V"'),
    Key("converters.*", "rate", QUANTITY, "Default sample rate of its channels.", dims=("Hz",),
        example='"51.2 kS/s"', positive=True),
    Key("converters.*", "max_rate", QUANTITY, "Highest rate: per channel (simultaneous) or aggregate "
        "over all channels (multiplexed).", dims=("Hz",), required=True, example='"200 kS/s"', positive=True),
    Key("converters.*", "sampling", CHOICE, "All channels at one instant, or one after another.",
        choices=("simultaneous", "multiplexed"), default='"simultaneous"', example='"multiplexed"'),
    Key("converters.*", "channels", INT, "Number of inputs or outputs the converter has.",
        example="16", minimum=1, maximum=MAX_CONVERTER_CHANNELS),
    Key("converters.*", "clock", REF, "Clock the rate is derived from.", ref="clocks", example='"mclk"'),
    Key("converters.*", "jitter", QUANTITY, "Rms aperture jitter.", dims=("s",), example='"20 ps"',
        minimum=0.0),
    Key("converters.*", "link", REF, "Link that carries its data.", ref="links", example='"net0"'),
    Key("converters.*", "container_bits", INT, "Bits each sample occupies on the link.", example="32",
        minimum=1, maximum=128),
    Key("converters.*", "modulator_rate", QUANTITY, "Delta-sigma modulator rate.", dims=("Hz",),
        example='"6.144 MHz"', positive=True),
    Key("converters.*", "oversampling_ratios", INT_LIST, "Allowed delta-sigma oversampling ratios.",
        example="[64, 128, 256]", positive=True, maximum=MAX_RATIO),
    Key("converters.*", "passband", FLOAT, "Delta-sigma digital filter passband edge, as a fraction of "
        "the output rate.", example="0.4535", positive=True, maximum=0.5),
    Key("converters.*", "stopband", FLOAT, "Delta-sigma digital filter stopband edge, as a fraction of "
        "the output rate.", example="0.5465", positive=True, maximum=1.0),
    Key("converters.*", "stopband_rejection", QUANTITY, "Delta-sigma digital filter stopband rejection.",
        dims=("dB",), example='"110 dB"', positive=True, maximum=DB_LIMIT),
    Key("clocks.*", "frequency", QUANTITY, "Clock frequency.", dims=("Hz",), required=True,
        example='"24.576 MHz"', positive=True),
    Key("clocks.*", "dividers", INT_LIST, "Allowed integer dividers.", example="[256, 512, 1024]",
        positive=True, maximum=MAX_RATIO),
    Key("clocks.*", "divider_range", INT_PAIR, "Allowed dividers as an inclusive range.",
        example="[16, 65536]", positive=True, maximum=MAX_RATIO),
    Key("clocks.*", "jitter", QUANTITY, "Rms clock jitter.", dims=("s",), example='"10 ps"', minimum=0.0),
    Key("links.*", "capacity", QUANTITY, "Raw capacity.", dims=("bit/s",), required=True,
        example='"1 Gbit/s"', positive=True),
    Key("links.*", "overhead", QUANTITY, "Protocol overhead added to the data rate it carries.", dims=("1",),
        default='"0 %"', example='"8 %"', minimum=0.0),
    Key("links.*", "headroom", QUANTITY, "Share of capacity kept free.", dims=("1",), default='"0 %"',
        example='"20 %"', minimum=0.0, maximum=0.99),
    Key("links.*", "store", REF, "Store the link records into.", ref="stores", example='"recorder"'),
    Key("stores.*", "capacity", QUANTITY, "Usable capacity.", dims=("B",), required=True,
        example='"4 TB"', positive=True),
    Key("groups.*", "skew", QUANTITY, "Largest allowed time difference between members.", dims=("s",),
        example='"2 µs"', positive=True),
    Key("groups.*", "phase", QUANTITY, "Largest allowed phase difference at the band edge.",
        dims=("rad",), example='"1 deg"', positive=True),
    Key("groups.*", "description", TEXT, "What the group is for.", example='"..."'),
)

SYSTEM_TABLES = ("system", "converters", "clocks", "links", "stores", "groups")
# The tables of system.toml holding named items, mapped to the noun used in messages.
NAMED_TABLES = {
    "converters": "converter",
    "clocks": "clock",
    "links": "link",
    "stores": "store",
    "groups": "group",
}


def keys_of(table: str, keys: tuple[Key, ...] = CHANNEL_KEYS) -> dict[str, Key]:
    """The keys of one table, by name."""
    return {k.name: k for k in keys if k.table == table}


def _bound_text(number: float, key: Key) -> str:
    if key.kind == GAIN:
        return f"{20 * math.log10(number):g} dB"
    if key.kind in (INT, INT_PAIR, INT_LIST):
        return f"{int(number):,}"
    unit = key.dims[0] if key.dims and key.dims[0] in ("dB", "dBFS") else ""
    return f"{number:g}{' ' + unit if unit else ''}"


def range_text(key: Key) -> str:
    """The bounds the loader enforces on a key, as the README shows them."""
    low = f"> {_bound_text(0, key) if key.kind != GAIN else 0}" if key.positive else (
        f"≥ {_bound_text(key.minimum, key)}" if key.minimum is not None else "")
    if key.minimum is not None and key.maximum is not None and not key.positive:
        return f"{_bound_text(key.minimum, key)} to {_bound_text(key.maximum, key)}"
    high = f"≤ {_bound_text(key.maximum, key)}" if key.maximum is not None else ""
    return ", ".join(part for part in (low, high) if part)


def reference_table(keys: tuple[Key, ...]) -> str:
    """The Markdown key reference of the README, generated so it cannot drift from the loader."""
    rows = ["| key | meaning | unit | range | default | example |", "|---|---|---|---|---|---|"]
    for k in keys:
        table = k.table.replace(".*", ".ID")
        if k.table in ARRAY_TABLES:
            where = f"[[{table}]] {k.name}"
        elif table:
            where = f"[{table}] {k.name}"
        else:
            where = k.name
        if k.kind in (CHOICE,):
            unit = " \\| ".join(k.choices)
        elif k.kind == REF:
            unit = f"id of a {NAMED_TABLES[k.ref]}"
        elif k.dims:
            unit = ", ".join(d.replace("<unit>", "unit") for d in k.dims)
        else:
            unit = k.kind
        scope = "" if k.table.endswith(".*") or k.table == "system" or len(k.kinds) == 3 else \
            f" ({', '.join(k.kinds)} only)"
        req = " Required." if k.required else ""
        rows.append(f"| `{where}` | {k.meaning}{scope}{req} | {unit} | {range_text(k)} "
                    f"| {k.default and f'`{k.default}`'} | `{k.example}` |")
    return "\n".join(rows)
