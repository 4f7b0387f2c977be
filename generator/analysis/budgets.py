"""Budgets of the shared hardware: converter load, clock division, link and store use, group timing.

Channels contradict each other through what they share.  This module adds up, per converter,
clock, link, store and timing group, what the channels ask of it; the rules in
``rules/budgets.py`` compare each total with its limit.  Per channel it gives the data rate
(samples in their containers) and the payload rate (useful bits).

Definitions used throughout (see the README):

- a channel's data rate is fs x container bits (image channels: frame rate x pixels x container
  bits); its payload rate uses the converter bits instead of the container;
- a link carries the data rate of every channel routed over it (input and output), plus the
  link's protocol overhead, and must stay below capacity x (1 - headroom);
- a store receives the data rate of every link recording into it (overhead is framing, not
  stored) for the system's ``record_duration``;
- a multiplexed converter scans its channels in id order, evenly spread: slot k samples
  k / (sum of the channel rates) after slot 0;
- a group's phase error at its band edge is the spread of the members' exact filter phases at
  f_high, each plus 2 pi f x its scan skew (a channel sampled t later records a sine leading by
  2 pi f t).
"""

from __future__ import annotations

import math
from collections import ChainMap
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

from ..dsp import budgets as dsp
from ..dsp import filters, quantization
from ..model import Channel, Clock, Converter, Filter, Group, Link, Spec, Store, id_key
from .figures import Figures, figure_field, result_class

STATED_TOLERANCE = 0.01
"""How far a figure the spec states may differ from the computed one: 1 % (relative)."""


def stated_rate_basis(said: float, containers_bps: float, packed_bps: float) -> str | None:
    """Which computed data rate a stated one matches within :data:`STATED_TOLERANCE`: "containers",
    "packed" (containers first when both do), or None."""
    for value, name in ((containers_bps, "containers"), (packed_bps, "packed")):
        if value and abs(said - value) / value <= STATED_TOLERANCE * (1 + 1e-9):
            return name
    return None


def _stated(b: ChannelBudget) -> bool:
    return b.stated_data_rate_bps is not None


@result_class
class ChannelBudget(Figures):
    """What one channel puts on the shared hardware."""

    data_rate_bps: float = figure_field("data_rate_bps", "Data rate", "bit/s", "fs x C (image: frame rate x W x H x C)",
                                        "IEC 60908 (fs N channels); containers from the converter")
    payload_rate_bps: float = figure_field("payload_rate_bps", "Payload rate (packed bits)", "bit/s",
                                           "fs x N (image: frame rate x W x H x N)", "IEC 60908 (fs N channels)")
    stated_data_rate_basis: str | None = figure_field(  # there only when the spec states a data rate
        "stated_data_rate_basis", "Which data rate the stated one matches", "",
        "containers (fs x C) or packed (fs x N), within 1 %; null when it matches neither", "definition",
        default=None, shown=_stated)
    lsb_volts: float | None = None  # for the stated-figure check
    stated_data_rate_bps: float | None = None


@dataclass(frozen=True)
class ConverterLoad:
    id: str
    sampling: str
    channels: tuple[str, ...]
    rates_hz: tuple[float, ...]  # per channel, same order
    aggregate_rate_hz: float
    max_rate_hz: float
    load: float  # multiplexed: aggregate / max_rate; simultaneous: fastest channel / max_rate
    inputs: int | None
    scan_skew_s: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))

    @property
    def distinct_rates(self) -> tuple[float, ...]:
        return tuple(sorted(set(self.rates_hz)))

    def as_dict(self) -> dict[str, Any]:
        return {"id": self.id, "sampling": self.sampling, "channels": list(self.channels),
                "aggregate_rate_hz": self.aggregate_rate_hz, "max_rate_hz": self.max_rate_hz,
                "load": self.load, "inputs": self.inputs,
                "scan_skew_s": dict(self.scan_skew_s) if self.sampling == "multiplexed" else {}}


