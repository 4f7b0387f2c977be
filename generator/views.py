"""View data for the site's pages: every number formatted, every link made, nothing left to compute.

Templates receive the frozen dataclasses built here and only lay them out.  Each builder is a
pure function of the analysis and the findings; :mod:`generator.site` renders and writes.

Links are relative to the page that shows them: a page at the site's top has ``root = ""``,
a channel page ``root = "../"``.  Channel page paths come from :func:`channel_paths`, which
maps ids to safe file names even if an id were to hold characters the loader rejects.
"""

from __future__ import annotations

import functools
import json
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import markdown
import nh3
from markupsafe import Markup

from .analysis import FIGURES, ChannelResult, FigureValue, SystemAnalysis
from .charts import channel_charts
from .edit import file_edits
from .model import Channel
from .propose import Proposal
from .quantities import format_in_unit, format_percent, format_quantity
from .report import counts
from .rules import SEVERITIES, SEVERITY_RANK, Finding, Rule, by_channel, worst_status

CAUTION_RULE = "caution"
"""Findings of this rule are shown in the channel's caution box rather than among its findings."""

SAFETY_DEFERRAL = (
    "specfold checks numbers only. Equipment ratings, isolation, interlocks and safe-work procedures "
    "are governed by local electrical codes, the machine's safety case and licensed practice."
)

NOT_COMPUTED = ""

TABLE_FIRST_ROWS = 100
"""Channel rows the overview writes as HTML; every row is also in its JSON block, and site.js shows
the rest on demand (in chunks of this size, all of them before printing).  Systems up to this size
get a complete table without JavaScript."""

# The column order of the overview's JSON rows; site.js reads the same order (ROW_FIELDS there).
ROW_FIELDS = ("id", "href", "title", "kind", "band", "band_sort", "rate", "rate_sort", "bits", "filter",
              "data_rate", "data_rate_sort", "status")

# nh3 settings for Markdown notes: the tags Markdown produces, http(s)/mailto links only.
_NOTE_TAGS = {
    "p", "br", "hr", "h1", "h2", "h3", "h4", "h5", "h6", "blockquote", "pre", "code", "em", "strong",
    "ul", "ol", "li", "a", "table", "thead", "tbody", "tr", "th", "td", "sub", "sup", "dl", "dt", "dd",
}  # fmt: skip
_NOTE_ATTRIBUTES = {"a": {"href", "title"}, "th": {"align"}, "td": {"align"}}
_NOTE_SCHEMES = {"http", "https", "mailto"}


# ---------------------------------------------------------------------------------------------
# View types
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Link:
    href: str
    text: str


@dataclass(frozen=True)
class Frame:
    """What every page shares: title, relative root, navigation, scripts to load."""

    title: str
    root: str
    nav: tuple[tuple[Link, bool], ...]  # (link, is the current page)
    system: str
    revision: str
    plotly: bool = False


@dataclass(frozen=True)
class FigureRow:
    key: str
    label: str
    value: str
    formula: str
    source: str


@dataclass(frozen=True)
class FindingView:
    rule: str
    rule_href: str
    severity: str
    message: str
    where: str  # "channels/ACC-1.md:12"
    waived: bool
    waiver_reason: str
    channels: tuple[Link, ...]


@dataclass(frozen=True)
class ChannelRow:
    id: str
    href: str
    title: str
    kind: str
    band: str
    band_sort: str
    rate: str
    rate_sort: str
    bits: str
    filter: str
    data_rate: str
    data_rate_sort: str
    status: str


@dataclass(frozen=True)
class Bar:
    """One utilisation bar: used against a limit (filled in once budgets are computed)."""

    label: str
    used: str
    limit: str
    percent: float  # 0..100+, width of the bar
    status: str  # ok | warning | error


@dataclass(frozen=True)
class BudgetItem:
    id: str
    anchor: str
    kind: str  # converter | link | store
    facts: tuple[tuple[str, str], ...]
    channels: tuple[Link, ...]
    bars: tuple[Bar, ...] = ()


@dataclass(frozen=True)
class ChartView:
    id: str
    title: str
    caption: str
    json: Markup


