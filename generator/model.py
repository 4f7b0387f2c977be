"""The loaded spec: frozen dataclasses holding SI floats.

Nothing past the loader sees a raw TOML dict or an unparsed unit string.  Values a
channel inherits from its converter are already resolved here; ``stated`` on a
channel section records which keys the author actually wrote, so rules can tell a
deliberate value from an inherited one.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cache, cached_property
from types import MappingProxyType
from typing import Any

from . import schema
from .quantities import Span, Unit, parse_quantity


def id_key(channel_id: str) -> str:
    """The one key channel ids are compared by: they are unique ignoring case, and every listing of
    them (the spec's channel order, hence a multiplexer's scan order) sorts by it."""
    return channel_id.lower()


@dataclass(frozen=True)
class SourceRef:
    """Where something was written: a path relative to the specs folder, and a line."""

    file: str
    line: int = 0


@cache
def key_default(path: str) -> Any:
    """The default of a key of the format, as the model holds it: a quantity in SI, a gain as a
    float, anything else as TOML reads it.  Defaults live in :mod:`generator.schema` only; each is
    parsed once.  ``path`` as :attr:`generator.schema.Key.path`: "signal.flatness",
    "converters.*.sampling"."""
    key = next((k for k in (*schema.CHANNEL_KEYS, *schema.SYSTEM_KEYS) if k.path == path), None)
    if key is None or not key.default:
        raise KeyError(f"the schema gives no default for {path}")
    value = tomllib.loads(f"v = {key.default}")["v"]
    if key.kind == schema.QUANTITY:
        return parse_quantity(value, key.dims, key.path).value
    if key.kind == schema.GAIN:
        return float(value)
    return value


def _empty() -> Mapping[str, Any]:
    return MappingProxyType({})


@dataclass(frozen=True)
class Clock:
    id: str
    frequency: float
    dividers: tuple[int, ...] = ()
    divider_range: tuple[int, int] | None = None
    jitter: float | None = None
    source: SourceRef = SourceRef("system.toml")

    def allows(self, divider: int) -> bool:
        """Whether ``divider`` is one of the allowed integers (any integer when none are listed)."""
        if self.divider_range is not None:
            lo, hi = self.divider_range
            if not lo <= divider <= hi:
                return False
        if self.dividers:
            return divider in self.dividers
        return divider >= 1


@dataclass(frozen=True)
class Store:
    id: str
    capacity_bytes: float
    source: SourceRef = SourceRef("system.toml")


@dataclass(frozen=True)
class Link:
    id: str
    capacity_bps: float
    overhead: float = key_default("links.*.overhead")
    headroom: float = key_default("links.*.headroom")
    store: str | None = None
    source: SourceRef = SourceRef("system.toml")


@dataclass(frozen=True)
class Group:
    id: str
    skew_s: float | None = None
    phase_rad: float | None = None
    description: str = ""
    source: SourceRef = SourceRef("system.toml")


@dataclass(frozen=True)
class Converter:
    id: str
    type: str  # "adc" | "dac"
    architecture: str
    bits: int
    full_scale: Span
    max_rate: float
    sampling: str = key_default("converters.*.sampling")
    rate: float | None = None
    channels: int | None = None
    clock: str | None = None
    jitter: float | None = None
    link: str | None = None
    container_bits: int | None = None
    modulator_rate: float | None = None
    oversampling_ratios: tuple[int, ...] = ()
    passband: float | None = None
    stopband: float | None = None
    stopband_rejection_db: float | None = None
    source: SourceRef = SourceRef("system.toml")

    @property
    def is_delta_sigma(self) -> bool:
        return self.architecture == "delta-sigma"


@dataclass(frozen=True)
class System:
    name: str
    revision: str = key_default("system.revision")
    description: str = ""
    record_duration_s: float | None = None
    format: int = key_default("system.format")
    converters: Mapping[str, Converter] = field(default_factory=_empty)
    clocks: Mapping[str, Clock] = field(default_factory=_empty)
    links: Mapping[str, Link] = field(default_factory=_empty)
    stores: Mapping[str, Store] = field(default_factory=_empty)
    groups: Mapping[str, Group] = field(default_factory=_empty)
    source: SourceRef = SourceRef("system.toml")


@dataclass(frozen=True)
class Signal:
    band: tuple[float, float] | None = None
    peak: float | None = None  # SI value of the engineering unit
    resolution: float | None = None
    snr_db: float | None = None
    flatness_db: float = key_default("signal.flatness")
    out_of_band_dbfs: float = key_default("signal.out_of_band")
    filtered_to_band: bool = key_default("signal.filtered_to_band")
    image_rejection_db: float | None = None
    limit: float | None = None
    detail_cycles_per_m: float | None = None
    square_pixels: bool = key_default("signal.square_pixels")


@dataclass(frozen=True)
class Noise:
    """Sensor noise as written: rms or a density, in volts or in the engineering unit (SI)."""

    value: float
    density: bool  # per √Hz
    in_volts: bool


@dataclass(frozen=True)
class Sensor:
    sensitivity: float | None = None  # volts per SI engineering unit
    noise: Noise | None = None
    pixels: tuple[int, int] | None = None
    active_area_m: tuple[float, float] | None = None


@dataclass(frozen=True)
class Conversion:
    """Conversion settings, with values inherited from the converter already filled in."""

    converter: str | None = None
    link: str | None = None
    rate: float | None = None
    bits: int | None = None
    full_scale: Span | None = None
    gain: float = key_default("conversion.gain")
    jitter: float | None = None  # the channel's own [conversion] jitter: the total, as stated
    container_bits: int | None = None
    hold: str = key_default("conversion.hold")
    sinc_compensation: bool = key_default("conversion.sinc_compensation")
    stated: frozenset[str] = frozenset()  # keys written in the channel file itself
    aperture_jitter: float | None = None  # the converter's, inherited
    clock_jitter: float | None = None  # the converter's clock's, inherited

    @property
    def total_jitter(self) -> float | None:
        """Rms sampling jitter: the channel's own value when it states one, else the converter's
        aperture jitter and its clock's jitter added as a root sum of squares, being independent
        (common practice; ADI MT-007); None when none is known."""
        if self.jitter is not None:
            return self.jitter
        parts = [v for v in (self.aperture_jitter, self.clock_jitter) if v is not None]
        return math.sqrt(math.fsum(v * v for v in parts)) if parts else None


@dataclass(frozen=True)
class Filter:
    family: str
    order: int | None = None
    corner: float | None = None
    ripple_db: float = key_default("filter.ripple")
    stopband_db: float = key_default("filter.stopband_attenuation")


@dataclass(frozen=True)
class Tone:
    frequency: float
    level: float
    level_dim: str  # "dBFS", "V" or the engineering unit's SI dimension
    source: str = ""
    line: int = 0


@dataclass(frozen=True)
class Waiver:
    rule: str
    reason: str
    until: str = ""
    line: int = 0


@dataclass(frozen=True)
class Safety:
    working_voltage: float | None = None
    powered_actuator: bool = key_default("safety.powered_actuator")
    note: str = ""


@dataclass(frozen=True)
class Stated:
    data_rate_bps: float | None = None
    lsb_volts: float | None = None


@dataclass(frozen=True)
class Channel:
    id: str
    kind: str  # "input" | "output" | "image"
    title: str
    source: SourceRef
    unit: Unit
    measurand: str = ""
    tags: tuple[str, ...] = ()
    match: str | None = None
    signal: Signal = Signal()
    sensor: Sensor = Sensor()
    conversion: Conversion = Conversion()
    filter: Filter | None = None
    interference: tuple[Tone, ...] = ()
    waivers: tuple[Waiver, ...] = ()
    safety: Safety = Safety()
    stated: Stated = Stated()
    notes: str = ""  # Markdown, as written
    header: str = ""  # the TOML header, as written
    lines: Mapping[str, int] = field(default_factory=_empty)  # "conversion.rate" -> line

    def line_of(self, *paths: str) -> int:
        """Line of the first of ``paths`` written in the file, else the header's first line."""
        for path in paths:
            if path in self.lines:
                return self.lines[path]
        return 1


@dataclass(frozen=True)
class Spec:
    """A whole spec tree: the shared hardware and every channel, sorted by id."""

    root: str
    system: System
    channels: tuple[Channel, ...]
    keys: Mapping[str, str] = field(default_factory=_empty)
    """Each file read (system.toml, channels/...) by its path: a digest of what it holds and what it
    inherits, which the build cache keys its entries by."""

    @cached_property
    def _by_id(self) -> Mapping[str, Channel]:
        return {ch.id: ch for ch in self.channels}

    def channel(self, channel_id: str) -> Channel:
        return self._by_id[channel_id]  # KeyError for an unknown id