@dataclass(frozen=True)
class ClockCheck:
    """Whether a rate divides out of its reference (the clock, or a delta-sigma modulator)."""

    subject: str  # "rate" (channels' output rate) or "modulator" (the converter's modulator rate)
    converter: str
    clock: str
    channels: tuple[str, ...]
    target_hz: float
    reference_hz: float  # clock frequency, or the modulator rate for a delta-sigma output rate
    reference: str  # "clock mclk" / "modulator of adc-ds"
    divider: int | None  # the allowed exact divider, None when there is none
    nearest_divider: int | None
    nearest_hz: float | None
    error_ppm: float | None
    allowed: str  # the allowed dividers, in words

    @property
    def ok(self) -> bool:
        return self.divider is not None

    def as_dict(self) -> dict[str, Any]:
        return {"subject": self.subject, "converter": self.converter, "clock": self.clock,
                "channels": list(self.channels), "target_hz": self.target_hz,
                "reference_hz": self.reference_hz, "divider": self.divider, "ok": self.ok,
                "nearest_divider": self.nearest_divider, "nearest_hz": self.nearest_hz,
                "error_ppm": self.error_ppm}


@dataclass(frozen=True)
class LinkBudget:
    id: str
    channels: tuple[str, ...]
    data_rate_bps: float  # sum of the channels' data rates (samples in their containers)
    load_bps: float  # data rate x (1 + overhead)
    capacity_bps: float
    usable_bps: float  # capacity x (1 - headroom)
    utilisation: float  # load / capacity
    limit: float  # 1 - headroom
    store: str | None

    def as_dict(self) -> dict[str, Any]:
        return {"id": self.id, "channels": list(self.channels), "data_rate_bps": self.data_rate_bps,
                "load_bps": self.load_bps, "capacity_bps": self.capacity_bps, "usable_bps": self.usable_bps,
                "utilisation": self.utilisation, "limit": self.limit, "store": self.store}


@dataclass(frozen=True)
class StoreBudget:
    id: str
    links: tuple[str, ...]
    stream_bps: float
    record_duration_s: float | None
    bytes_needed: float | None
    capacity_bytes: float
    utilisation: float | None
    holding_time_s: float

    def as_dict(self) -> dict[str, Any]:
        return {"id": self.id, "links": list(self.links), "stream_bps": self.stream_bps,
                "record_duration_s": self.record_duration_s, "bytes_needed": self.bytes_needed,
                "capacity_bytes": self.capacity_bytes, "utilisation": self.utilisation,
                "holding_time_s": self.holding_time_s}


@dataclass(frozen=True)
class GroupTiming:
    id: str
    members: tuple[str, ...]  # members whose phase is known
    unknown: tuple[str, ...]  # members without a band or a fully specified filter
    f_hz: float | None  # the band edge the timing is judged at (highest f_high of the members)
    phases_rad: Mapping[str, float]
    phase_error_rad: float  # max - min of the members' phases at f_hz
    skew_s: float  # phase_error / (2 pi f)
    dc_estimate_rad: float  # the same spread from DC group delays and scan skew only
    limit_phase_rad: float | None
    limit_skew_s: float | None

    def as_dict(self) -> dict[str, Any]:
        return {"id": self.id, "members": list(self.members), "unknown": list(self.unknown), "f_hz": self.f_hz,
                "phases_rad": dict(self.phases_rad), "phase_error_rad": self.phase_error_rad,
                "skew_s": self.skew_s, "dc_estimate_rad": self.dc_estimate_rad,
                "limit_phase_rad": self.limit_phase_rad, "limit_skew_s": self.limit_skew_s}


@dataclass(frozen=True)
class Budgets:
    channels: Mapping[str, ChannelBudget]
    converters: tuple[ConverterLoad, ...]
    clocks: tuple[ClockCheck, ...]
    links: tuple[LinkBudget, ...]
    stores: tuple[StoreBudget, ...]
    groups: tuple[GroupTiming, ...]

    def converter(self, cid: str) -> ConverterLoad:
        return next(c for c in self.converters if c.id == cid)

    def link(self, lid: str) -> LinkBudget:
        return next(lk for lk in self.links if lk.id == lid)

    def store(self, sid: str) -> StoreBudget:
        return next(s for s in self.stores if s.id == sid)

    def group(self, gid: str) -> GroupTiming:
        return next(g for g in self.groups if g.id == gid)