@dataclass(frozen=True)
class Caution:
    lines: tuple[str, ...]
    findings: tuple[FindingView, ...]
    deferral: str = SAFETY_DEFERRAL


@dataclass(frozen=True)
class ChannelSheet:
    """What a channel's page shows that follows from its file and system.toml alone: the build cache
    keeps its digest beside the channel's figures."""

    id: str
    title: str
    kind: str
    file: str
    measurand: str
    unit: str
    tags: tuple[str, ...]
    header: str
    figures: tuple[FigureRow, ...]
    notes: Markup
    charts: tuple[ChartView, ...]
    stages: tuple[StageRow, ...]
    safety: tuple[str, ...]  # the caution's lines from the channel's own [safety]


@dataclass(frozen=True)
class ChannelLive:
    """What a channel's page shows that other channels and system-wide checks decide: its status,
    its findings (its own and shared ones), its proposal, the page's frame."""

    frame: Frame
    status: str
    findings: tuple[FindingView, ...]
    cautions: tuple[FindingView, ...]
    proposal: ProposalView | None


@dataclass(frozen=True)
class ChannelPage:
    frame: Frame
    id: str
    title: str
    kind: str
    status: str
    file: str
    measurand: str
    unit: str
    tags: tuple[str, ...]
    header: str
    figures: tuple[FigureRow, ...]
    findings: tuple[FindingView, ...]
    caution: Caution | None
    notes: Markup
    charts: tuple[ChartView, ...]
    up: Link
    stages: tuple[StageRow, ...] = ()
    proposal: ProposalView | None = None


@dataclass(frozen=True)
class StageRow:
    """One stage of an analog filter's cascade, formatted."""

    number: int
    order: str  # "first" | "second"
    f0: str
    q: str  # "" for a first-order stage
    notch: str


@dataclass(frozen=True)
class ProposalView:
    """The design assistant's proposal beside the current design."""

    current: str
    proposed: str  # the one-line explanation (or why there is none)
    found: bool
    edits: tuple[tuple[str, str], ...]  # (key, new value or "(removed)")
    stages: tuple[StageRow, ...]
    left: tuple[str, ...]


@dataclass(frozen=True)
class Totals:
    channels: int
    by_kind: tuple[tuple[str, int], ...]
    findings: tuple[tuple[str, int], ...]
    extra: tuple[tuple[str, str], ...] = ()  # aggregate data rate, recording size, once computed


@dataclass(frozen=True)
class OverviewPage:
    frame: Frame
    description: str
    totals: Totals
    budgets: tuple[BudgetItem, ...]
    rows: tuple[ChannelRow, ...]
    kinds: tuple[str, ...]
    statuses: tuple[str, ...]
    rows_json: Markup  # every row, as JSON (rows_json)
    first_rows: int  # rows written as HTML


@dataclass(frozen=True)
class BudgetsPage:
    frame: Frame
    converters: tuple[BudgetItem, ...]
    links: tuple[BudgetItem, ...]
    stores: tuple[BudgetItem, ...]


@dataclass(frozen=True)
class FindingGroup:
    rule: str
    rule_href: str
    anchor: str
    severity: str
    title: str
    findings: tuple[FindingView, ...]


@dataclass(frozen=True)
class FindingsPage:
    frame: Frame
    groups: tuple[FindingGroup, ...]
    counts: tuple[tuple[str, int], ...]


@dataclass(frozen=True)
class RuleView:
    id: str
    anchor: str
    severity: str
    title: str
    explanation: str
    open_count: int
    waived_count: int
    findings_href: str


@dataclass(frozen=True)
class RulesPage:
    frame: Frame
    rules: tuple[RuleView, ...]


@dataclass(frozen=True)
class Sheet:
    id: str
    anchor: str
    title: str
    kind: str
    status: str
    file: str
    header: str
    figures: tuple[FigureRow, ...]
    findings: tuple[FindingView, ...]
    caution: Caution | None


@dataclass(frozen=True)
class BookPage:
    frame: Frame
    description: str
    totals: Totals | None  # None on one section of a split book (its index carries the totals)
    sheets: tuple[Sheet, ...]
    section: str = ""  # the section's label on a split book, "" for the whole book


