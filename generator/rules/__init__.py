"""Rules: one small function per check, registered with an id, severity and explanation.

A rule never raises on bad data: it returns findings.  Channel rules are written as
``fn(result, system) -> Iterable[Hit]``; the registry turns each hit into a located
:class:`Finding`.  System rules (budgets, groups) are ``fn(analysis) -> Iterable[Finding]``.

A channel rule sees one channel's result (its budget included) and system.toml, nothing else:
that is the contract which lets a build keep a channel's findings in its cache (they are taken
again only while the channel, its budget and system.toml are unchanged).  A check that needs other
channels is a system rule.
The site's rule reference and ``specfold rules`` are generated from :data:`RULES`.

To add a rule: write the function in the module of its concern, decorate it, and give
it a failing and a passing fixture in the tests.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Iterator, Mapping
from dataclasses import dataclass, replace

from ..analysis import ChannelResult, SystemAnalysis
from ..model import System

SEVERITIES = ("error", "warning", "info")
SEVERITY_RANK = {"error": 0, "warning": 1, "info": 2}


@dataclass(frozen=True)
class Finding:
    rule: str
    severity: str
    channels: tuple[str, ...]
    file: str
    line: int
    message: str
    waived: bool = False
    waiver_reason: str = ""

    def sort_key(self) -> tuple[str, int, int, str, str]:
        return (self.file, self.line, SEVERITY_RANK[self.severity], self.rule, self.message)


@dataclass(frozen=True)
class Hit:
    """One failure found by a channel rule: its message and the key it is about."""

    message: str
    path: str = ""  # "conversion.rate": the key whose line the finding points at
    severity: str | None = None  # overrides the rule's default


RELATIVE_TOLERANCE = 1e-9
"""How far apart two numbers must be before a rule calls one beyond the other: a value reached
through other units or another order of operations (100 g at 100 mV/g is 10.000000000000002 V)
is the same value.  Far below any tolerance a measurement or a data sheet states."""


def beyond(value: float, limit: float) -> bool:
    """Whether ``value`` exceeds ``limit`` by more than rounding: value - limit >
    RELATIVE_TOLERANCE x max(|value|, |limit|).  Every rule judges every threshold with this
    (or :func:`short_of`), so a value exactly at a limit passes however it was computed."""
    return value - limit > RELATIVE_TOLERANCE * max(abs(value), abs(limit))


def short_of(value: float, need: float) -> bool:
    """Whether ``value`` falls below ``need`` by more than rounding (:func:`beyond` mirrored)."""
    return beyond(need, value)


SystemCheck = Callable[[SystemAnalysis], Iterable[Finding]]
ChannelCheck = Callable[[ChannelResult, System], Iterable[Hit]]


TAGS = {
    "sampling": "about an input's rate, folding and anti-aliasing filter",
    "amplitude": "about a channel's range, bits and noise floor",
    "rate-or-filter": "a change of sample rate or analog filter can clear it",
    "gain-or-bits": "only the gain, bits, full scale or jitter can clear it: no rate or filter",
    "shared": "about hardware channels share: converters, clocks, links, stores, timing groups",
}
"""The words a rule may be tagged with, and what each says about it.  ``propose`` and the tests
select rules by tag (:func:`tagged`) rather than keeping lists of ids."""


@dataclass(frozen=True)
class Rule:
    id: str
    severity: str
    title: str
    explanation: str  # one paragraph, with the formula
    check: SystemCheck
    tags: frozenset[str] = frozenset()


RULES: dict[str, Rule] = {}


@dataclass(frozen=True)
class ChannelRule:
    """A rule checked on one channel at a time (see :func:`channel_rule`)."""

    id: str
    severity: str
    kinds: tuple[str, ...]
    fn: ChannelCheck

    def findings(self, result: ChannelResult, system: System) -> Iterator[Finding]:
        ch = result.channel
        if ch.kind not in self.kinds:
            return
        for hit in self.fn(result, system):
            line = ch.line_of(hit.path) if hit.path else 1
            yield Finding(self.id, hit.severity or self.severity, (ch.id,), ch.source.file, line, hit.message)


CHANNEL_RULES: dict[str, ChannelRule] = {}


def system_rule(rule_id: str, severity: str, title: str, explanation: str,
                tags: tuple[str, ...] = ()) -> Callable[[SystemCheck], SystemCheck]:
    """Register a rule that looks at the whole system; ``tags`` are words of :data:`TAGS`."""

    def register(fn: SystemCheck) -> SystemCheck:
        if rule_id in RULES:
            raise ValueError(f"rule {rule_id} registered twice")
        if severity not in SEVERITIES:
            raise ValueError(f"rule {rule_id}: unknown severity {severity}")
        unknown = sorted(set(tags) - set(TAGS))
        if unknown:
            raise ValueError(f"rule {rule_id}: unknown tags {', '.join(unknown)}")
        RULES[rule_id] = Rule(rule_id, severity, title, " ".join(explanation.split()), fn, frozenset(tags))
        return fn

    return register


def channel_rule(
    rule_id: str, severity: str, title: str, explanation: str, kinds: tuple[str, ...] = ("input",),
    tags: tuple[str, ...] = (),
) -> Callable[[ChannelCheck], ChannelCheck]:
    """Register a rule checked channel by channel, for channels of the given kinds."""

    def register(fn: ChannelCheck) -> ChannelCheck:
        rule = ChannelRule(rule_id, severity, kinds, fn)

        def check(analysis: SystemAnalysis) -> Iterable[Finding]:
            system = analysis.spec.system
            for result in analysis.channels:
                yield from rule.findings(result, system)

        system_rule(rule_id, severity, title, explanation, tags)(check)
        CHANNEL_RULES[rule_id] = rule
        return fn

    return register


def _load_rule_modules() -> None:
    # Imported for their registrations; the order here is the order of `specfold rules`.
    from . import amplitude, budgets, image, output, safety, sampling  # noqa: F401


def revision_key(revision: str) -> tuple[tuple[int, int | str], ...]:
    """Natural sort key of a revision: "B" < "C", "9" < "10", "1.2" < "1.10", case ignored."""
    return tuple((0, int(part)) if part.isdigit() else (1, part)
                 for part in re.findall(r"\d+|[^\d.\-_ ]+", revision.lower()))


def waiver_lapsed(until: str, revision: str) -> bool:
    """A waiver holds while the system revision sorts before ``until``; from that revision on it lapses.

    Either side empty: the waiver never lapses.  Revisions compare in natural order
    (:func:`revision_key`).
    """
    if not until or not revision:
        return False
    return revision_key(revision) >= revision_key(until)


def match_waivers(findings: Iterable[Finding], analysis: SystemAnalysis) -> tuple[list[Finding], set[tuple[str, int]]]:
    """Mark findings covered by a channel's ``[[waiver]]``; also return which waivers matched.

    A waiver matches a finding of its rule on any channel the finding names.  A lapsed waiver
    still counts as matched (it is not stale) but no longer waives: the finding's message says so.
    """
    by_id = analysis.by_id
    revision = analysis.spec.system.revision
    used: set[tuple[str, int]] = set()
    out = []
    for f in findings:
        lapsed_note = ""
        for cid in f.channels:
            result = by_id.get(cid)
            if result is None:
                continue
            hit = next(((i, w) for i, w in enumerate(result.channel.waivers) if w.rule == f.rule), None)
            if hit is None:
                continue
            i, waiver = hit
            used.add((cid, i))
            if waiver_lapsed(waiver.until, revision):
                lapsed_note = (f" (the waiver on {cid} lapsed at revision {waiver.until}; this is revision "
                               f"{revision}: renew it with a later `until`, or fix the finding)")
                continue
            f = replace(f, waived=True, waiver_reason=waiver.reason)
            break
        if not f.waived and lapsed_note:
            f = replace(f, message=f.message + lapsed_note)
        out.append(f)
    return out, used


def channel_rule_findings(result: ChannelResult, system: System) -> tuple[Finding, ...]:
    """Every channel rule's findings on one channel, before waivers, in registration order."""
    _load_rule_modules()
    return tuple(f for rule in CHANNEL_RULES.values() for f in rule.findings(result, system))