# ------------------------------------------------------------------------ channels


def _samples_per_frame(ch: Channel) -> int:
    if ch.kind == "image" and ch.sensor.pixels is not None:
        w, h = ch.sensor.pixels
        return w * h
    return 1


def channel_budget(ch: Channel) -> ChannelBudget | None:
    """Data and payload rate of one channel; None without a rate or bits."""
    conv = ch.conversion
    if conv.rate is None or conv.bits is None:
        return None
    container = conv.container_bits or conv.bits
    n = _samples_per_frame(ch)
    lsb = quantization.lsb(conv.full_scale.width, conv.bits) if conv.full_scale is not None else None
    data_rate = dsp.stream_rate(conv.rate * n, container)
    payload = dsp.payload_rate(conv.rate * n, conv.bits)
    said = ch.stated.data_rate_bps
    return ChannelBudget(data_rate_bps=data_rate, payload_rate_bps=payload, lsb_volts=lsb, stated_data_rate_bps=said,
                         stated_data_rate_basis=None if said is None else stated_rate_basis(said, data_rate, payload))


# ---------------------------------------------------------------------- converters


def converter_load(conv: Converter, members: Sequence[Channel]) -> ConverterLoad:
    """Load of one converter from the channels naming it (in spec order: a multiplexer scans them so)."""
    ids = tuple(ch.id for ch in members)
    rates = tuple(ch.conversion.rate or 0.0 for ch in members)
    aggregate = sum(rates)
    if conv.sampling == "multiplexed":
        load = dsp.utilisation(aggregate, conv.max_rate)
        skews = {cid: dsp.scan_skew(k, aggregate) for k, cid in enumerate(ids)} if aggregate > 0 else {}
    else:
        load = dsp.utilisation(max(rates, default=0.0), conv.max_rate)
        skews = {}
    return ConverterLoad(conv.id, conv.sampling, ids, rates, aggregate, conv.max_rate, load, conv.channels,
                         MappingProxyType(skews))


# -------------------------------------------------------------------------- clocks


def _allowed_words(dividers: tuple[int, ...], divider_range: tuple[int, int] | None) -> str:
    parts = []
    if dividers:
        parts.append("one of " + ", ".join(str(d) for d in dividers))
    if divider_range is not None:
        parts.append(f"from {divider_range[0]} to {divider_range[1]}")
    return " and ".join(parts) or "any integer"


def _check_division(subject: str, conv: Converter, clock: Clock, channels: tuple[str, ...], target: float,
                    reference_hz: float, reference: str, dividers: tuple[int, ...],
                    divider_range: tuple[int, int] | None, allows: Any) -> ClockCheck:
    exact = dsp.exact_divider(reference_hz, target)
    divider = exact if exact is not None and allows(exact) else None
    near = dsp.nearest_divider(reference_hz, target, dividers, divider_range)
    near_hz = reference_hz / near if near else None
    return ClockCheck(subject, conv.id, clock.id, channels, target, reference_hz, reference, divider, near, near_hz,
                      dsp.ppm_error(near_hz, target) if near_hz else None, _allowed_words(dividers, divider_range))


def clock_checks(conv: Converter, clock: Clock, members: Sequence[Channel]) -> list[ClockCheck]:
    """Whether the converter's modulator rate (delta-sigma) and each distinct rate of its channels divide out."""
    out: list[ClockCheck] = []
    by_rate: dict[float, list[str]] = {}
    for ch in members:
        if ch.conversion.rate:
            by_rate.setdefault(ch.conversion.rate, []).append(ch.id)
    via_modulator = conv.is_delta_sigma and conv.modulator_rate is not None
    if via_modulator and conv.modulator_rate is not None:
        # common practice: the modulator clock itself is MCLK / N
        out.append(_check_division("modulator", conv, clock, (), conv.modulator_rate, clock.frequency,
                                   f"clock {clock.id}", clock.dividers, clock.divider_range, clock.allows))
    for rate, ids in sorted(by_rate.items()):
        if via_modulator and conv.modulator_rate is not None:
            osrs = conv.oversampling_ratios

            def osr_ok(d: int, osrs: tuple[int, ...] = osrs) -> bool:
                return d in osrs if osrs else d >= 1

            out.append(_check_division("rate", conv, clock, tuple(ids), rate, conv.modulator_rate,
                                       f"modulator of {conv.id}", osrs, None, osr_ok))
        else:
            out.append(_check_division("rate", conv, clock, tuple(ids), rate, clock.frequency, f"clock {clock.id}",
                                       clock.dividers, clock.divider_range, clock.allows))
    return out