@dataclass(frozen=True)
class BookSection:
    """One page of a split book: the channels of one converter, or of one kind without a converter."""

    path: str  # "book/<name>.html"
    label: str
    channels: tuple[int, ...]  # indices into the analysis' channels


@dataclass(frozen=True)
class SectionLink:
    href: str
    label: str
    channels: int
    status: str


@dataclass(frozen=True)
class BookIndexPage:
    frame: Frame
    description: str
    totals: Totals
    sections: tuple[SectionLink, ...]


@dataclass
class Context:
    """What every builder needs: the analysis, findings indexed by channel, page paths."""

    analysis: SystemAnalysis
    findings: list[Finding]
    paths: Mapping[str, str]  # channel id -> "channels/<file>.html"
    by_channel: dict[str, list[Finding]] = field(default_factory=dict)
    status: dict[str, str] = field(default_factory=dict)
    proposals: Mapping[str, Proposal] = field(default_factory=dict)  # channel id -> proposal, flagged channels
    proposals_deferred: int = 0  # flagged channels left to `specfold propose` (too many to design in a build)

    def __post_init__(self) -> None:
        self.by_channel.update(by_channel(self.findings))
        for r in self.analysis.channels:
            self.status[r.channel.id] = worst_status(self.by_channel.get(r.channel.id, ()))


# ---------------------------------------------------------------------------------------------
# Paths, anchors, navigation
# ---------------------------------------------------------------------------------------------

_UNSAFE = re.compile(r"[^A-Za-z0-9_.-]")


def slug(text: str) -> str:
    """A file-name and anchor-safe form of an id: never empty, never starting with a dot."""
    out = _UNSAFE.sub("_", text)
    if not out or out.startswith("."):
        out = "_" + out
    return out[:120]


def channel_paths(channel_ids: Sequence[str], folder: str = "channels") -> dict[str, str]:
    """Channel id -> page path under ``channels/``; distinct even on a case-blind file system."""
    out: dict[str, str] = {}
    taken: set[str] = set()
    for cid in channel_ids:
        base = slug(cid)
        name, n = base, 1
        while name.lower() in taken:
            n += 1
            name = f"{base}-{n}"
        taken.add(name.lower())
        out[cid] = f"{folder}/{name}.html"
    return out


PAGES: tuple[tuple[str, str], ...] = (
    ("index.html", "Overview"),
    ("budgets.html", "Budgets"),
    ("findings.html", "Findings"),
    ("rules.html", "Rules"),
    ("book.html", "Spec book"),
)


def _frame(ctx: Context, title: str, root: str, current: str, plotly: bool = False) -> Frame:
    system = ctx.analysis.spec.system
    nav = tuple((Link(root + href, label), href == current) for href, label in PAGES)
    return Frame(title, root, nav, system.name, system.revision, plotly)


# ---------------------------------------------------------------------------------------------
# Values
# ---------------------------------------------------------------------------------------------


def _number(value: float) -> str:
    return format_quantity(value, "")


def format_figure(key: str, value: FigureValue, channel: Channel) -> str:
    """A figure's value in engineering units, by its registered display dimension."""
    if value is None:
        return "not computed"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int | float):
        info = FIGURES.get(key)
        dim = info.dim if info is not None else ""
        try:
            if dim == "<unit>":
                # `_units` figures are already in the channel's engineering unit, not SI
                return format_in_unit(float(value) * channel.unit.factor, channel.unit)
            if dim in ("%", "percent"):
                return format_percent(float(value))
            return format_quantity(float(value), dim)
        except ValueError:
            return f"{value:g}"
    if isinstance(value, dict):
        return "; ".join(f"{_label(k)} {_plain(v, k)}" for k, v in value.items())
    if isinstance(value, list):
        return "; ".join(_plain(v) for v in value)
    return str(value)


# Small objects among the figures (a filter, the least order per family) carry SI suffixes on
# their keys like the figures themselves; these show their values with units.
_SUFFIX_DIMS = (("_hz", "Hz"), ("_dbfs", "dBFS"), ("_db", "dB"), ("_s", "s"), ("_m", "m"), ("_volts", "V"),
                ("_bps", "bit/s"), ("_bytes", "B"))


