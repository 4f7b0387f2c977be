"""The incremental shared check of ``propose``: the same proposals as the whole-system check, budgets
recomputed per resource equal to a whole analysis, and candidates that overload shared hardware
rejected.

The outside reference throughout is the full pipeline, ``run_rules(analyze(spec))`` over the whole
changed spec (and ``analyze_budgets`` of it): the incremental path must agree with it exactly."""

from __future__ import annotations

import re
import shutil
from dataclasses import replace
from pathlib import Path

import pytest

from generator import propose as P
from generator.analysis import analyze
from generator.analysis.budgets import BudgetIndex, Budgets, analyze_budgets
from generator.dsp import filters as flt
from generator.load import load_spec
from generator.model import Channel, Spec
from generator.rules import run_rules

from .bench.synth import write_system
from .conftest import DEMO, MINIMAL
from .test_propose import _broken_demo, _channel_file


def _shared_counts_full(spec: Spec) -> dict[str, int]:
    """Unwaived findings per shared rule by the full pipeline over the whole spec (the outside reference)."""
    counts: dict[str, int] = {}
    for f in run_rules(analyze(spec), only=P.SHARED_RULES):
        if not f.waived:
            counts[f.rule] = counts.get(f.rule, 0) + 1
    return counts


def _assert_same_proposals(spec: Spec) -> list[P.Proposal]:
    ids = P.flagged_channels(spec)
    assert ids
    new = P.propose(spec, ids)
    old = P.propose(spec, ids, whole_system=True)
    assert [p.channel_id for p in new] == ids
    for a, b in zip(new, old, strict=True):
        key_a = None if a.design is None else (a.design.rate_hz, a.design.family, a.design.order, a.design.corner_hz)
        key_b = None if b.design is None else (b.design.rate_hz, b.design.family, b.design.order, b.design.corner_hz)
        assert key_a == key_b, a.channel_id
        assert a == b, a.channel_id  # explanation, rejected candidates, edits and stages too
    # Each proposal, applied alone to the whole spec, adds no shared finding by the full pipeline.
    before = _shared_counts_full(spec)
    for p in new:
        if p.design is not None:
            applied = P.replace_channel(spec, P.with_design(spec.channel(p.channel_id), p.design.rate_hz,
                                                              p.design.as_filter()))
            after = _shared_counts_full(applied)
            assert all(n <= before.get(rule, 0) for rule, n in after.items()), (p.channel_id, before, after)
    return new


# ------------------------------------------------------------------------------ same proposals


def test_demo_and_broken_demo_get_the_same_proposals(tmp_path: Path) -> None:
    _assert_same_proposals(load_spec(DEMO))
    proposals = _assert_same_proposals(load_spec(_broken_demo(tmp_path / "broken")))
    assert {p.channel_id for p in proposals if p.design is not None} == {"STR-BLD-1", "STR-BLD-2", "TACHO-HSS"}


def _edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, (path, old)
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def _set_in_block(system: Path, block: str, key: str, value: str) -> None:
    """Set ``key`` in the ``[block]`` table of system.toml (the line exists in the synthetic tree)."""
    text = system.read_text(encoding="utf-8")
    start = text.index(f"[{block}]\n")
    end = text.find("\n[", start + 1)
    end = len(text) if end < 0 else end
    body, n = re.subn(rf"^{key} = .*$", f"{key} = {value}", text[start:end], count=1, flags=re.M)
    assert n == 1, (block, key)
    system.write_text(text[:start] + body + text[end:], encoding="utf-8")


def _between(before: float, after: float) -> float:
    assert after > before
    return (before + after) / 2


