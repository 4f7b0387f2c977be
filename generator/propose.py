"""Design assistant: the least costly compliant sample rate and anti-aliasing filter per channel.

For a channel, the search enumerates what the hardware can really do:

- sample rates: the converter's clock divided by an allowed integer (``Clock.allows``), or on a
  delta-sigma converter with a modulator rate, f_mod / OSR for each allowed oversampling ratio;
  never above ``max_rate``; on a simultaneous converter shared with other channels, only the rate
  those channels use (one rate per simultaneous converter);
- filters: each family of :data:`generator.dsp.filters.FAMILIES` at orders 1..:data:`MAX_ORDER`,
  its corner placed so the loss at the band top equals the allowed flatness (the most rejection
  that flatness leaves), rounded up to four significant digits so the written value still meets it.

Each candidate is checked by re-analysing the channel with the candidate applied
(``dataclasses.replace``) and running the per-channel sampling and amplitude rules; the best
candidates, in the order of the objective, are then kept only when the shared constraints
(converter throughput, shared rate, clock dividers, link, store, group skew) get no new finding
with the candidate in place.  That check (:class:`IncrementalCheck`) recomputes only the budgets
of the resources the channel reaches (its converter and clock, its link and store, its group):
thousands of flagged channels cost no more each than a handful.  For one filter shape, a higher
rate only adds data, so per family and order only the least rate that passes is kept: rates are
tried in ascending order from the least the filter could possibly work at.

Objective (default): least data rate, then least filter order, then least group delay at DC.
Pure: no printing and no file access; :mod:`generator.edit` turns a proposal into a file's new text.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, replace
from functools import lru_cache
from typing import Protocol

from .analysis import ChannelResult, SystemAnalysis, analyze, analyze_channel
from .analysis.budgets import BudgetIndex, Budgets, Reach
from .dsp import filters as flt
from .model import Channel, Converter, Filter, Spec, id_key, key_default
from .quantities import format_quantity
from .rules import Finding, run_rules, tagged

MAX_ORDER = 12
"""Highest filter order proposed: beyond about a dozen poles an analog filter's component
tolerances dominate (common practice)."""

MAX_STAGE_Q = 20.0
"""Highest stage Q proposed: an active second-order stage above a Q of about 20 is too sensitive
to component tolerances to build (common practice, from memory)."""

RATES_PER_FILTER = 48
"""How many allowed rates above a filter's least possible rate are tried before giving up on it."""

SAMPLING_RULES = tagged("sampling")
AMPLITUDE_RULES = tagged("amplitude")
TARGET_RULES = SAMPLING_RULES + AMPLITUDE_RULES
"""The rules a design of an input is checked against."""
FIXED_BY_OTHER_MEANS = tuple(r for r in TARGET_RULES if r in tagged("gain-or-bits"))
"""Target rules whose outcome no rate or filter can change (gain, bits, full scale, jitter)."""
SHARED_RULES = tagged("shared")

CRITERIA = ("rate", "order", "delay")
DEFAULT_PREFERENCE = CRITERIA


@dataclass(frozen=True)
class Design:
    """One feasible rate and filter for a channel."""

    rate_hz: float
    rate_origin: str  # "24.576 MHz / 512"
    family: str
    order: int
    corner_hz: float
    ripple_db: float
    stopband_db: float
    data_rate_bps: float
    group_delay_s: float
    droop_db: float
    alias_db: float  # the channel's alias rejection with this design (least over every fold band)
    alias_edge: str  # where that least rejection lies, in words

    def as_filter(self) -> flt.AnalogFilter:
        return flt.design(self.family, self.order, self.corner_hz, self.ripple_db, self.stopband_db)

    def key(self, prefer: Sequence[str]) -> tuple[float, ...]:
        values = {"rate": self.data_rate_bps, "order": float(self.order), "delay": self.group_delay_s}
        return (*(values[c] for c in prefer), float(flt.FAMILIES.index(self.family)))

    def explain(self) -> str:
        """'48 kS/s from 24.576 MHz / 512; 6th-order butterworth at 8.2 kHz: 91 dB at the first alias, ...'"""
        return (f"{_rate_words(self.rate_hz)} from {self.rate_origin}; {_ordinal(self.order)}-order {self.family} at "
                f"{format_quantity(self.corner_hz, 'Hz')}: aliases rejected by {self.alias_db:.1f} dB (least at "
                f"{self.alias_edge}), "
                f"{self.droop_db:.2g} dB droop")