def _label(key: str) -> str:
    for suffix, _ in _SUFFIX_DIMS:
        if key.endswith(suffix):
            key = key[: -len(suffix)]
            break
    return key.replace("_", " ") + ":"


def _plain(value: Any, key: str = "") -> str:
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int | float):
        if not math.isfinite(value):
            return str(value)
        for suffix, dim in _SUFFIX_DIMS:
            if key.endswith(suffix):
                return format_quantity(float(value), dim)
        return _number(float(value)) if isinstance(value, float) else str(value)
    if isinstance(value, dict):
        return "(" + ", ".join(f"{_label(k)} {_plain(v, k)}" for k, v in value.items()) + ")"
    if isinstance(value, list):
        return "[" + ", ".join(_plain(v) for v in value) + "]"
    return str(value)


def duration(seconds: float) -> str:
    """A duration the way people say it: seconds up to a minute, then minutes, hours, days."""
    for size, symbol in ((86400.0, "d"), (3600.0, "h"), (60.0, "min")):
        if seconds >= size:
            return f"{_number(seconds / size)} {symbol}"
    return format_quantity(seconds, "s")


def figure_rows(result: ChannelResult) -> tuple[FigureRow, ...]:
    """Every computed figure: registered ones in registry order, then any others by key."""
    figures = result.figures
    order = [k for k in FIGURES if k in figures] + sorted(k for k in figures if k not in FIGURES)
    rows = []
    for key in order:
        info = FIGURES.get(key)
        rows.append(FigureRow(
            key,
            info.label if info else key,
            format_figure(key, figures[key], result.channel),
            info.formula if info else "",
            info.source if info else "",
        ))
    return tuple(rows)


@functools.cache
def _markdown() -> markdown.Markdown:
    # one converter, reset per document: building it costs more than converting a note
    return markdown.Markdown(extensions=["tables", "fenced_code", "sane_lists"], output_format="html")


def notes_html(text: str) -> Markup:
    """Markdown notes rendered, then sanitised: no script, handler or javascript: URL survives."""
    if not text.strip():
        return Markup("")
    rendered = _markdown().reset().convert(text)
    clean = nh3.clean(
        rendered,
        tags=_NOTE_TAGS,
        attributes=_NOTE_ATTRIBUTES,
        url_schemes=_NOTE_SCHEMES,
        clean_content_tags={"script", "style"},
        link_rel="noopener noreferrer nofollow",
    )
    return Markup(clean)  # sanitised by nh3 just above


def _band(ch: Channel) -> tuple[str, str]:
    band = ch.signal.band
    if band is None:
        return "", ""
    return f"{format_quantity(band[0], 'Hz')} – {format_quantity(band[1], 'Hz')}", repr(band[1])


def _filter(ch: Channel) -> str:
    f = ch.filter
    if f is None:
        return ""
    parts = [f.family]
    if f.order is not None:
        parts.append(f"order {f.order}")
    if f.corner is not None:
        parts.append(format_quantity(f.corner, "Hz"))
    return ", ".join(parts)


def _finding_view(f: Finding, ctx: Context, root: str, with_channels: bool = True) -> FindingView:
    links = tuple(Link(root + ctx.paths[c], c) if c in ctx.paths else Link("", c)
                  for c in f.channels) if with_channels else ()
    return FindingView(
        rule=f.rule,
        rule_href=f"{root}rules.html#rule-{slug(f.rule)}",
        severity=f.severity,
        message=f.message,
        where=f"{f.file}:{f.line}" if f.line else f.file,
        waived=f.waived,
        waiver_reason=f.waiver_reason,
        channels=links,
    )


def _caution(lines: Sequence[str], findings: Sequence[FindingView]) -> Caution | None:
    if not lines and not findings:
        return None
    return Caution(tuple(lines), tuple(findings))


def _ordered(findings: Iterable[Finding]) -> list[Finding]:
    return sorted(findings, key=lambda f: (f.waived, SEVERITY_RANK[f.severity], f.rule, f.line, f.message))


# ---------------------------------------------------------------------------------------------
# Pages
# ---------------------------------------------------------------------------------------------


