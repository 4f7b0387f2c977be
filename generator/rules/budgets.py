"""Rules about what channels share: converters, clocks, links, stores, timing groups; stated figures;
and waivers that no longer match anything."""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator

from ..analysis import ChannelResult, SystemAnalysis
from ..analysis.budgets import STATED_TOLERANCE, ClockCheck, stated_rate_basis
from ..model import Channel, SourceRef, System
from ..quantities import format_percent, format_quantity
from . import Finding, Hit, beyond, channel_rule, system_rule


def _hz(v: float, digits: int = 4) -> str:
    return format_quantity(v, "Hz", digits)


def _sps(v: float, digits: int = 4) -> str:
    return format_quantity(v, "Hz", digits).replace("Hz", "S/s")


def _bps(v: float) -> str:
    return format_quantity(v, "bit/s")


def _duration(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "indefinitely"
    if seconds >= 86400 * 2:
        return f"{seconds / 86400:.3g} d"
    if seconds >= 3600:
        return f"{seconds / 3600:.3g} h"
    if seconds >= 60:
        return f"{seconds / 60:.3g} min"
    return format_quantity(seconds, "s")


def _ppm(ppm: float) -> str:
    return f"{ppm:+.1f} ppm" if abs(ppm) < 1e5 else f"{ppm:+.4g} ppm"


def _deg(rad: float) -> str:
    return f"{math.degrees(rad):.3g}°"


def _finding(rule: str, severity: str, where: SourceRef, channels: Iterable[str], message: str) -> Finding:
    return Finding(rule, severity, tuple(channels), where.file, max(where.line, 1), message)


def _rate_line(ch: Channel) -> SourceRef:
    return SourceRef(ch.source.file, ch.line_of("conversion.rate", "conversion.converter", "conversion"))


@system_rule(
    "converter-throughput",
    "error",
    "Converter asked for more than it can convert",
    """A multiplexed converter shares one sampler among its inputs: the sum of its channels' rates
    must not exceed its max_rate (load = sum fs_i / max_rate). A simultaneous converter has one
    sampler per input: each channel's rate must not exceed max_rate. Neither may carry more channels
    than it has inputs. Lower rates, move channels to another converter, or choose a faster one.""",
    tags=("shared",),
)
def converter_throughput(analysis: SystemAnalysis) -> Iterator[Finding]:
    system = analysis.spec.system
    for load in analysis.budgets.converters:
        conv = system.converters[load.id]
        if beyond(load.load, 1.0):
            if load.sampling == "multiplexed":
                msg = (f"{len(load.channels)} channels on multiplexed converter '{load.id}' ask for "
                       f"{_sps(load.aggregate_rate_hz)} in total, {format_percent(load.load)} of its "
                       f"{_sps(load.max_rate_hz)}; lower the rates, or move channels worth "
                       f"{_sps(load.aggregate_rate_hz - load.max_rate_hz)} to another converter")
            else:
                fastest = max(load.rates_hz)
                who = [c for c, r in zip(load.channels, load.rates_hz, strict=True) if r == fastest]
                msg = (f"{', '.join(who)} on converter '{load.id}' at {_sps(fastest)} exceeds its "
                       f"max_rate {_sps(load.max_rate_hz)} ({format_percent(load.load)}); lower the "
                       "rate or choose a faster converter")
            yield _finding("converter-throughput", "error", conv.source, load.channels, msg)
        if load.inputs is not None and len(load.channels) > load.inputs:
            yield _finding("converter-throughput", "error", conv.source, load.channels,
                           f"{len(load.channels)} channels name converter '{load.id}', which has {load.inputs} "
                           f"inputs; move {len(load.channels) - load.inputs} to another converter")


@system_rule(
    "shared-rate",
    "error",
    "Channels of a simultaneous converter at different rates",
    """A simultaneous converter samples all its inputs on one clock edge, so every channel on it
    runs at the same rate. Channels asking for different rates on one such converter contradict each
    other: give them one rate (decimate in software where a channel needs less), or split them over
    converters.""",
    tags=("shared",),
)
def shared_rate(analysis: SystemAnalysis) -> Iterator[Finding]:
    for load in analysis.budgets.converters:
        if load.sampling != "simultaneous" or len(load.distinct_rates) < 2:
            continue
        groups = {r: [c for c, x in zip(load.channels, load.rates_hz, strict=True) if x == r]
                  for r in load.distinct_rates}
        default = analysis.spec.system.converters[load.id].rate
        common = default if default in groups else max(groups, key=lambda r: (len(groups[r]), r))
        odd = [c for r, ids in groups.items() if r != common for c in ids]
        first = analysis.spec.channel(odd[0])
        listing = "; ".join(f"{_sps(r)}: {', '.join(ids)}" for r, ids in groups.items())
        yield _finding("shared-rate", "error", _rate_line(first), load.channels,
                       f"simultaneous converter '{load.id}' samples every input at one rate, but its channels ask "
                       f"for {len(groups)} rates ({listing}); set {', '.join(odd)} to "
                       f"{_sps(common)}, or move them to another converter")


def _clock_message(c: ClockCheck) -> str:
    ratio = c.reference_hz / c.target_hz
    what = (f"modulator rate {_hz(c.target_hz, 7)} of '{c.converter}'" if c.subject == "modulator"
            else f"rate {_sps(c.target_hz, 7)} ({', '.join(c.channels)})")
    text = (f"{what} is not {c.reference} ({_hz(c.reference_hz, 7)}) divided by an allowed integer "
            f"({c.allowed}): the ratio is {ratio:.6g}")
    if c.nearest_divider is not None and c.nearest_hz is not None and c.error_ppm is not None:
        text += (f"; the nearest achievable rate is {_hz(c.nearest_hz, 7)} (/{c.nearest_divider}, "
                 f"{_ppm(c.error_ppm)}): use it, or a clock that divides to {_hz(c.target_hz, 7)}")
    else:
        text += "; no allowed divider exists: change the allowed dividers or the clock"
    return text


@system_rule(
    "clock-divider",
    "error",
    "Rate not derivable from its clock",
    """A converter's rate comes from its clock by an integer divider: fs = f_clock / d, with d
    allowed by the clock's dividers or divider_range. A delta-sigma converter with a modulator_rate
    derives its output rate as f_mod / OSR, OSR one of its oversampling_ratios, and its modulator
    clock is itself f_clock / N (common practice). A rate that is not reachable will in fact run at
    the nearest achievable rate; the message names it and its error in ppm = (f_near - fs) / fs x 1e6.""",
    tags=("shared",),
)
def clock_divider(analysis: SystemAnalysis) -> Iterator[Finding]:
    system = analysis.spec.system
    for c in analysis.budgets.clocks:
        if c.ok:
            continue
        conv = system.converters[c.converter]
        where = conv.source
        if c.subject == "rate":
            stated = [analysis.spec.channel(cid) for cid in c.channels
                      if "rate" in analysis.spec.channel(cid).conversion.stated]
            if stated:
                where = _rate_line(stated[0])
        yield _finding("clock-divider", "error", where, c.channels, _clock_message(c))


@system_rule(
    "link-capacity",
    "error",
    "Link load above its capacity or into its headroom",
    """Each channel puts fs x container bits on its link (image channels: frame rate x pixels x
    container bits); the link adds its protocol overhead: load = sum(fs_i C_i) x (1 + overhead).
    Above the raw capacity the data cannot flow (error); above capacity x (1 - headroom) it eats
    the margin the link keeps free (warning). Lower rates or containers, or move channels to
    another link.""",
    tags=("shared",),
)
def link_capacity(analysis: SystemAnalysis) -> Iterator[Finding]:
    system = analysis.spec.system
    for lk in analysis.budgets.links:
        if not beyond(lk.load_bps, lk.usable_bps):
            continue
        over_raw = beyond(lk.load_bps, lk.capacity_bps)
        excess = lk.load_bps - (lk.capacity_bps if over_raw else lk.usable_bps)
        limit = (f"its capacity {_bps(lk.capacity_bps)}" if over_raw else
                 f"the {format_percent(lk.limit)} of capacity it may use ({_bps(lk.usable_bps)}, "
                 f"{format_percent(1 - lk.limit)} headroom)")
        yield _finding(
            "link-capacity", "error" if over_raw else "warning", system.links[lk.id].source, lk.channels,
            f"link '{lk.id}' would carry {_bps(lk.load_bps)} ({_bps(lk.data_rate_bps)} of samples plus overhead), "
            f"{format_percent(lk.utilisation)} of capacity, above {limit}; shed at least "
            f"{_bps(excess)} (lower rates or containers, or move channels to another link)")


@system_rule(
    "storage-capacity",
    "error",
    "Store too small for one recording",
    """A store receives the sample streams of every link recording into it for the whole
    record_duration: bytes = sum(fs_i C_i) x T / 8. It must hold them; the time it can actually
    hold is T_max = 8 x capacity / sum(fs_i C_i). Shorten the recording, lower rates, or add
    capacity.""",
    tags=("shared",),
)
def storage_capacity(analysis: SystemAnalysis) -> Iterator[Finding]:
    system = analysis.spec.system
    for st in analysis.budgets.stores:
        if st.bytes_needed is None or not beyond(st.bytes_needed, st.capacity_bytes):
            continue
        channels = [cid for lk in analysis.budgets.links if lk.store == st.id for cid in lk.channels]
        yield _finding(
            "storage-capacity", "error", system.stores[st.id].source, channels,
            f"store '{st.id}' needs {format_quantity(st.bytes_needed, 'B')} for a "
            f"{_duration(st.record_duration_s or 0.0)} recording at {_bps(st.stream_bps)}, "
            f"{format_percent(st.utilisation or 0.0)} of its {format_quantity(st.capacity_bytes, 'B')}; it holds "
            f"{_duration(st.holding_time_s)}: shorten record_duration to that, or add "
            f"{format_quantity(st.bytes_needed - st.capacity_bytes, 'B')}")


@system_rule(
    "group-skew",
    "error",
    "Matched channels drift apart at the band edge",
    """Channels in one group must stay time-aligned. Their relative phase at the group's band edge
    f is the exact difference of their analog filters' phase responses, phi_a(f) - phi_b(f) (not the
    DC delay difference, which under-reads near a filter's corner), plus 2 pi f times the difference
    of their multiplexer scan skews (a channel sampled t later records a sine leading by 2 pi f t,
    so a later slot offsets a filter's lag). The spread over the members must not exceed the group's phase limit,
    nor, as time (spread / 2 pi f), its skew limit. Give the members identical filters, put them on
    a simultaneous converter, or relax the limit.""",
    tags=("shared",),
)
def group_skew(analysis: SystemAnalysis) -> Iterator[Finding]:
    system = analysis.spec.system
    for g in analysis.budgets.groups:
        if g.f_hz is None or len(g.members) < 2:
            continue
        worst = max(g.phases_rad, key=lambda c: g.phases_rad[c])
        best = min(g.phases_rad, key=lambda c: g.phases_rad[c])
        over = []
        if g.limit_phase_rad is not None and beyond(g.phase_error_rad, g.limit_phase_rad):
            over.append(f"phase limit {_deg(g.limit_phase_rad)}")
        if g.limit_skew_s is not None and beyond(g.skew_s, g.limit_skew_s):
            over.append(f"skew limit {format_quantity(g.limit_skew_s, 's')}")
        if not over:
            continue
        yield _finding(
            "group-skew", "error", system.groups[g.id].source, g.members,
            f"group '{g.id}': {worst} and {best} differ by {_deg(g.phase_error_rad)} at {_hz(g.f_hz)} "
            f"({format_quantity(g.skew_s, 's')}; the DC-delay estimate reads {_deg(g.dc_estimate_rad)}), over the "
            f"{' and '.join(over)}; give the members identical filters and simultaneous sampling, or relax the limit")


@channel_rule(
    "stated-figure-mismatch",
    "warning",
    "A figure stated in the spec disagrees with the computed one",
    """Where a spec states a derived figure ([stated] data_rate, lsb), it must agree with what
    specfold computes from the requirement to within 1 %: |stated - computed| / computed <= 0.01.
    A stated data rate may be either of the two a channel has: in containers, fs x container bits
    (image: frame rate x pixels x container bits), or packed, fs x bits; the message says which one
    it matched or how far it is from both. The LSB is FSR / 2^N. Correct the stated figure, or the
    settings it was derived from.""",
    kinds=("input", "output", "image"),
)
def stated_figure_mismatch(result: ChannelResult, system: System) -> Iterator[Hit]:
    stated, b = result.channel.stated, result.budget
    if b is None:
        return
    said = stated.data_rate_bps
    if said is not None and stated_rate_basis(said, b.data_rate_bps, b.payload_rate_bps) is None:
        near = min((b.data_rate_bps, "in containers"), (b.payload_rate_bps, "packed"),
                   key=lambda c: abs(said - c[0]) / c[0] if c[0] else math.inf)
        err = (said - near[0]) / near[0] if near[0] else math.inf
        yield Hit(f"stated data rate {format_quantity(said, 'bit/s')} matches neither computed one: "
                  f"{format_quantity(b.data_rate_bps, 'bit/s')} in containers, "
                  f"{format_quantity(b.payload_rate_bps, 'bit/s')} packed (nearest: {near[1]}, "
                  f"{'+' if err > 0 else ''}{format_percent(err)}); state one of them, or correct the settings it "
                  "was derived from", "stated.data_rate")
    lsb, computed = stated.lsb_volts, b.lsb_volts
    if lsb is not None and computed is not None and computed != 0:
        err = (lsb - computed) / computed
        if beyond(abs(err), STATED_TOLERANCE):
            yield Hit(f"stated LSB {format_quantity(lsb, 'V')} differs from the computed "
                      f"{format_quantity(computed, 'V')} by {'+' if err > 0 else ''}{format_percent(err)}; state "
                      f"{format_quantity(computed, 'V')}, or correct the settings it was derived from", "stated.lsb")


@system_rule(
    "stale-waiver",
    "warning",
    "Waiver that matches no finding",
    """A [[waiver]] accepts one rule's finding on its channel. When that rule no longer finds anything
    there (the spec was fixed, or the rule id is misspelt), the waiver is stale: remove it so that it
    cannot hide a future finding. A waiver whose `until` revision has been reached lapses: the finding
    counts again. Reported after every other rule has run.""",
)
def stale_waiver(analysis: SystemAnalysis) -> Iterator[Finding]:
    # Needs every other rule's findings: computed by rules.run_rules through stale_waivers().
    return iter(())


def stale_waivers(analysis: SystemAnalysis, used: set[tuple[str, int]], known_rules: set[str]) -> list[Finding]:
    """A stale-waiver finding for each waiver not in ``used`` ((channel id, waiver index) pairs)."""
    out = []
    for r in analysis.channels:
        ch = r.channel
        for i, w in enumerate(ch.waivers):
            if (ch.id, i) in used:
                continue
            why = "" if w.rule in known_rules else f" ('{w.rule}' is not a rule of this version of specfold)"
            out.append(Finding("stale-waiver", "warning", (ch.id,), ch.source.file, max(w.line, 1),
                               f"waiver for '{w.rule}' matches no finding on {ch.id}{why}; remove it, or correct "
                               "its rule id"))
    return out