@dataclass(frozen=True)
class Proposal:
    """What the search found for one channel."""

    channel_id: str
    file: str
    design: Design | None
    explanation: str  # one line: the choice, or why there is none
    unfixable: tuple[str, ...] = ()  # requirements no rate or filter can meet, with the shortfall
    edits: tuple[tuple[str, str | None], ...] = ()  # ("conversion.rate", '"48 kS/s"'); None: remove the key
    fixes: tuple[str, ...] = ()  # rules with findings now that the design clears
    stages: tuple[flt.Stage, ...] = ()


def _ordinal(n: int) -> str:
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"


def _rate_words(rate: float) -> str:
    return format_quantity(rate, "Hz", 7).replace("Hz", "S/s")


def _exact_text(value: float, unit: str) -> str:
    """A value written so the loader reads it back to 1e-10: '48 kS/s', '26.03 Hz'."""
    prefixes = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""))
    for scale, prefix in prefixes:
        if abs(value) >= scale:
            return f"{value / scale:.10g} {prefix}{unit}"
    return f"{value:.10g} {unit}"


def round_up(value: float, digits: int = 4) -> float:
    """``value`` rounded up to ``digits`` significant digits (so a corner rounded this way loses no flatness)."""
    if value <= 0 or not math.isfinite(value):
        return value
    exp = math.floor(math.log10(value)) - digits + 1
    scaled = value / 10.0**exp
    up = math.ceil(scaled - 1e-9)
    return float(f"{up * 10.0**exp:.{digits}g}") if up < 10**digits else float(f"{10.0 ** (exp + digits):.{digits}g}")


# ------------------------------------------------------------------------------------ rates


def _others_rates(spec: Spec, channel: Channel, conv: Converter) -> set[float]:
    return {c.conversion.rate for c in spec.channels
            if c.id != channel.id and c.conversion.converter == conv.id and c.conversion.rate}


def allowed_rates(spec: Spec, channel: Channel, lowest: float) -> Iterator[tuple[float, str]]:
    """Rates the channel's converter can produce, ascending from ``lowest``, with how each is made.

    Clock / d for each allowed integer d (largest d first), or f_mod / OSR on a delta-sigma
    converter with a modulator rate; capped at ``max_rate``.  On a simultaneous converter with
    other channels only their common rate qualifies.  A converter without a clock yields the
    least rate itself rounded up to four significant digits.
    """
    cid = channel.conversion.converter
    conv = spec.system.converters.get(cid) if cid else None
    if conv is None:
        return
    top = conv.max_rate
    shared = _others_rates(spec, channel, conv) if conv.sampling == "simultaneous" else set()
    clock = spec.system.clocks.get(conv.clock) if conv.clock else None
    candidates: Iterator[tuple[float, str]]
    if conv.is_delta_sigma and conv.modulator_rate is not None and conv.oversampling_ratios:
        f_mod = conv.modulator_rate
        candidates = iter(sorted((f_mod / r, f"{format_quantity(f_mod, 'Hz', 7)} / {r}")
                                 for r in conv.oversampling_ratios))
    elif clock is not None:
        candidates = _clock_rates(clock.frequency, clock.dividers, clock.divider_range, lowest)
    else:
        rate = round_up(max(lowest, 1e-3))
        candidates = iter([(rate, "a free-running rate")])
    for rate, origin in candidates:
        if rate < lowest * (1 - 1e-12):
            continue
        if rate > top * (1 + 1e-12):
            return
        if shared and not any(math.isclose(rate, r, rel_tol=1e-9) for r in shared):
            continue
        yield rate, origin