def test_a_synthetic_tree_with_rejections_gets_the_same_proposals(tmp_path: Path) -> None:
    root = write_system(68, tmp_path / "synth")  # four bays of the demo rig
    bay = {b: root / "channels" / f"bay-{b:04d}" for b in range(4)}
    # bay 1: the broken demo's edits (a filter removed, a rate below Nyquist, a band too wide)
    _edit(bay[1] / "STR-BLD-1-1.md", '[filter]\nfamily = "butterworth"\norder = 4\ncorner = "400 Hz"\n', "")
    for b in (1, 3):
        _edit(bay[b] / f"STR-BLD-2-{b}.md", 'rate = "2.048 kS/s"', 'rate = "150 S/s"')
    _edit(bay[1] / "ACC-GBX-01-1.md", 'band = ["2 Hz", "20 kHz"]', 'band = ["2 Hz", "30 kHz"]')
    # bay 2: a tone that folds through the modulator alias on one of a phase-matched pair, too strong for
    # the pair's front-end filter (3rd-order butterworth at 100 kHz: 108.9 dB at 6.5436 MHz, +20 dBFS lands
    # at -88.9 dBFS, above the -96 dBFS floor): any analog filter the search finds instead puts the pair out
    # of phase (group-skew rejects it)
    _edit(bay[2] / "ACC-GBX-01-2.md", "[conversion]",
          '[[interference]]\nfrequency = "6.5436 MHz"\nlevel = "100 V"\nsource = "inverter"\n\n[conversion]')
    spec = load_spec(root)
    assert "ACC-GBX-01-2" in P.flagged_channels(spec)
    # bays 1 and 3: the link (bay 1) and the multiplexed converter (bay 3) left just short of what
    # raising STR-BLD-2 from 150 S/s to its proposed rate needs
    (roomy,) = P.propose(spec, ["STR-BLD-2-3"])
    assert roomy.design is not None
    raised = P.replace_channel(spec, P.with_design(spec.channel("STR-BLD-2-3"), roomy.design.rate_hz,
                                                   roomy.design.as_filter()))
    raised1 = P.replace_channel(spec, P.with_design(spec.channel("STR-BLD-2-1"), roomy.design.rate_hz,
                                                    roomy.design.as_filter()))
    link_before, link_after = analyze_budgets(spec).link("net0-1"), analyze_budgets(raised1).link("net0-1")
    usable = _between(link_before.load_bps, link_after.load_bps)
    _set_in_block(root / "system.toml", "links.net0-1", "capacity", f'"{usable / link_before.limit:.12g} bit/s"')
    sar_before, sar_after = analyze_budgets(spec).converter("adc-sar-3"), analyze_budgets(raised).converter("adc-sar-3")
    top = _between(sar_before.aggregate_rate_hz, sar_after.aggregate_rate_hz)
    _set_in_block(root / "system.toml", "converters.adc-sar-3", "max_rate", f'"{top:.12g} S/s"')

    spec = load_spec(root)
    proposals = {p.channel_id: p for p in _assert_same_proposals(spec)}
    assert "link-capacity" in proposals["STR-BLD-2-1"].explanation
    assert "converter-throughput" in proposals["STR-BLD-2-3"].explanation
    assert "group-skew" in proposals["ACC-GBX-01-2"].explanation
    assert all(proposals[f"TACHO-HSS-{b}"].design is not None for b in range(4))  # untouched bays still fixed


# ------------------------------------------------------------------------------ rejection


@pytest.mark.parametrize("resource", ["link", "converter"])
def test_a_candidate_that_overloads_shared_hardware_is_rejected(tmp_path: Path, resource: str) -> None:
    tree = tmp_path / "specs"
    shutil.copytree(MINIMAL, tree)
    # below Nyquist on the multiplexed SAR: every fix raises the rate (rate is mclk / 16384); a busy
    # channel beside it at mclk / 480 takes most of the converter, so its max_rate stays above any one rate
    (tree / "channels" / "NYQ-1.md").write_text(
        _channel_file("NYQ-1", 1000.0, 24.576e6 / 16384, 60.0, ("butterworth", 4, 1500.0)), encoding="utf-8")
    (tree / "channels" / "BUSY-1.md").write_text(
        _channel_file("BUSY-1", 1000.0, 24.576e6 / 480, 60.0, ("butterworth", 4, 1500.0)), encoding="utf-8")
    spec = load_spec(tree)
    (roomy,) = P.propose(spec, ["NYQ-1"])
    assert roomy.design is not None and roomy.design.rate_hz > 24.576e6 / 16384
    raised = P.replace_channel(spec, P.with_design(spec.channel("NYQ-1"), roomy.design.rate_hz,
                                                   roomy.design.as_filter()))
    system = tree / "system.toml"
    if resource == "link":  # usable capacity halfway between the load now and with the proposal
        lk0, lk1 = analyze_budgets(spec).link("net"), analyze_budgets(raised).link("net")
        _edit(system, 'capacity = "100 Mbit/s"',
              f'capacity = "{_between(lk0.load_bps, lk1.load_bps) / lk0.limit:.12g} bit/s"')
        rule = "link-capacity"
    else:  # the multiplexed SAR's max_rate halfway between its aggregate now and with the proposal
        c0, c1 = analyze_budgets(spec).converter("sar"), analyze_budgets(raised).converter("sar")
        top = _between(c0.aggregate_rate_hz, c1.aggregate_rate_hz)
        _edit(system, 'max_rate = "250 kS/s"', f'max_rate = "{top:.12g} S/s"')
        rule = "converter-throughput"
    tight = load_spec(tree)
    assert _shared_counts_full(tight).get(rule, 0) == 0  # nothing overloaded yet
    # the full pipeline confirms the roomy design would overload the tightened resource
    applied = P.replace_channel(tight, P.with_design(tight.channel("NYQ-1"), roomy.design.rate_hz,
                                                     roomy.design.as_filter()))
    assert _shared_counts_full(applied).get(rule, 0) == 1
    (p,) = P.propose(tight, ["NYQ-1"])
    assert p.design is None
    assert p.explanation.startswith("no design keeps the shared constraints")
    assert f"breaks {rule}" in p.explanation
    assert P.propose(tight, ["NYQ-1"], whole_system=True) == [p]