# --------------------------------------------------------------------- links, stores


def link_budget(link: Link, members: Sequence[tuple[str, ChannelBudget]]) -> LinkBudget:
    """Load of one link from the budgets of the channels routed over it (id, budget; in spec order)."""
    data_rate = sum(b.data_rate_bps for _, b in members)
    load = dsp.link_load(data_rate, link.overhead)
    return LinkBudget(link.id, tuple(cid for cid, _ in members), data_rate, load, link.capacity_bps,
                      dsp.usable_capacity(link.capacity_bps, link.headroom),
                      dsp.utilisation(load, link.capacity_bps), 1.0 - link.headroom, link.store)


def store_budget(store: Store, feeding: Sequence[LinkBudget], duration: float | None) -> StoreBudget:
    """Use of one store from the links recording into it (by link id), for a recording of ``duration`` s."""
    stream = sum(lk.data_rate_bps for lk in feeding)
    needed = dsp.record_bytes(stream, duration) if duration is not None else None
    return StoreBudget(store.id, tuple(lk.id for lk in feeding), stream, duration, needed, store.capacity_bytes,
                       dsp.utilisation(needed, store.capacity_bytes) if needed is not None else None,
                       dsp.holding_time(store.capacity_bytes, stream))


# -------------------------------------------------------------------------- groups


def member_filter(filt: Filter) -> filters.AnalogFilter | None:
    """A member's analog filter as designed; None when its order or corner is missing (the build
    sizes those) or its values cannot be designed."""
    if filt.order is None or filt.corner is None:
        return None
    try:
        return filters.design(filt.family, filt.order, filt.corner, filt.ripple_db, filt.stopband_db)
    except ValueError:
        return None


def group_timing(group: Group, members: Sequence[Channel], skews: Mapping[str, float]) -> GroupTiming:
    """Timing of one group from its members (in spec order) and their scan skews (absent: 0 s).

    A member sampled t later records a sine leading by 2 pi f t (:func:`dsp.sampled_phase`), so
    its phase is its filter's exact phase plus 2 pi f t."""
    known: list[tuple[Channel, filters.AnalogFilter | None, float]] = []
    unknown: list[str] = []
    for ch in members:
        filt = member_filter(ch.filter) if ch.filter is not None else None
        if ch.signal.band is None or (ch.filter is not None and filt is None):
            unknown.append(ch.id)
        else:
            known.append((ch, filt, skews.get(ch.id, 0.0)))
    f = max((ch.signal.band or (0.0, 0.0))[1] for ch, _, _ in known) if known else None
    phases: dict[str, float] = {}
    estimates: dict[str, float] = {}
    if f:
        _, ref_filter, ref_t = known[0]
        for ch, filt, t in known:
            # each member against the first: exact phase, and the DC-delay estimate of the same
            phases[ch.id] = dsp.phase_difference(filt, ref_filter, f, t, ref_t)
            estimates[ch.id] = dsp.phase_difference_dc_estimate(filt, ref_filter, f, t, ref_t)
    spread = max(phases.values()) - min(phases.values()) if phases else 0.0
    dc_spread = max(estimates.values()) - min(estimates.values()) if estimates else 0.0
    return GroupTiming(group.id, tuple(ch.id for ch, _, _ in known), tuple(unknown), f, MappingProxyType(phases),
                       spread, spread / (2 * math.pi * f) if f else 0.0, dc_spread, group.phase_rad, group.skew_s)


# ---------------------------------------------------------------------------- all


@dataclass(frozen=True)
class Sharing:
    """Who shares what: per converter, link and group of the system the ids of the channels naming
    it, in spec order (whether or not they have a rate yet); per store the links recording into it,
    by id.  Resources nobody names map to ``()``."""

    converters: Mapping[str, tuple[str, ...]]
    links: Mapping[str, tuple[str, ...]]
    groups: Mapping[str, tuple[str, ...]]
    feeds: Mapping[str, tuple[str, ...]]