def _clock_rates(f_clk: float, dividers: tuple[int, ...], divider_range: tuple[int, int] | None,
                 lowest: float) -> Iterator[tuple[float, str]]:
    lo_d, hi_d = divider_range if divider_range is not None else (1, 2**40)
    d_max = min(hi_d, math.floor(f_clk / lowest * (1 + 1e-12))) if lowest > 0 else hi_d
    clk = format_quantity(f_clk, "Hz", 7)
    if dividers:
        for d in sorted((d for d in dividers if lo_d <= d <= d_max), reverse=True):
            yield f_clk / d, f"{clk} / {d}"
        return
    for d in range(d_max, max(lo_d, 1) - 1, -1):
        yield f_clk / d, f"{clk} / {d}"


# ------------------------------------------------------------------------------------ filters


@lru_cache(maxsize=4096)
def shaped_filter(family: str, order: int, f_high: float, flatness_db: float,
                  stopband_db: float) -> flt.AnalogFilter | None:
    """``family`` of ``order`` with its corner set to lose exactly the flatness at ``f_high``, rounded up.

    chebyshev1 and elliptic get a ripple equal to the flatness and their ripple edge at f_high;
    butterworth, bessel and chebyshev2 are solved on their monotonic passband
    (:func:`generator.dsp.filters.corner_for_droop`).  None when the family cannot meet the
    flatness or a stage's Q would exceed :data:`MAX_STAGE_Q`.
    """
    ripple = flatness_db if family in ("chebyshev1", "elliptic") else key_default("filter.ripple")
    stop = stopband_db if family in ("chebyshev2", "elliptic") else key_default("filter.stopband_attenuation")
    if family == "elliptic" and stop <= ripple:
        return None
    try:
        proto = flt.design(family, order, 1.0, ripple, stop)
    except ValueError:
        return None
    corner = flt.corner_for_droop(proto, f_high, flatness_db)
    if corner is None:
        return None
    filt = flt.design(family, order, round_up(corner), ripple, stop)
    if any(s.q is not None and s.q > MAX_STAGE_Q for s in flt.stages(filt)):
        return None
    return filt


def _stopband_for(need_db: float) -> float:
    """Stopband attenuation for chebyshev2 and elliptic: 1 dB over the need, at least 20 dB (common practice)."""
    return float(max(math.ceil(need_db) + 1, 20))


# ------------------------------------------------------------------------------------ checks


def with_design(channel: Channel, rate: float, filt: flt.AnalogFilter | None) -> Channel:
    """The channel with the rate and filter applied (as if written in its file)."""
    conv = replace(channel.conversion, rate=rate, stated=channel.conversion.stated | {"rate"})
    new_filter = channel.filter if filt is None else Filter(filt.family, filt.order, filt.corner_hz,
                                                             filt.ripple_db, filt.stopband_db)
    return replace(channel, conversion=conv, filter=new_filter)


def replace_channel(spec: Spec, channel: Channel) -> Spec:
    return replace(spec, channels=tuple(channel if c.id == channel.id else c for c in spec.channels))


def channel_findings(spec: Spec, channel: Channel, rules: Sequence[str] = TARGET_RULES) -> list[Finding]:
    """Unwaived findings of ``rules`` on ``channel`` alone, with ``channel`` placed in ``spec``.

    Per-channel analysis and channel rules read only the channel and ``spec.system`` (and waivers
    from the channel's own result), so the channel stands alone in the spec here: building the
    whole channel tuple again for every candidate would make proposals quadratic in system size."""
    spec2 = replace(spec, channels=(channel,))
    result = analyze_channel(channel, spec2)
    return [f for f in run_rules(SystemAnalysis(spec2, (result,)), only=rules) if not f.waived]


def _unwaived_counts(findings: Sequence[Finding]) -> dict[str, int]:
    counts: dict[str, int] = {}
    for f in findings:
        if not f.waived:
            counts[f.rule] = counts.get(f.rule, 0) + 1
    return counts


