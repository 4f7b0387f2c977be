"""Build the model from a spec tree, reporting every problem at once.

A spec tree is ``system.toml`` (shared hardware) plus ``channels/**/<ID>.md``: a TOML header
between two lines of ``+++``, then Markdown notes.  :mod:`.source` reads the files, :mod:`.values`
turns each value into a typed one; this module puts the model together (what a channel inherits
from its converter and clock, references between tables).  Every problem becomes a located
:class:`SpecError`; all of them, from all files, are raised together as :class:`SpecErrors`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path
from types import MappingProxyType
from typing import Any, Protocol

from . import schema
from .errors import SpecError, SpecErrors
from .model import (
    Channel,
    Clock,
    Conversion,
    Converter,
    Filter,
    Group,
    Link,
    Noise,
    Safety,
    Sensor,
    Signal,
    SourceRef,
    Spec,
    Stated,
    Store,
    System,
    Tone,
    Waiver,
    id_key,
)
from .quantities import Span, Unit, parse_unit
from .source import (
    CHANNEL_DIR,
    CHANNEL_ID,
    LINK_REFUSED,
    MAX_CHANNELS,
    SYSTEM_FILE,
    channel_files,
    locate_keys,
    parse_toml,
    read_text,
    split_header,
)
from .values import FileProblems, read_table, si_value, suggestion


def _load_system(root: Path, problems: list[SpecError], keys: dict[str, str] | None = None,
                 cached: Cached | None = None) -> System | None:
    path = root / SYSTEM_FILE
    if path.is_symlink():
        problems.append(SpecError(LINK_REFUSED.format(rel=SYSTEM_FILE), SYSTEM_FILE))
        return None
    if not path.exists():
        problems.append(SpecError(f"no {SYSTEM_FILE} in {root}; it holds what the channels share "
                                  "(see 'specfold new' and the README)", SYSTEM_FILE))
        return None
    text = read_text(path, SYSTEM_FILE, problems, keys)
    if text is None:
        return None
    if cached is not None and keys is not None and (kept := cached.system(keys[SYSTEM_FILE])) is not None:
        return kept
    src = FileProblems(SYSTEM_FILE, text)
    try:
        raw = parse_toml(text)
    except SpecError as err:
        src.add(err)
        problems.extend(src.problems)
        return None
    # located after parsing, so the key scan only sees text within the nesting limit
    src.positions = locate_keys(text)
    for name in raw:
        if name not in schema.SYSTEM_TABLES:
            src.problem(name, f"unknown table [{name}] in {SYSTEM_FILE}"
                              f"{suggestion(name, list(schema.SYSTEM_TABLES))}")
    head = read_table(src, raw.get("system", {}), schema.keys_of("system", schema.SYSTEM_KEYS),
                       "system", "[system]", None)
    if "system" not in raw:
        src.problem("", "[system] table is missing; it needs at least name = \"...\"")

    def named(table: str) -> Iterator[tuple[str, dict[str, Any], SourceRef]]:
        section = raw.get(table, {})
        if not isinstance(section, dict):
            src.problem(table, f"[{table}] must hold tables such as [{table}.example]")
            return
        keys = schema.keys_of(f"{table}.*", schema.SYSTEM_KEYS)
        for item_id, body in section.items():
            prefix = f"{table}.{item_id}"
            if not CHANNEL_ID.match(item_id):
                src.problem(prefix, f"'{item_id}' is not a usable id: use letters, digits, '.', '_' and '-'")
                continue
            values = read_table(src, body, keys, prefix, f"[{prefix}]", None)
            yield item_id, values, SourceRef(SYSTEM_FILE, src.where(prefix)[0])

    clocks = {}
    for cid, v, ref in named("clocks"):
        if "frequency" in v:
            clocks[cid] = Clock(cid, v["frequency"].value, v.get("dividers", ()), v.get("divider_range"),
                                si_value(v.get("jitter")), ref)
    stores = {sid: Store(sid, v["capacity"].value, ref) for sid, v, ref in named("stores") if "capacity" in v}
    links = {}
    for lid, v, ref in named("links"):
        if "capacity" in v:
            links[lid] = Link(lid, v["capacity"].value, si_value(v.get("overhead")) or 0.0,
                              si_value(v.get("headroom")) or 0.0, v.get("store"), ref)
    groups = {gid: Group(gid, si_value(v.get("skew")), si_value(v.get("phase")), v.get("description", ""), ref)
              for gid, v, ref in named("groups")}
    converters = {}
    for cid, v, ref in named("converters"):
        if not {"type", "architecture", "bits", "full_scale", "max_rate"} <= v.keys():
            continue
        conv = Converter(
            cid, v["type"], v["architecture"], v["bits"], v["full_scale"], v["max_rate"].value,
            v.get("sampling", "simultaneous"), si_value(v.get("rate")), v.get("channels"), v.get("clock"),
            si_value(v.get("jitter")), v.get("link"), v.get("container_bits"), si_value(v.get("modulator_rate")),
            v.get("oversampling_ratios", ()), v.get("passband"), v.get("stopband"),
            si_value(v.get("stopband_rejection")), ref,
        )
        converters[cid] = conv
        prefix = f"converters.{cid}"
        for attr, table in (("clock", "clocks"), ("link", "links")):
            target = getattr(conv, attr)
            if target and target not in raw.get(table, {}):
                src.problem(f"{prefix}.{attr}", _unknown_ref(attr, target, list(raw.get(table, {}))))
        if conv.passband and conv.stopband and conv.stopband <= conv.passband:
            src.problem(f"{prefix}.stopband", f"[{prefix}] stopband ({conv.stopband:g}) must lie above "
                                              f"passband ({conv.passband:g})")
        if conv.rate is not None and conv.rate > conv.max_rate and conv.sampling == "simultaneous":
            src.problem(f"{prefix}.rate", f"[{prefix}] rate is above its max_rate")
    for lid, link in links.items():
        if link.store and link.store not in raw.get("stores", {}):
            src.problem(f"links.{lid}.store", _unknown_ref("store", link.store, list(raw.get("stores", {}))))
    problems.extend(src.problems)
    if "name" not in head:
        return None
    return System(
        name=head["name"], revision=head.get("revision", ""), description=head.get("description", ""),
        record_duration_s=si_value(head.get("record_duration")), format=head.get("format", 1),
        converters=MappingProxyType(dict(sorted(converters.items()))),
        clocks=MappingProxyType(dict(sorted(clocks.items()))),
        links=MappingProxyType(dict(sorted(links.items()))),
        stores=MappingProxyType(dict(sorted(stores.items()))),
        groups=MappingProxyType(dict(sorted(groups.items()))),
        source=SourceRef(SYSTEM_FILE, 1),
    )


def _unknown_ref(noun: str, target: str, known: list[str]) -> str:
    hint = suggestion(target, known) if known else f"; system.toml defines no {noun}s"
    return f"{noun} '{target}' is not defined in system.toml{hint}"


# ----------------------------------------------------------------------- channel


def _sections(src: FileProblems, raw: dict[str, Any], kind: str | None, unit: Unit | None) -> dict[str, Any]:
    """Validate every table of a channel header; returns {table: {key: value}} (arrays: lists)."""
    top = schema.keys_of("")
    out: dict[str, Any] = {}
    for name, value in raw.items():
        if name in schema.CHANNEL_TABLES:
            keys = schema.keys_of(name)
            if name in schema.ARRAY_TABLES:
                if not isinstance(value, list):
                    src.problem(name, f"[[{name}]] must be written as an array of tables: [[{name}]]")
                    continue
                out[name] = [read_table(src, item, keys, f"{name}.{i}", f"[[{name}]]", unit, kind)
                             for i, item in enumerate(value)]
            else:
                if kind is not None and all(kind not in k.kinds for k in keys.values()):
                    src.problem(name, f"[{name}] does not apply to {kind} channels")
                    continue
                out[name] = read_table(src, value, keys, name, f"[{name}]", unit, kind)
        elif name not in top:
            options = list(top) + list(schema.CHANNEL_TABLES)
            src.problem(name, f"unknown key '{name}'{suggestion(name, options)}")
    for key in schema.CHANNEL_KEYS:
        # a table that is present reports its own gaps; here only wholly missing tables
        if key.required and key.table and key.table not in schema.ARRAY_TABLES and kind in key.kinds \
                and key.table not in raw:
            src.problem(key.table, f"[{key.table}] {key.name} is required for {kind} channels "
                                   f"(e.g. {key.name} = {key.example})")
    return out


def _load_channel(path: Path, rel: str, system: System | None, problems: list[SpecError],
                  keys: dict[str, str] | None = None, cached: Cached | None = None) -> Channel | None:
    text = read_text(path, rel, problems, keys, keys.get(SYSTEM_FILE, "") if keys is not None else "")
    if text is None:
        return None
    if cached is not None and keys is not None:
        kept = cached.channel(rel, keys[rel])
        if kept is not None:
            return kept
    src = FileProblems(rel, text)
    try:
        first, header, body = split_header(text)
        raw = parse_toml(header, first)
        # located after parsing, so the key scan only sees text within the nesting limit
        src.positions = locate_keys(header, first)
    except SpecError as err:
        src.add(err)
        problems.extend(src.problems)
        return None

    top = read_table(src, {k: v for k, v in raw.items() if k not in schema.CHANNEL_TABLES},
                      schema.keys_of(""), "", "the channel", None)
    kind: str | None = top.get("kind")
    unit: Unit | None = None
    unit_text = top.get("unit", "V")
    try:
        unit = parse_unit(unit_text, "unit")
    except SpecError as err:
        src.add(err, *src.where("unit"))
    sec = _sections(src, {k: v for k, v in raw.items() if k in schema.CHANNEL_TABLES}, kind, unit)
    if src.problems or kind is None or unit is None:
        problems.extend(src.problems)
        return None

    channel_id = path.stem
    sig_raw = sec.get("signal", {})
    sen_raw = sec.get("sensor", {})
    conv_raw = sec.get("conversion", {})
    lines = {p: lc[0] for p, lc in src.positions.items()}

    band = sig_raw.get("band")
    if band is not None and band[0] >= band[1]:
        src.problem("signal.band", f"[signal] band: the low edge ({band[0]:g} Hz) must be below the high "
                                   f"edge ({band[1]:g} Hz)")
    signal = Signal(
        band=band, peak=si_value(sig_raw.get("peak")), resolution=si_value(sig_raw.get("resolution")),
        snr_db=si_value(sig_raw.get("snr")), flatness_db=si_value(sig_raw.get("flatness")) or 0.5,
        out_of_band_dbfs=si_value(sig_raw.get("out_of_band")) or 0.0,
        filtered_to_band=sig_raw.get("filtered_to_band", False),
        image_rejection_db=si_value(sig_raw.get("image_rejection")), limit=si_value(sig_raw.get("limit")),
        detail_cycles_per_m=si_value(sig_raw.get("detail")), square_pixels=sig_raw.get("square_pixels", False),
    )
    noise = None
    if "noise" in sen_raw:
        q = sen_raw["noise"]
        noise = Noise(q.value, q.dim.endswith("/√Hz"), q.dim.split("/")[0] == "V")
    sensor = Sensor(si_value(sen_raw.get("sensitivity")), noise, sen_raw.get("pixels"),
                    tuple(sen_raw["active_area"]) if "active_area" in sen_raw else None)

    conversion = _resolve_conversion(src, conv_raw, kind, system)
    filt = None
    if "filter" in sec:
        f = sec["filter"]
        if "family" not in f:
            src.problem("filter", "[filter] needs a family: " + ", ".join(schema.FAMILIES))
        else:
            family = f["family"]
            # a key that shapes no filter of this family would be silently ignored: refuse it
            for key in schema.CHANNEL_KEYS:
                if key.table == "filter" and key.families and key.name in f and family not in key.families:
                    src.problem(key.path, f"{key.name} does not shape a {family} filter (it applies to "
                                          f"{' and '.join(key.families)} filters): remove it")
            ripple = si_value(f.get("ripple")) or 0.1
            stopband = si_value(f.get("stopband_attenuation")) or 80.0
            if family == "elliptic" and ripple >= stopband:
                # the two values swapped is the usual slip; an elliptic prototype needs ripple < attenuation
                src.problem("filter.ripple" if "ripple" in f else "filter.stopband_attenuation",
                            f"[filter] an elliptic filter's ripple ({ripple:g} dB"
                            f"{'' if 'ripple' in f else ', the default'}) must be below its stopband_attenuation "
                            f"({stopband:g} dB{'' if 'stopband_attenuation' in f else ', the default'}); "
                            "are the two values swapped?")
            filt = Filter(family, f.get("order"), si_value(f.get("corner")), ripple, stopband)
    if kind == "output" and conv_raw.get("sinc_compensation") and conv_raw.get("hold") == "none":
        src.problem("conversion.sinc_compensation", "sinc_compensation corrects the droop of a zero-order hold, "
                                                    'and this output has hold = "none": remove one of the two')
    tones = tuple(
        Tone(t["frequency"].value, t["level"].value, t["level"].dim, t.get("source", ""),
             src.where(f"interference.{i}")[0])
        for i, t in enumerate(sec.get("interference", [])) if "frequency" in t and "level" in t
    )
    waivers = tuple(Waiver(w["rule"], w["reason"], w.get("until", ""), src.where(f"waiver.{i}")[0])
                    for i, w in enumerate(sec.get("waiver", [])) if "rule" in w and "reason" in w)
    saf = sec.get("safety", {})
    st = sec.get("stated", {})
    match = top.get("match")
    if match and system is not None and match not in system.groups:
        src.problem("match", _unknown_ref("group", match, list(system.groups)))
    if not CHANNEL_ID.match(channel_id):
        src.add(SpecError(f"'{channel_id}' is not a usable channel id (the file name): use letters, "
                          "digits, '.', '_' and '-', at most 100 characters"), 1)
    problems.extend(src.problems)
    if src.problems:
        return None
    return Channel(
        id=channel_id, kind=kind, title=top["title"], source=SourceRef(rel, 1), unit=unit,
        measurand=top.get("measurand", ""), tags=top.get("tags", ()), match=match, signal=signal,
        sensor=sensor, conversion=conversion, filter=filt, interference=tones, waivers=waivers,
        safety=Safety(si_value(saf.get("working_voltage")), saf.get("powered_actuator", False),
                      saf.get("note", "")),
        stated=Stated(si_value(st.get("data_rate")), si_value(st.get("lsb"))),
        notes=body, header=header, lines=MappingProxyType(lines),
    )


def _resolve_conversion(src: FileProblems, raw: dict[str, Any], kind: str, system: System | None) -> Conversion:
    """Fill in what the channel inherits from its converter (and the converter's clock)."""
    conv: Converter | None = None
    conv_id = raw.get("converter")
    if conv_id and system is not None:
        conv = system.converters.get(conv_id)
        if conv is None:
            src.problem("conversion.converter", _unknown_ref("converter", conv_id, list(system.converters)))
        elif (kind == "input" and conv.type != "adc") or (kind == "output" and conv.type != "dac"):
            want = "an adc" if kind == "input" else "a dac"
            src.problem("conversion.converter", f"{kind} channel on converter '{conv_id}', which is "
                                                f"{'a dac' if conv.type == 'dac' else 'an adc'}; expected {want}")
    link = raw.get("link")
    if link and system is not None and link not in system.links:
        src.problem("conversion.link", _unknown_ref("link", link, list(system.links)))

    def pick(name: str, inherited: Any) -> Any:
        return raw.get(name, inherited)

    rate = si_value(raw.get("rate"))
    if rate is None and conv is not None:
        rate = conv.rate
    jitter = si_value(raw.get("jitter"))
    aperture = conv.jitter if conv is not None else None
    clock = conv.clock if conv is not None else None
    clock_jitter = system.clocks[clock].jitter if clock and system is not None and clock in system.clocks else None
    bits = pick("bits", conv.bits if conv else None)
    container = pick("container_bits", conv.container_bits if conv else None)
    if container is None and bits is not None:
        container = -(-bits // 8) * 8  # whole bytes, the usual packing
    if bits is not None and container is not None and container < bits:
        src.problem("conversion.container_bits", f"[conversion] container_bits ({container}) is smaller "
                                                 f"than bits ({bits})")
    full_scale: Span | None = pick("full_scale", conv.full_scale if conv else None)
    missing = []
    if rate is None:
        missing.append("rate")
    if bits is None:
        missing.append("bits")
    if full_scale is None and kind != "image":
        missing.append("full_scale")
    if missing and (conv_id is None or conv is not None):  # a bad reference is reported once, above
        src.problem("conversion", f"no {', '.join(missing)} for this {kind} channel: set them under "
                                  "[conversion] or name a converter that has them")
    return Conversion(
        converter=conv_id, link=link or (conv.link if conv else None), rate=rate, bits=bits,
        full_scale=full_scale, gain=raw.get("gain", 1.0), jitter=jitter, container_bits=container,
        hold=raw.get("hold", "zero-order"), sinc_compensation=raw.get("sinc_compensation", False),
        stated=frozenset(raw), aperture_jitter=aperture, clock_jitter=clock_jitter,
    )


# -------------------------------------------------------------------------- tree


def load_system(root: Path | str) -> System:
    """Load only ``root/system.toml``; raise :class:`SpecErrors` listing its problems."""
    problems: list[SpecError] = []
    system = _load_system(Path(root), problems)
    if problems or system is None:
        raise SpecErrors(problems)
    return system


class Cached(Protocol):
    """What a build cache kept of files loaded earlier, by their keys (:attr:`Spec.keys`): a file it
    knows is read and hashed, not parsed again."""

    def channel(self, rel: str, key: str) -> Channel | None:
        """The channel loaded from the channel file ``rel`` whose key is ``key``, or None."""

    def system(self, key: str) -> System | None:
        """The system loaded from a system.toml whose key is ``key``, or None."""


def load_spec(root: Path | str, on_file: Callable[[], None] | None = None, cached: Cached | None = None) -> Spec:
    """Load a whole spec tree; raise :class:`SpecErrors` listing every problem found.

    Every file read gets a key in :attr:`Spec.keys`: a digest of its path and bytes, for a channel
    file also of system.toml's key (what a channel inherits comes from there).  ``cached`` may give
    back, for a file and its key, what was loaded from that very text earlier.
    """
    root = Path(root)
    problems: list[SpecError] = []
    if not root.is_dir():
        raise SpecErrors([SpecError(f"'{root}' is not a folder of specs (expected system.toml and channels/)")])
    keys: dict[str, str] = {}
    system = _load_system(root, problems, keys, cached)
    if (root / CHANNEL_DIR).is_symlink():
        raise SpecErrors([*problems, SpecError(LINK_REFUSED.format(rel=CHANNEL_DIR), CHANNEL_DIR)])
    files = channel_files(root)
    if len(files) > MAX_CHANNELS:
        raise SpecErrors([SpecError(f"{len(files):,} channel files; a spec tree is limited to "
                                    f"{MAX_CHANNELS:,} channels", CHANNEL_DIR)])
    if not files:
        problems.append(SpecError(f"no channel files: add {CHANNEL_DIR}/<ID>.md (see 'specfold new')",
                                  CHANNEL_DIR))
    channels: dict[str, Channel] = {}
    seen: dict[str, str] = {}
    for path in files:
        rel = path.relative_to(root).as_posix()
        ch = _load_channel(path, rel, system, problems, keys, cached if system is not None else None)
        folded = id_key(path.stem)
        if folded in seen:
            problems.append(SpecError(f"duplicate channel id '{path.stem}': {seen[folded]} has the same id "
                                      "(ids are file names and must be unique, ignoring case)", rel, 1))
        else:
            seen[folded] = rel
            if ch is not None:
                channels[ch.id] = ch
        if on_file:
            on_file()
    if problems or system is None:
        raise SpecErrors(problems)
    return Spec(str(root), system, tuple(channels[k] for k in sorted(channels, key=id_key)),
                MappingProxyType(keys))