def sharing(spec: Spec) -> Sharing:
    """Who shares what in ``spec``, in one pass over the channels."""
    system = spec.system
    on: dict[str, dict[str, list[str]]] = {"converters": {cid: [] for cid in system.converters},
                                           "links": {lid: [] for lid in system.links},
                                           "groups": {gid: [] for gid in system.groups}}
    for ch in spec.channels:  # one pass: a large system has thousands of converters, links and groups
        for kind, rid in (("converters", ch.conversion.converter), ("links", ch.conversion.link),
                          ("groups", ch.match)):
            if rid is not None and rid in on[kind]:
                on[kind][rid].append(ch.id)
    feeds: dict[str, list[str]] = {sid: [] for sid in system.stores}
    for lid, link in sorted(system.links.items()):
        if link.store in feeds:
            feeds[link.store].append(lid)

    def frozen(table: dict[str, list[str]]) -> Mapping[str, tuple[str, ...]]:
        return MappingProxyType({k: tuple(v) for k, v in table.items()})

    return Sharing(frozen(on["converters"]), frozen(on["links"]), frozen(on["groups"]), frozen(feeds))


def _link_members(ids: Iterable[str], per_channel: Mapping[str, ChannelBudget]) -> list[tuple[str, ChannelBudget]]:
    return [(cid, per_channel[cid]) for cid in ids if cid in per_channel]


def analyze_budgets(spec: Spec) -> Budgets:
    """Every budget of the shared hardware, from the loaded spec."""
    return _budgets(spec, sharing(spec))


def _budgets(spec: Spec, shared: Sharing) -> Budgets:
    system = spec.system
    per_channel = {ch.id: b for ch in spec.channels if (b := channel_budget(ch)) is not None}

    def members(ids: tuple[str, ...]) -> list[Channel]:
        return [spec.channel(cid) for cid in ids]

    converters = tuple(converter_load(conv, members(shared.converters[cid]))
                       for cid, conv in sorted(system.converters.items()))
    skews = {cid: t for c in converters for cid, t in c.scan_skew_s.items()}
    clocks: list[ClockCheck] = []
    for cid, conv in sorted(system.converters.items()):
        if conv.clock is not None and conv.clock in system.clocks:
            clocks.extend(clock_checks(conv, system.clocks[conv.clock], members(shared.converters[cid])))
    links = {lid: link_budget(link, _link_members(shared.links[lid], per_channel))
             for lid, link in sorted(system.links.items())}
    stores = tuple(store_budget(store, [links[lid] for lid in shared.feeds[sid]], system.record_duration_s)
                   for sid, store in sorted(system.stores.items()))
    groups = tuple(group_timing(group, members(shared.groups[gid]), skews)
                   for gid, group in sorted(system.groups.items()) if shared.groups[gid])
    return Budgets(MappingProxyType(per_channel), converters, tuple(clocks), tuple(links.values()), stores, groups)


# ------------------------------------------------------------------- one channel changed


@dataclass(frozen=True)
class Reach:
    """The shared resources whose budgets a channel's rate, container and filter bear on.

    Its converter (with that converter's clock checks), its link and the store that link records
    into, and its timing group; on a multiplexed converter also the group of every channel on it,
    since the scan skew of each depends on the sum of their rates.  ``links`` are every link
    recording into the store (the storage rule names their channels), or the channel's own link;
    ``channels`` every channel naming one of these resources, sorted by id."""

    channel: str
    converter: str | None
    links: tuple[str, ...]
    link: str | None
    store: str | None
    groups: tuple[str, ...]
    channels: tuple[str, ...]