def _shared_counts(spec: Spec) -> dict[str, int]:
    """Unwaived findings per shared rule (they read the budgets, which :func:`analyze` computes at
    once; no channel's own figures are computed for them)."""
    return _unwaived_counts(run_rules(analyze(spec), only=SHARED_RULES))


def _new_shared(before: dict[str, int], after: dict[str, int]) -> list[str]:
    return sorted(r for r, n in after.items() if n > before.get(r, 0))


class SharedCheck(Protocol):
    """Which shared rules a candidate design breaks."""

    def breaks(self, candidate: Channel) -> list[str]:
        """Shared rules with more unwaived findings once ``candidate`` takes the place of the spec's
        channel of its id (same converter, link and group; another rate or filter), sorted."""
        ...


class WholeSystemCheck:
    """The reference check: per candidate, the whole spec is analysed again and every shared rule
    run over everything.  Its cost grows with the system; :class:`IncrementalCheck` gives the same
    verdicts (the tests compare them)."""

    def __init__(self, spec: Spec) -> None:
        self.spec = spec
        self.before = _shared_counts(spec)

    def breaks(self, candidate: Channel) -> list[str]:
        return _new_shared(self.before, _shared_counts(replace_channel(self.spec, candidate)))


class IncrementalCheck:
    """Shared rules run only on the resources the candidate's channel reaches
    (:meth:`generator.analysis.budgets.BudgetIndex.reach`), their budgets recomputed with the
    candidate in place and compared with the same resources as they are.

    Every other resource keeps its budget and so its findings (waivers belong to the channels a
    finding names, which do not change), so a rule has more findings over the whole system exactly
    when it has more over the reach: the verdicts of :class:`WholeSystemCheck`, at the cost of the
    few resources one channel touches.  The rules run unchanged, on a :class:`SystemAnalysis` whose
    spec holds the reach's channels and whose budgets hold the reach's resources."""

    def __init__(self, spec: Spec, budgets: Budgets | None = None) -> None:
        self.index = BudgetIndex(spec, budgets)
        self._last: tuple[Reach, tuple[Channel, ...], dict[str, int]] | None = None

    def _analysis(self, channels: tuple[Channel, ...], budgets: Budgets) -> SystemAnalysis:
        spec = replace(self.index.spec, channels=channels)
        return SystemAnalysis(spec, tuple(ChannelResult(ch, spec.system) for ch in channels), budgets)

    def _before(self, channel_id: str) -> tuple[Reach, tuple[Channel, ...], dict[str, int]]:
        if self._last is None or self._last[0].channel != channel_id:  # candidates come channel by channel
            reach = self.index.reach(channel_id)
            members = tuple(self.index.spec.channel(cid) for cid in reach.channels)
            found = run_rules(self._analysis(members, self.index.within(reach)), only=SHARED_RULES)
            self._last = (reach, members, _unwaived_counts(found))
        return self._last

    def breaks(self, candidate: Channel) -> list[str]:
        """As :meth:`SharedCheck.breaks`; ValueError when ``candidate`` names another converter, link
        or group than the spec's channel of its id (its reach would be another)."""
        old = self.index.spec.channel(candidate.id)
        if ((old.conversion.converter, old.conversion.link, old.match)
                != (candidate.conversion.converter, candidate.conversion.link, candidate.match)):
            raise ValueError(f"{candidate.id}: a candidate keeps the channel's converter, link and group")
        reach, members, before = self._before(candidate.id)
        placed = tuple(candidate if ch.id == candidate.id else ch for ch in members)
        found = run_rules(self._analysis(placed, self.index.rebudget(reach, candidate)), only=SHARED_RULES)
        return _new_shared(before, _unwaived_counts(found))


# ------------------------------------------------------------------------------------ search