def channel_sheet(result: ChannelResult) -> ChannelSheet:
    """The part of a channel page that follows from the channel alone (figures, charts, notes...)."""
    ch = result.channel
    return ChannelSheet(
        id=ch.id, title=ch.title, kind=ch.kind, file=ch.source.file, measurand=ch.measurand,
        unit=ch.unit.symbol, tags=ch.tags, header=ch.header.strip("\n"), figures=figure_rows(result),
        notes=notes_html(ch.notes),
        charts=tuple(ChartView(c.id, c.title, c.caption, Markup(c.to_json()))  # <, >, & escaped
                     for c in channel_charts(result)),
        stages=stage_rows(result.figures.get("stages")),
        safety=_safety_lines(ch),
    )


def _safety_lines(ch: Channel) -> tuple[str, ...]:
    """The caution's lines from the channel's own [safety]."""
    s = ch.safety
    lines: list[str] = []
    if s.working_voltage is not None:
        lines.append(f"Working voltage {format_quantity(s.working_voltage, 'V')} rms to earth at the point of "
                     "measurement or drive.")
    if s.powered_actuator:
        lines.append("This output commands a powered actuator: a wrong or stuck command moves machinery.")
    if s.note:
        lines.append(s.note)
    return tuple(lines)


def channel_live(channel: Channel, ctx: Context, root: str) -> ChannelLive:
    """The part of a channel page that other channels and the system-wide checks decide.

    A finding that names other channels too is shown without their list (the findings page has it):
    a page stays the same size however many channels a shared finding names."""
    views = [_finding_view(f, ctx, root, with_channels=False) for f in _ordered(ctx.by_channel.get(channel.id, ()))]
    return ChannelLive(
        frame=_frame(ctx, f"{channel.id}: {channel.title}", root, ""),
        status=ctx.status[channel.id],
        findings=tuple(v for v in views if v.rule != CAUTION_RULE),
        cautions=tuple(v for v in views if v.rule == CAUTION_RULE),
        proposal=_proposal_view(channel, ctx.proposals.get(channel.id)),
    )


def channel_page(sheet: ChannelSheet, live: ChannelLive) -> ChannelPage:
    """One channel: requirement as written, figures, findings, caution, notes, charts."""
    return ChannelPage(
        frame=replace(live.frame, plotly=bool(sheet.charts)), id=sheet.id, title=sheet.title, kind=sheet.kind,
        status=live.status, file=sheet.file,
        measurand=sheet.measurand, unit=sheet.unit, tags=sheet.tags, header=sheet.header, figures=sheet.figures,
        findings=live.findings, caution=_caution(sheet.safety, live.cautions), notes=sheet.notes,
        charts=sheet.charts, up=Link(live.frame.root + "index.html", "All channels"), stages=sheet.stages,
        proposal=live.proposal,
    )


def stage_rows(stages: FigureValue) -> tuple[StageRow, ...]:
    """The ``stages`` figure (list of {f0_hz, q}) as table rows, in cascade order."""
    if not isinstance(stages, list):
        return ()
    rows = []
    for i, st in enumerate(stages, start=1):
        q = st.get("q")
        notch = st.get("notch_hz")
        rows.append(StageRow(i, "first" if q is None else "second", format_quantity(float(st["f0_hz"]), "Hz"),
                             "" if q is None else f"{float(q):.4f}",
                             "" if notch is None else format_quantity(float(notch), "Hz")))
    return tuple(rows)


def _current_design(ch: Channel) -> str:
    rate = ch.conversion.rate
    text = format_quantity(rate, "Hz").replace("Hz", "S/s") if rate is not None else "no rate"
    return f"{text}; {_filter(ch) or 'no filter'}"


def _proposal_view(channel: Channel, proposal: Proposal | None) -> ProposalView | None:
    if proposal is None:
        return None
    stages = tuple(StageRow(i, "first" if s.q is None else "second", format_quantity(s.f0_hz, "Hz"),
                            "" if s.q is None else f"{s.q:.4f}",
                            "" if s.notch_hz is None else format_quantity(s.notch_hz, "Hz"))
                   for i, s in enumerate(proposal.stages, start=1))
    return ProposalView(_current_design(channel), proposal.explanation, proposal.design is not None,
                        tuple((k, "(removed)" if v is None else v) for k, v in file_edits(proposal)), stages,
                        proposal.unfixable if proposal.design is not None else ())