class BudgetIndex:
    """A spec's budgets, indexed by resource, to recompute only those one changed channel alters.

    ``budgets`` must be :func:`analyze_budgets` of ``spec`` (computed here when not given).  The
    changed channel keeps its id, converter, link and group (only its rate, container or filter
    differ); the result holds only the resources of its :class:`Reach`, computed by the same
    per-resource functions as :func:`analyze_budgets`, so each equals what a whole analysis of the
    changed spec gives for that resource."""

    def __init__(self, spec: Spec, budgets: Budgets | None = None) -> None:
        self.spec = spec
        self.sharing = sharing(spec)
        self.budgets = budgets if budgets is not None else _budgets(spec, self.sharing)
        b = self.budgets
        self._converters = {c.id: c for c in b.converters}
        self._clocks: dict[str, list[ClockCheck]] = {}
        for c in b.clocks:
            self._clocks.setdefault(c.converter, []).append(c)
        self._links = {lk.id: lk for lk in b.links}
        self._stores = {st.id: st for st in b.stores}
        self._groups = {g.id: g for g in b.groups}
        self._skews = {cid: t for c in b.converters for cid, t in c.scan_skew_s.items()}

    def reach(self, channel_id: str) -> Reach:
        """What a change of the channel's rate, container or filter can alter (KeyError: no such channel)."""
        system, shared = self.spec.system, self.sharing
        ch = self.spec.channel(channel_id)
        conv = ch.conversion.converter if ch.conversion.converter in system.converters else None
        link = ch.conversion.link if ch.conversion.link in system.links else None
        store = system.links[link].store if link is not None else None
        store = store if store in system.stores else None
        links = shared.feeds[store] if store is not None else (link,) if link is not None else ()
        on_conv = shared.converters[conv] if conv is not None else ()
        matches = [ch.match]
        if conv is not None and system.converters[conv].sampling == "multiplexed":
            matches.extend(self.spec.channel(cid).match for cid in on_conv)
        groups = {g for g in matches if g is not None and g in system.groups}
        ids = {ch.id, *on_conv, *(cid for lid in links for cid in shared.links[lid]),
               *(cid for g in groups for cid in shared.groups[g])}
        return Reach(ch.id, conv, tuple(links), link, store, tuple(sorted(groups)), tuple(sorted(ids, key=id_key)))

    def within(self, reach: Reach) -> Budgets:
        """The budgets of ``reach``'s resources as they are in the spec."""
        per_channel = self.budgets.channels
        return Budgets(MappingProxyType({cid: per_channel[cid] for cid in reach.channels if cid in per_channel}),
                       (self._converters[reach.converter],) if reach.converter is not None else (),
                       tuple(self._clocks.get(reach.converter, ())) if reach.converter is not None else (),
                       tuple(self._links[lid] for lid in reach.links),
                       (self._stores[reach.store],) if reach.store is not None else (),
                       tuple(self._groups[g] for g in reach.groups))

    def rebudget(self, reach: Reach, changed: Channel) -> Budgets:
        """The budgets of ``reach``'s resources with ``changed`` in place of the channel of its id."""
        system, shared, spec = self.spec.system, self.sharing, self.spec

        def channel(cid: str) -> Channel:
            return changed if cid == changed.id else spec.channel(cid)

        per_channel = {cid: b for cid in reach.channels
                       if (b := (channel_budget(changed) if cid == changed.id else self.budgets.channels.get(cid)))
                       is not None}
        converters: tuple[ConverterLoad, ...] = ()
        clocks: list[ClockCheck] = []
        skews: Mapping[str, float] = self._skews
        if reach.converter is not None:
            conv = system.converters[reach.converter]
            members = [channel(cid) for cid in shared.converters[conv.id]]
            load = converter_load(conv, members)
            converters = (load,)
            if conv.clock is not None and conv.clock in system.clocks:
                clocks = clock_checks(conv, system.clocks[conv.clock], members)
            skews = ChainMap({cid: load.scan_skew_s.get(cid, 0.0) for cid in load.channels}, self._skews)
        links = tuple(link_budget(system.links[lid], _link_members(shared.links[lid], per_channel))
                      if lid == reach.link else self._links[lid] for lid in reach.links)
        stores = ((store_budget(system.stores[reach.store], links, system.record_duration_s),)
                  if reach.store is not None else ())
        groups = tuple(group_timing(system.groups[g], [channel(cid) for cid in shared.groups[g]], skews)
                       for g in reach.groups)
        return Budgets(MappingProxyType(per_channel), converters, tuple(clocks), links, stores, groups)