def candidates(spec: Spec, channel: Channel, rules: Sequence[str],
               max_order: int = MAX_ORDER) -> list[Design]:
    """Per family and order, the least allowed rate at which the channel passes ``rules``."""
    base = analyze_channel(channel, spec).sampling
    band = channel.signal.band
    if base is None or band is None or channel.kind != "input":
        return []
    f_high = band[1]
    need = base.required_alias_rejection_db or 0.0
    flat = channel.signal.flatness_db
    cid = channel.conversion.converter
    conv = spec.system.converters.get(cid) if cid else None
    container = channel.conversion.container_bits or channel.conversion.bits or 1
    delta_sigma = conv is not None and conv.is_delta_sigma
    out: list[Design] = []
    checked: dict[tuple[float, str, int], bool] = {}
    for family in flt.FAMILIES:
        for order in range(1, max_order + 1):
            filt = shaped_filter(family, order, f_high, flat, _stopband_for(need))
            if filt is None:
                continue
            lowest = 2 * f_high
            if not delta_sigma:
                f_need = flt.frequency_for_attenuation(filt, need)
                if f_need is None:
                    continue
                lowest = max(lowest, f_need + f_high)
            for i, (rate, origin) in enumerate(allowed_rates(spec, channel, lowest)):
                if i >= RATES_PER_FILTER:
                    break
                key = (rate, family, order)
                if key not in checked:
                    checked[key] = not channel_findings(spec, with_design(channel, rate, filt), rules)
                if not checked[key]:
                    continue
                s = analyze_channel(with_design(channel, rate, filt), spec).sampling
                rejection = s.alias_rejection_db if s is not None and s.alias_rejection_db is not None else 0.0
                worst = s.alias_worst_hz if s is not None else None
                out.append(Design(
                    rate_hz=rate, rate_origin=origin, family=family, order=order, corner_hz=filt.corner_hz,
                    ripple_db=filt.ripple_db, stopband_db=filt.stopband_db, data_rate_bps=rate * container,
                    group_delay_s=flt.group_delay_s(filt, 0.0), droop_db=flt.attenuation_db(filt, f_high),
                    alias_db=rejection,
                    alias_edge=("frequencies growing without bound" if worst is None or math.isinf(worst)
                                else format_quantity(worst, "Hz"))))
                break
    return out


def _edits(channel: Channel, d: Design) -> tuple[tuple[str, str | None], ...]:
    out: list[tuple[str, str | None]] = []
    if channel.conversion.rate is None or not math.isclose(channel.conversion.rate, d.rate_hz, rel_tol=1e-9):
        out.append(("conversion.rate", f'"{_exact_text(d.rate_hz, "S/s")}"'))
    cur = channel.filter
    if cur is None or cur.family != d.family:
        out.append(("filter.family", f'"{d.family}"'))
    if cur is None or cur.order != d.order:
        out.append(("filter.order", str(d.order)))
    if cur is None or cur.corner is None or not math.isclose(cur.corner, d.corner_hz, rel_tol=1e-9):
        out.append(("filter.corner", f'"{_exact_text(d.corner_hz, "Hz")}"'))
    if d.family in ("chebyshev1", "elliptic") and (cur is None or cur.ripple_db != d.ripple_db):
        out.append(("filter.ripple", f'"{d.ripple_db:.10g} dB"'))
    if d.family in ("chebyshev2", "elliptic") and (cur is None or cur.stopband_db != d.stopband_db):
        out.append(("filter.stopband_attenuation", f'"{d.stopband_db:.10g} dB"'))
    # a key the new family has no use for would make the file refuse to load: it goes
    if d.family not in ("chebyshev1", "elliptic") and "filter.ripple" in channel.lines:
        out.append(("filter.ripple", None))
    if d.family not in ("chebyshev2", "elliptic") and "filter.stopband_attenuation" in channel.lines:
        out.append(("filter.stopband_attenuation", None))
    return tuple(out)