def channel_row(result: ChannelResult, ctx: Context, root: str = "") -> ChannelRow:
    ch = result.channel
    conv = ch.conversion
    band, band_sort = _band(ch)
    rate = result.budget.data_rate_bps if result.budget is not None else None  # the data_rate_bps figure
    return ChannelRow(
        id=ch.id,
        href=root + ctx.paths[ch.id],
        title=ch.title,
        kind=ch.kind,
        band=band,
        band_sort=band_sort,
        rate=format_quantity(conv.rate, "Hz") if conv.rate is not None else "",
        rate_sort=repr(conv.rate) if conv.rate is not None else "",
        bits=str(conv.bits) if conv.bits is not None else "",
        filter=_filter(ch),
        data_rate=format_quantity(float(rate), "bit/s") if isinstance(rate, int | float) else NOT_COMPUTED,
        data_rate_sort=repr(float(rate)) if isinstance(rate, int | float) else "",
        status=ctx.status[ch.id],
    )


def totals(ctx: Context) -> Totals:
    t = ctx.analysis.totals()
    by_kind = tuple((k, int(v)) for k, v in t["channels_by_kind"].items())
    c = counts(ctx.findings)
    extra: list[tuple[str, str]] = []
    if isinstance(t.get("data_rate_bps"), int | float):
        extra.append(("Aggregate data rate", format_quantity(float(t["data_rate_bps"]), "bit/s")))
    if isinstance(t.get("recording_bytes"), int | float):
        extra.append(("One recording", format_quantity(float(t["recording_bytes"]), "B")))
    if ctx.proposals:
        found = sum(1 for p in ctx.proposals.values() if p.design is not None)
        extra.append(("proposals", str(found)))
    elif ctx.proposals_deferred:
        extra.append(("flagged for specfold propose", str(ctx.proposals_deferred)))
    return Totals(int(t["channels"]), by_kind, tuple((k, c[k]) for k in (*SEVERITIES, "waived")), tuple(extra))


Budgets = tuple[BudgetItem, ...]


def _bar(label: str, used: float, limit: float, dim: str, status: str) -> Bar:
    percent = 100.0 * used / limit if limit > 0 else 100.0
    return Bar(label, format_quantity(used, dim), format_quantity(limit, dim), percent, status)