# ------------------------------------------------------------------------------ budgets per resource


def _variant(ch: Channel) -> Channel:
    """The channel at a faster rate with another filter (whatever its kind: budgets only read both)."""
    rate = (ch.conversion.rate or 1000.0) * 1.5
    top = ch.signal.band[1] if ch.signal.band is not None else 100.0
    return P.with_design(ch, rate, flt.design("bessel", 3, top * 1.7))


def _pieces(b: Budgets) -> dict[str, object]:
    return {"channels": dict(b.channels), "converters": b.converters, "clocks": b.clocks, "links": b.links,
            "stores": b.stores, "groups": b.groups}


def _restricted(full: Budgets, part: Budgets) -> dict[str, object]:
    """``full``'s budgets of the resources ``part`` holds, in the same order."""
    return {"channels": {cid: full.channels[cid] for cid in part.channels},
            "converters": tuple(full.converter(c.id) for c in part.converters),
            "clocks": tuple(c for c in full.clocks if c.converter in {x.id for x in part.converters}),
            "links": tuple(full.link(lk.id) for lk in part.links),
            "stores": tuple(full.store(s.id) for s in part.stores),
            "groups": tuple(full.group(g.id) for g in part.groups)}


@pytest.mark.parametrize("tree", ["demo", "synth"])
def test_rebudget_equals_a_whole_analysis_of_the_changed_spec(tmp_path: Path, tree: str) -> None:
    spec = load_spec(DEMO if tree == "demo" else write_system(40, tmp_path / "synth"))
    index = BudgetIndex(spec)
    for ch in spec.channels:
        reach = index.reach(ch.id)
        assert _pieces(index.rebudget(reach, ch)) == _pieces(index.within(reach)), ch.id
        changed = _variant(ch)
        part = index.rebudget(reach, changed)
        full = analyze_budgets(P.replace_channel(spec, changed))
        assert _pieces(part) == _restricted(full, part), ch.id
        # and nothing outside the reach moved
        base = index.budgets
        assert [c for c in full.converters if c.id != reach.converter] == \
            [c for c in base.converters if c.id != reach.converter]
        assert [lk for lk in full.links if lk.id != reach.link] == [lk for lk in base.links if lk.id != reach.link]
        assert [g for g in full.groups if g.id not in reach.groups] == \
            [g for g in base.groups if g.id not in reach.groups]


def test_a_multiplexed_converter_reaches_its_other_channels_groups() -> None:
    spec = load_spec(DEMO)
    index = BudgetIndex(spec)
    tacho = spec.channel("TACHO-HSS")  # on the multiplexed adc-sar, in no group
    assert tacho.match is None and spec.system.converters["adc-sar"].sampling == "multiplexed"
    reach = index.reach("TACHO-HSS")
    assert reach.converter == "adc-sar" and reach.groups == ("blade-roots",)
    assert (reach.link, reach.store, reach.links) == ("net0", "recorder", ("net0",))
    # a faster tacho shifts the scan skew of the blade-root pair: their timing must be recomputed
    faster = P.with_design(tacho, 4 * (tacho.conversion.rate or 0.0), None)
    assert index.rebudget(reach, faster).group("blade-roots") != index.budgets.group("blade-roots")
    # a simultaneous converter's channels keep their timing: only the channel's own group
    assert index.reach("ACC-GBX-01").groups == ("gearbox-pair",)


def test_a_candidate_moved_to_another_converter_is_refused() -> None:
    spec = load_spec(DEMO)
    tacho = spec.channel("TACHO-HSS")
    moved = replace(tacho, conversion=replace(tacho.conversion, converter="adc-ds"))
    check = P.IncrementalCheck(spec)
    assert check.breaks(tacho) == []  # the channel as it is breaks nothing
    with pytest.raises(ValueError, match="keeps the channel's converter"):
        check.breaks(moved)