def _why_none(spec: Spec, channel: Channel, base: ChannelResult, sampling_ok: list[Design]) -> list[str]:
    """Sentences naming the requirement that rules out every design, and by how much."""
    s = base.sampling
    band = channel.signal.band
    cid = channel.conversion.converter
    conv = spec.system.converters.get(cid) if cid else None
    reasons: list[str] = []
    if conv is None or s is None or band is None:
        return ["no converter or band to search over"]
    f_high = band[1]
    if sampling_ok:
        a = analyze_channel(with_design(channel, sampling_ok[0].rate_hz, sampling_ok[0].as_filter()), spec).amplitude
        req = channel.signal.snr_db
        if a is not None and a.total_snr_db is not None and req is not None and a.total_snr_db < req:
            short = req - a.total_snr_db
            reasons.append(f"the required {req:.1f} dB SNR exceeds the {a.total_snr_db:.1f} dB that "
                           f"{a.bits} bits, jitter and sensor noise reach at this peak by {short:.1f} dB")
        return reasons or ["no design passes the amplitude rules"]
    rates = list(allowed_rates(spec, channel, 2 * f_high))
    if not rates:
        every = list(allowed_rates(spec, channel, 0.0))
        shared = _others_rates(spec, channel, conv) if conv.sampling == "simultaneous" else set()
        fastest = max((r for r, _ in every), default=0.0)
        what = (f"the rate {_rate_words(max(shared))} it shares on simultaneous converter '{conv.id}'" if shared
                else f"the fastest rate '{conv.id}' can produce ({_rate_words(fastest)}, max_rate "
                     f"{_rate_words(conv.max_rate)})")
        return [f"the band top {format_quantity(f_high, 'Hz')} needs at least {_rate_words(2 * f_high)}; "
                f"{what} falls short by {_rate_words(2 * f_high - (max(shared) if shared else fastest))}"]
    need = s.required_alias_rejection_db or 0.0
    top_rate = rates[-1][0]
    best = 0.0
    for family in flt.FAMILIES:
        for order in range(1, MAX_ORDER + 1):
            filt = shaped_filter(family, order, f_high, channel.signal.flatness_db, _stopband_for(need))
            if filt is None:
                continue
            sr = analyze_channel(with_design(channel, top_rate, filt), spec).sampling
            if sr is not None and sr.alias_rejection_db is not None:
                best = max(best, sr.alias_rejection_db)
    if best < need:
        reasons.append(f"the required {need:.1f} dB of alias rejection exceeds the {best:.1f} dB that a filter of "
                       f"up to {MAX_ORDER} poles gives at {_rate_words(top_rate)} (the fastest allowed rate) "
                       f"by {need - best:.1f} dB")
    else:
        reasons.append("no allowed rate and filter of up to "
                       f"{MAX_ORDER} poles clears every sampling rule (declared tones fold into the band)")
    return reasons


def propose_channel(spec: Spec, channel: Channel, prefer: Sequence[str] = DEFAULT_PREFERENCE,
                    check: SharedCheck | None = None) -> Proposal:
    """The best design for one channel under ``prefer``, checked against the shared constraints
    by ``check`` (default: an :class:`IncrementalCheck` of ``spec``)."""
    base_findings = channel_findings(spec, channel)
    fixed_elsewhere = sorted({f.rule for f in base_findings if f.rule in FIXED_BY_OTHER_MEANS})
    unfixable = [f"{f.rule}: {f.message} (not a matter of rate or filter)" for f in base_findings
                 if f.rule in FIXED_BY_OTHER_MEANS]
    rules = [r for r in TARGET_RULES if r not in fixed_elsewhere]
    if channel.kind != "input" or channel.signal.band is None:
        return Proposal(channel.id, channel.source.file, None, "not an input channel with a band: nothing to propose",
                        tuple(unfixable))
    found = candidates(spec, channel, rules)
    if not found:
        sampling_ok = candidates(spec, channel, SAMPLING_RULES) if any(r in rules for r in AMPLITUDE_RULES) else []
        reasons = _why_none(spec, channel, analyze_channel(channel, spec), sampling_ok)
        if not sampling_ok:
            return Proposal(channel.id, channel.source.file, None, "no design: " + "; ".join(reasons),
                            tuple(unfixable + reasons))
        # The sampling rules can still be met: propose that, and say what stays out of reach.
        found = sampling_ok
        unfixable.extend(reasons)
    shared = check if check is not None else IncrementalCheck(spec)
    rejected: list[str] = []
    for d in sorted(found, key=lambda x: x.key(prefer)):
        new = shared.breaks(with_design(channel, d.rate_hz, d.as_filter()))
        if new:
            rejected.append(f"{_rate_words(d.rate_hz)} with a {_ordinal(d.order)}-order {d.family} "
                            f"breaks {', '.join(new)}")
            if len(rejected) >= 8:
                break
            continue
        after = {f.rule for f in channel_findings(spec, with_design(channel, d.rate_hz, d.as_filter()))}
        fixes = tuple(sorted({f.rule for f in base_findings} - after))
        return Proposal(channel.id, channel.source.file, d, d.explain(), tuple(unfixable), _edits(channel, d), fixes,
                        flt.stages(d.as_filter()))
    why = "no design keeps the shared constraints: " + "; ".join(rejected)
    return Proposal(channel.id, channel.source.file, None, why, tuple([*unfixable, why]))