def budget_items(ctx: Context, root: str) -> tuple[Budgets, Budgets, Budgets]:
    """Converters, links and stores with their facts and the channels that use them.

    ``bars`` show utilisation from :attr:`SystemAnalysis.budgets`: a converter's sample-rate load
    against its max rate, a link's load against its usable capacity (capacity less headroom), a
    store's bytes for one recording against its capacity.  The percent is used / limit.
    """
    budgets = ctx.analysis.budgets
    conv_bars = {c.id: (_bar("sample-rate load", c.aggregate_rate_hz, c.max_rate_hz, "Hz",
                              "error" if c.load > 1.0 else "ok"),) for c in budgets.converters}
    link_bars = {lk.id: (_bar("load with overhead", lk.load_bps, lk.usable_bps, "bit/s",
                               "error" if lk.load_bps > lk.capacity_bps
                               else "warning" if lk.load_bps > lk.usable_bps else "ok"),)
                 for lk in budgets.links}
    store_bars = {st.id: (_bar("one recording", st.bytes_needed, st.capacity_bytes, "B",
                               "error" if st.bytes_needed > st.capacity_bytes else "ok"),)
                  for st in budgets.stores if st.bytes_needed is not None}
    system = ctx.analysis.spec.system
    on_converter: dict[str, list[Link]] = {}
    on_link: dict[str, list[Link]] = {}
    for r in ctx.analysis.channels:
        ch = r.channel
        link = Link(root + ctx.paths[ch.id], ch.id)
        if ch.conversion.converter:
            on_converter.setdefault(ch.conversion.converter, []).append(link)
        if ch.conversion.link:
            on_link.setdefault(ch.conversion.link, []).append(link)

    converters = []
    for c in sorted(system.converters.values(), key=lambda c: c.id):
        facts = [("type", c.type), ("architecture", c.architecture), ("bits", str(c.bits)),
                 ("sampling", c.sampling), ("max rate", format_quantity(c.max_rate, "Hz"))]
        if c.channels is not None:
            facts.append(("inputs/outputs", str(c.channels)))
        if c.link:
            facts.append(("link", c.link))
        converters.append(BudgetItem(c.id, f"converter-{slug(c.id)}", "converter", tuple(facts),
                                     tuple(on_converter.get(c.id, ())), conv_bars.get(c.id, ())))
    links = []
    for lk in sorted(system.links.values(), key=lambda lk: lk.id):
        facts = [("capacity", format_quantity(lk.capacity_bps, "bit/s")), ("overhead", format_percent(lk.overhead)),
                 ("headroom", format_percent(lk.headroom))]
        if lk.store:
            facts.append(("records into", lk.store))
        links.append(BudgetItem(lk.id, f"link-{slug(lk.id)}", "link", tuple(facts), tuple(on_link.get(lk.id, ())),
                                link_bars.get(lk.id, ())))
    stores = []
    for st in sorted(system.stores.values(), key=lambda s: s.id):
        facts = [("capacity", format_quantity(st.capacity_bytes, "B"))]
        if system.record_duration_s is not None:
            facts.append(("one recording lasts", duration(system.record_duration_s)))
        feeding = sorted(lk.id for lk in system.links.values() if lk.store == st.id)
        if feeding:
            facts.append(("fed by", ", ".join(feeding)))
        chans = tuple(ch for lid in feeding for ch in on_link.get(lid, ()))
        stores.append(BudgetItem(st.id, f"store-{slug(st.id)}", "store", tuple(facts), chans,
                                 store_bars.get(st.id, ())))
    return tuple(converters), tuple(links), tuple(stores)