def channel_rule_table(analysis: SystemAnalysis,
                       kept: Mapping[str, tuple[Finding, ...]] | None = None) -> dict[str, tuple[Finding, ...]]:
    """:func:`channel_rule_findings` of every channel, by id in channel order; a channel in ``kept``
    (findings computed earlier for the same result and system.toml) takes those as they are."""
    system, known = analysis.spec.system, kept or {}
    return {r.channel.id: known[r.channel.id] if r.channel.id in known else channel_rule_findings(r, system)
            for r in analysis.channels}


def run_rules(analysis: SystemAnalysis, only: Iterable[str] | None = None,
              per_channel: Mapping[str, tuple[Finding, ...]] | None = None) -> list[Finding]:
    """Run every registered rule (or only the named ones); findings sorted by place.

    With every rule, the channel rules' findings come from :func:`channel_rule_table`, taking
    those in ``per_channel`` (by channel id) as they are.  ``stale-waiver`` runs last, on the other
    rules' findings, and only when every rule ran (with a subset, waivers of the rules left out
    would look stale).
    """
    _load_rule_modules()
    from .budgets import stale_waivers

    findings: list[Finding] = []
    if only is None:
        for rule in RULES.values():
            if rule.id not in CHANNEL_RULES:  # those run channel by channel, below
                findings.extend(rule.check(analysis))
        for kept in channel_rule_table(analysis, per_channel).values():
            findings.extend(kept)
    else:
        wanted = set(only)
        for rule in RULES.values():
            if rule.id in wanted:
                findings.extend(rule.check(analysis))
    marked, used = match_waivers(findings, analysis)
    if only is None:
        marked.extend(stale_waivers(analysis, used, set(RULES)))
    return sorted(marked, key=Finding.sort_key)


def all_rules() -> list[Rule]:
    """Every registered rule, in registration order."""
    _load_rule_modules()
    return list(RULES.values())


def tagged(*tags: str) -> tuple[str, ...]:
    """Ids of the rules carrying every one of ``tags``, in registration order."""
    unknown = sorted(set(tags) - set(TAGS))
    if unknown:
        raise ValueError(f"unknown tags {', '.join(unknown)}")
    return tuple(r.id for r in all_rules() if r.tags.issuperset(tags))


def by_channel(findings: Iterable[Finding]) -> dict[str, list[Finding]]:
    """Findings grouped by the channels they name, each channel's in the given order."""
    out: dict[str, list[Finding]] = {}
    for f in findings:
        for cid in f.channels:
            out.setdefault(cid, []).append(f)
    return out


def worst_status(findings: Iterable[Finding]) -> str:
    """ok | warning | error: the worst unwaived finding (info does not count)."""
    worst = "ok"
    for f in findings:
        if f.waived:
            continue
        if f.severity == "error":
            return "error"
        if f.severity == "warning":
            worst = "warning"
    return worst