def flagged_channels(spec: Spec, findings: Sequence[Finding] | None = None) -> list[str]:
    """Channels with an unwaived sampling or amplitude error or warning that a rate or filter can affect.

    Findings only gain, bits, full scale or jitter can clear (:data:`FIXED_BY_OTHER_MEANS`) do not
    make a channel a candidate: no rate or filter would fix them.
    """
    if findings is None:
        findings = run_rules(analyze(spec), only=TARGET_RULES)
    ids = {c for f in findings if f.rule in TARGET_RULES and f.rule not in FIXED_BY_OTHER_MEANS
           and not f.waived and f.severity in ("error", "warning") for c in f.channels}
    return sorted(ids, key=id_key)


def propose(spec: Spec, channel_ids: Sequence[str] | None = None,
            prefer: Sequence[str] = DEFAULT_PREFERENCE, whole_system: bool = False) -> list[Proposal]:
    """Proposals for the named channels (default: :func:`flagged_channels`), in id order.

    The shared constraints are checked by an :class:`IncrementalCheck`, its baseline budgets
    computed once here; ``whole_system`` uses the :class:`WholeSystemCheck` instead (the slow
    reference, for the tests).

    Raises KeyError for an unknown channel id; ValueError for an unknown criterion in ``prefer``.
    """
    bad = [c for c in prefer if c not in CRITERIA]
    if bad or len(set(prefer)) != len(prefer):
        raise ValueError(f"preference {','.join(prefer)}: use each of {', '.join(CRITERIA)} at most once")
    order = [*prefer, *(c for c in CRITERIA if c not in prefer)]
    ids = list(channel_ids) if channel_ids else flagged_channels(spec)
    check: SharedCheck = WholeSystemCheck(spec) if whole_system else IncrementalCheck(spec)
    return [propose_channel(spec, spec.channel(cid), order, check) for cid in ids]


def apply_proposals(spec: Spec, proposals: Sequence[Proposal]) -> Spec:
    """The spec with every proposal's design applied (for checking the result)."""
    for p in proposals:
        if p.design is not None:
            spec = replace_channel(spec, with_design(spec.channel(p.channel_id), p.design.rate_hz,
                                                     p.design.as_filter()))
    return spec


def still_open(spec: Spec, proposals: Sequence[Proposal]) -> list[Finding]:
    """The findings a rate or filter could fix that remain on the proposals' channels in ``spec``
    (the tree with the proposals applied or written): what ``propose`` reports as left."""
    ids = {p.channel_id for p in proposals}
    return [f for f in run_rules(analyze(spec), only=TARGET_RULES)
            if not f.waived and f.severity in ("error", "warning") and ids & set(f.channels)
            and f.rule not in FIXED_BY_OTHER_MEANS]