def script_json(value: Any) -> Markup:
    """Compact JSON safe inside ``<script type="application/json">``: no ``<``, ``>`` or ``&`` in it,
    so no text can close the element or open a comment; deterministic (insertion order kept)."""
    text = json.dumps(value, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return Markup(text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026"))


def rows_json(rows: Sequence[ChannelRow]) -> Markup:
    """The overview's channel rows as a JSON array of string arrays, columns in ROW_FIELDS order."""
    return script_json([[getattr(r, f) for f in ROW_FIELDS] for r in rows])


def overview_page(ctx: Context) -> OverviewPage:
    converters, links, stores = budget_items(ctx, "")
    rows = tuple(channel_row(r, ctx) for r in ctx.analysis.channels)
    return OverviewPage(
        frame=_frame(ctx, "Overview", "", "index.html"),
        description=ctx.analysis.spec.system.description,
        totals=totals(ctx),
        budgets=(*converters, *links, *stores),
        rows=rows,
        kinds=("input", "output", "image"),
        statuses=("ok", "warning", "error"),
        rows_json=rows_json(rows),
        first_rows=TABLE_FIRST_ROWS,
    )


def budgets_page(ctx: Context) -> BudgetsPage:
    converters, links, stores = budget_items(ctx, "")
    return BudgetsPage(_frame(ctx, "Budgets", "", "budgets.html"), converters, links, stores)


def findings_page(ctx: Context, rules: Sequence[Rule]) -> FindingsPage:
    """Findings grouped by rule (registry order) and severity (worst first)."""
    order = {r.id: i for i, r in enumerate(rules)}
    titles = {r.id: r.title for r in rules}
    groups: dict[tuple[str, str], list[Finding]] = {}
    for f in ctx.findings:
        groups.setdefault((f.rule, f.severity), []).append(f)
    keys = sorted(groups, key=lambda k: (order.get(k[0], len(order)), k[0], SEVERITY_RANK[k[1]]))
    out = tuple(
        FindingGroup(rule, f"rules.html#rule-{slug(rule)}", f"{slug(rule)}-{severity}", severity,
                     titles.get(rule, rule),
                     tuple(_finding_view(f, ctx, "") for f in _ordered(groups[(rule, severity)])))
        for rule, severity in keys
    )
    c = counts(ctx.findings)
    return FindingsPage(_frame(ctx, "Findings", "", "findings.html"), out,
                        tuple((k, c[k]) for k in (*SEVERITIES, "waived")))


def rules_page(ctx: Context, rules: Sequence[Rule]) -> RulesPage:
    views = []
    for r in rules:
        mine = [f for f in ctx.findings if f.rule == r.id]
        views.append(RuleView(
            r.id, f"rule-{slug(r.id)}", r.severity, r.title, r.explanation,
            sum(1 for f in mine if not f.waived), sum(1 for f in mine if f.waived),
            f"findings.html#{slug(r.id)}-{r.severity}",
        ))
    return RulesPage(_frame(ctx, "Rules", "", "rules.html"), tuple(views))


BOOK_SPLIT = 500
"""A system of more channels than this gets its spec book split: one page per converter (channels
without one grouped by kind) under ``book/``, and ``book.html`` becomes the index of those pages."""

_KIND_ORDER = ("input", "output", "image")


def book_sections(analysis: SystemAnalysis) -> tuple[BookSection, ...]:
    """The pages of a split book, converters first (by id), then each kind without a converter;
    no sections at all when the system is small enough for one book page."""
    if len(analysis.channels) <= BOOK_SPLIT:
        return ()
    by_converter: dict[str, list[int]] = {}
    by_kind: dict[str, list[int]] = {}
    for i, r in enumerate(analysis.channels):
        conv = r.channel.conversion.converter
        if conv:
            by_converter.setdefault(conv, []).append(i)
        else:
            by_kind.setdefault(r.channel.kind, []).append(i)
    names = [f"converter {c}" for c in sorted(by_converter)]
    names += [f"{k} channels without a converter" for k in _KIND_ORDER if k in by_kind]
    keys = [f"conv-{c}" for c in sorted(by_converter)] + [f"kind-{k}" for k in _KIND_ORDER if k in by_kind]
    members = [by_converter[c] for c in sorted(by_converter)] + [by_kind[k] for k in _KIND_ORDER if k in by_kind]
    paths = channel_paths(keys, "book")
    return tuple(BookSection(paths[k], n, tuple(m)) for k, n, m in zip(keys, names, members, strict=True))


def book_sheet(result: ChannelResult, live: ChannelLive) -> Sheet:
    """One channel's sheet in the spec book: a part of what its page shows (no notes, no charts)."""
    ch = result.channel
    return Sheet(ch.id, f"sheet-{slug(ch.id)}", ch.title, ch.kind, live.status, ch.source.file, ch.header.strip("\n"),
                 figure_rows(result), live.findings, _caution(_safety_lines(ch), live.cautions))


def book_page(ctx: Context, sheets: Sequence[Sheet]) -> BookPage:
    """Every channel on one printable page: requirement, figures and findings per sheet."""
    return BookPage(_frame(ctx, "Spec book", "", "book.html"), ctx.analysis.spec.system.description,
                    totals(ctx), tuple(sheets))


def book_section_page(ctx: Context, section: BookSection, sheets: Sequence[Sheet]) -> BookPage:
    """One page of a split book: the sheets of one section, linking up one folder."""
    return BookPage(_frame(ctx, f"Spec book: {section.label}", "../", "book.html"),
                    ctx.analysis.spec.system.description, None, tuple(sheets), section.label)


def book_index_page(ctx: Context, sections: Sequence[BookSection]) -> BookIndexPage:
    """The contents of a split book: one link per section with its channel count and worst status."""
    links = []
    for sec in sections:
        ids = [ctx.analysis.channels[i].channel.id for i in sec.channels]
        statuses = {ctx.status[c] for c in ids}
        worst = "error" if "error" in statuses else "warning" if "warning" in statuses else "ok"
        links.append(SectionLink(sec.path, sec.label, len(ids), worst))
    return BookIndexPage(_frame(ctx, "Spec book", "", "book.html"), ctx.analysis.spec.system.description,
                         totals(ctx), tuple(links))
