"""The design assistant: stage tables, proposals that check clean, optimality, in-place file edits."""

from __future__ import annotations

import difflib
import itertools
import random
import shutil
from pathlib import Path

import pytest
from numpy.testing import assert_allclose
from scipy import signal

from generator import cli
from generator import propose as P
from generator.analysis import analyze, analyze_channel
from generator.dsp import filters as flt
from generator.edit import edit_header, file_edits
from generator.load import load_spec
from generator.rules import run_rules

from .conftest import DATA, DEMO, overlay

GOLDEN = DATA / "propose"

# ------------------------------------------------------------------------------ stage tables

# The stage tables themselves are checked against tests/REFERENCES.md R4 in test_dsp_filters.py.


def test_stage_table_against_scipy_poles_for_chebyshev1() -> None:
    # scipy.signal.cheby1 analog poles at a 1 rad/s edge; at a 1 Hz corner f0/Hz = |p|, Q = |p| / (2 |Re p|)
    # [SCIPY], [WT]
    _, p, _ = signal.cheby1(5, 0.5, 1.0, analog=True, output="zpk")
    want = sorted((abs(x), abs(x) / (2 * abs(x.real))) for x in p if x.imag > 1e-9)
    got = [s for s in flt.stages(flt.design("chebyshev1", 5, 1.0, 0.5)) if s.q is not None]
    assert_allclose(sorted((s.f0_hz, s.q or 0.0) for s in got), want, rtol=1e-9)


def test_stages_figure_in_json_for_the_demo_tacho() -> None:
    spec = load_spec(DEMO)
    ch = spec.channel("TACHO-HSS")  # 4th-order butterworth at 25 Hz
    figures = analyze_channel(ch, spec).figures
    stages = figures["stages"]
    assert isinstance(stages, list)
    assert [set(s) for s in stages] == [{"f0_hz", "q"}, {"f0_hz", "q"}]
    assert_allclose([s["f0_hz"] for s in stages], [25.0, 25.0], rtol=1e-12)
    assert_allclose([s["q"] for s in stages], [0.5412, 1.3066], rtol=1e-4)  # Williams & Taylor butterworth n = 4


# ------------------------------------------------------------------------------ proposals check clean


def _channel_file(cid: str, f_high: float, rate: float, snr: float, filt: tuple[str, int, float] | None) -> str:
    lines = ["+++", f'title = "{cid}"', 'kind = "input"', 'unit = "V"', "", "[signal]",
             f'band = ["0 Hz", "{f_high:g} Hz"]', 'peak = "8 V"', f'snr = "{snr:g} dB"', 'out_of_band = "-10 dBFS"',
             "", "[conversion]", 'converter = "sar"', f'rate = "{rate:.10g} S/s"']
    if filt is not None:
        fam, n, corner = filt
        lines += ["", "[filter]", f'family = "{fam}"', f"order = {n}", f'corner = "{corner:g} Hz"']
    return "\n".join([*lines, "+++", "generated", ""])


def _failing_cases() -> list[tuple[str, float, float, float, tuple[str, int, float] | None]]:
    # rates are mclk (24.576 MHz) / integer so that clock-divider stays quiet
    cases: list[tuple[str, float, float, float, tuple[str, int, float] | None]] = [
        ("NYQ-1", 1000.0, 24.576e6 / 16384, 60.0, ("butterworth", 4, 1500.0)),   # below-nyquist
        ("ALS-1", 1000.0, 24.576e6 / 10240, 60.0, ("butterworth", 2, 1200.0)),   # alias-rejection
        ("DRP-2", 1000.0, 24.576e6 / 1024, 60.0, ("butterworth", 4, 1050.0)),    # band-edge-droop
        ("MIS-1", 1000.0, 24.576e6 / 3072, 50.0, None),                          # filter-missing
    ]
    rng = random.Random(12)  # seeded: the same generated channels every run
    for i in range(4):
        f_high = rng.choice([50.0, 200.0, 1000.0, 4000.0])
        rate = 24.576e6 / round(24.576e6 / (f_high * rng.uniform(1.5, 6.0)))
        fam = rng.choice(["butterworth", "bessel", "chebyshev1"])
        cases.append((f"GEN-{i}", f_high, rate, rng.choice([40.0, 60.0, 70.0]),
                      (fam, rng.randint(1, 5), f_high * rng.uniform(0.9, 1.6))))
    return cases


def _edited_tree(tree: Path, proposals: list[P.Proposal]) -> None:
    for p in proposals:
        if p.design is not None:
            path = tree / p.file
            path.write_text(edit_header(path.read_text(encoding="utf-8"), file_edits(p)), encoding="utf-8")


def _fixable_left(tree: Path, ids: set[str]) -> list[str]:
    found = run_rules(analyze(load_spec(tree)), only=P.TARGET_RULES)
    return [f"{f.rule}: {f.message}" for f in found
            if not f.waived and f.severity in ("error", "warning") and ids & set(f.channels)
            and f.rule not in P.FIXED_BY_OTHER_MEANS]


def test_every_proposal_applied_to_a_copy_checks_clean(tmp_path: Path) -> None:
    tree = overlay(GOLDEN / "input", tmp_path / "specs")
    for extra in ("DRP-1.md", "NOF-1.md"):
        (tree / "channels" / extra).unlink()
    cases = _failing_cases()
    for cid, f_high, rate, snr, filt in cases:
        (tree / "channels" / f"{cid}.md").write_text(_channel_file(cid, f_high, rate, snr, filt), encoding="utf-8")
    spec = load_spec(tree)
    flagged = set(P.flagged_channels(spec))
    wanted = {"NYQ-1": "below-nyquist", "ALS-1": "alias-rejection", "DRP-2": "band-edge-droop",
              "MIS-1": "filter-missing"}
    before = run_rules(analyze(spec), only=P.TARGET_RULES)
    for cid, rule in wanted.items():  # each hand-made case fails the rule it is meant to
        assert any(f.rule == rule and cid in f.channels for f in before), cid
    assert set(wanted) <= flagged
    proposals = P.propose(spec, sorted(flagged))
    assert all(p.design is not None for p in proposals), [p.explanation for p in proposals]
    _edited_tree(tree, proposals)
    assert _fixable_left(tree, flagged) == []


# ------------------------------------------------------------------------------ optimality

_SMALL_SYSTEM_EXTRA = """
[clocks.small]
frequency = "1.024 MHz"
dividers = [64, 100, 128, 200, 256, 400, 512, 1000]

[converters.sar2]
type = "adc"
architecture = "sar"
bits = 16
full_scale = "±10 V"
max_rate = "12 kS/s"
sampling = "multiplexed"
clock = "small"
link = "net"
"""


def _brute_best(spec: object, ch: object, prefer: tuple[str, ...], max_order: int) -> P.Design | None:
    """Every allowed rate x family x order, checked with the rules: the best under ``prefer``."""
    from generator.model import Channel, Spec

    assert isinstance(spec, Spec) and isinstance(ch, Channel)
    assert ch.signal.band is not None
    f_high = ch.signal.band[1]
    need = analyze_channel(ch, spec).sampling.required_alias_rejection_db or 0.0  # type: ignore[union-attr]
    best: P.Design | None = None
    for (rate, origin), fam, n in itertools.product(list(P.allowed_rates(spec, ch, 0.0)), flt.FAMILIES,
                                                    range(1, max_order + 1)):
        filt = P.shaped_filter(fam, n, f_high, ch.signal.flatness_db, float(max(int(-(-need // 1)) + 1, 20)))
        if filt is None or P.channel_findings(spec, P.with_design(ch, rate, filt)):
            continue
        d = P.Design(rate, origin, fam, n, filt.corner_hz, filt.ripple_db, filt.stopband_db, rate * 16,
                     flt.group_delay_s(filt, 0.0), 0.0, 0.0, "")
        if best is None or d.key(prefer) < best.key(prefer):
            best = d
    return best


@pytest.mark.parametrize("prefer", [("rate", "order", "delay"), ("order", "rate", "delay"),
                                    ("delay", "order", "rate")])
def test_optimal_on_a_small_design_space_equals_brute_force(tmp_path: Path, prefer: tuple[str, ...]) -> None:
    tree = overlay(GOLDEN / "input", tmp_path / "specs")
    with (tree / "system.toml").open("a", encoding="utf-8") as fh:
        fh.write(_SMALL_SYSTEM_EXTRA)
    text = (tree / "channels" / "DRP-1.md").read_text(encoding="utf-8")
    (tree / "channels" / "DRP-1.md").write_text(
        text.replace('converter = "sar"', 'converter = "sar2"').replace('"2 kS/s"', '"2.56 kS/s"'), encoding="utf-8")
    spec = load_spec(tree)
    ch = spec.channel("DRP-1")
    found = P.candidates(spec, ch, P.TARGET_RULES, max_order=4)
    assert found
    mine = min(found, key=lambda d: d.key(prefer))
    brute = _brute_best(spec, ch, prefer, 4)
    assert brute is not None
    assert (mine.rate_hz, mine.family, mine.order) == (brute.rate_hz, brute.family, brute.order)


# ------------------------------------------------------------------------------ --write


def test_write_changes_only_the_intended_lines(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    tree = overlay(GOLDEN / "input", tmp_path / "specs")
    before = {p.name: p.read_text(encoding="utf-8") for p in (tree / "channels").glob("*.md")}
    rc = cli.main(["propose", str(tree), "DRP-1", "NOF-1"])
    assert rc == 0
    assert {p.name: p.read_text(encoding="utf-8") for p in (tree / "channels").glob("*.md")} == before  # dry run
    assert "+++ b/channels/DRP-1.md" in capsys.readouterr().out
    rc = cli.main(["propose", str(tree), "DRP-1", "NOF-1", "--write"])
    assert rc == 0
    for name in ("DRP-1.md", "NOF-1.md"):
        got = (tree / "channels" / name).read_text(encoding="utf-8")
        assert got == (GOLDEN / "expected" / "channels" / name).read_text(encoding="utf-8"), name
    # DRP-1: only the rate and filter value lines change (comments kept), one key added; notes untouched
    diff = [d for d in difflib.ndiff(before["DRP-1.md"].splitlines(), (tree / "channels" / "DRP-1.md")
            .read_text(encoding="utf-8").splitlines()) if d[:1] in "+-"]
    removed = [d[2:].split("=")[0].strip() for d in diff if d.startswith("- ")]
    added = [d[2:].split("=")[0].strip() for d in diff if d.startswith("+ ")]
    assert sorted(removed) == ["corner", "family", "order", "rate"]
    assert sorted(added) == ["corner", "family", "order", "rate", "stopband_attenuation"]
    assert all("#" in d for d in diff if d[2:].startswith(("rate", "order", "corner"))), diff
    assert 'rate = "2 kS/s" in the notes must not change.' in (tree / "channels" / "DRP-1.md").read_text()
    assert _fixable_left(tree, {"DRP-1", "NOF-1"}) == []


def test_write_refuses_a_file_changed_since_it_was_read(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                       capsys: pytest.CaptureFixture[str]) -> None:
    tree = overlay(GOLDEN / "input", tmp_path / "specs")
    target = tree / "channels" / "DRP-1.md"
    original = P.propose

    def meddling(*args: object, **kwargs: object) -> list[P.Proposal]:
        result = original(*args, **kwargs)  # type: ignore[arg-type]
        target.write_text(target.read_text(encoding="utf-8") + "\nedited by someone else\n", encoding="utf-8")
        return result

    monkeypatch.setattr(P, "propose", meddling)
    rc = cli.main(["propose", str(tree), "DRP-1", "--write"])
    assert rc == cli.EXIT_BAD_INPUT
    assert "changed since it was read" in capsys.readouterr().err
    text = target.read_text(encoding="utf-8")
    assert text.endswith("edited by someone else\n") and 'corner = "110 Hz"' in text  # nothing of ours written


def test_edit_header_adds_a_missing_key_under_its_table() -> None:
    text = '+++\ntitle = "x"\n\n[filter]\nfamily = "bessel"  # kept\n\n[[waiver]]\nrule = "r"\n+++\nbody\n'
    out = edit_header(text, [("filter.order", "3"), ("filter.family", '"butterworth"')])
    assert out == ('+++\ntitle = "x"\n\n[filter]\nfamily = "butterworth"  # kept\norder = 3\n\n'
                   '[[waiver]]\nrule = "r"\n+++\nbody\n')


def test_usage_errors_exit_2(tmp_path: Path) -> None:
    tree = overlay(GOLDEN / "input", tmp_path / "specs")
    assert cli.main(["propose", str(tree), "NO-SUCH"]) == cli.EXIT_BAD_INPUT
    assert cli.main(["propose", str(tree), "DRP-1", "--prefer", "rate,price"]) == cli.EXIT_BAD_INPUT


# ------------------------------------------------------------------------------ no design: say why


def test_impossible_snr_is_explained_with_its_shortfall(tmp_path: Path) -> None:
    tree = overlay(GOLDEN / "input", tmp_path / "specs")
    path = tree / "channels" / "DRP-1.md"
    path.write_text(path.read_text(encoding="utf-8").replace('snr = "60 dB"', 'snr = "110 dB"'), encoding="utf-8")
    spec = load_spec(tree)
    (p,) = P.propose(spec, ["DRP-1"])
    # peak 5 V on ±10 V is -6.02 dBFS; 16 bits give 6.0206 x 16 + 1.7609 = 98.09 dB for a full-scale sine
    # (ADI MT-001), so 92.07 dB at this peak: 110 dB is out of reach by 17.9 dB.
    assert p.design is not None  # the droop is still fixed
    assert any("110.0 dB SNR" in u and "by 17.9 dB" in u for u in p.unfixable), p.unfixable


# ------------------------------------------------------------------------------ demo and a broken demo


def _broken_demo(dest: Path) -> Path:
    shutil.copytree(DEMO, dest)
    ch = dest / "channels"
    s = (ch / "STR-BLD-1.md").read_text(encoding="utf-8")
    (ch / "STR-BLD-1.md").write_text(s.replace('[filter]\nfamily = "butterworth"\norder = 4\ncorner = "400 Hz"\n', ""),
                                     encoding="utf-8")  # filter removed from a SAR channel
    s = (ch / "STR-BLD-2.md").read_text(encoding="utf-8")
    (ch / "STR-BLD-2.md").write_text(s.replace('rate = "2.048 kS/s"', 'rate = "150 S/s"'), encoding="utf-8")
    s = (ch / "ACC-GBX-01.md").read_text(encoding="utf-8")  # a band the shared 51.2 kS/s cannot carry
    (ch / "ACC-GBX-01.md").write_text(s.replace('band = ["2 Hz", "20 kHz"]', 'band = ["2 Hz", "30 kHz"]'),
                                      encoding="utf-8")
    return dest


def test_demo_and_broken_demo(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    demo = tmp_path / "demo"
    shutil.copytree(DEMO, demo)
    assert cli.main(["propose", str(demo), "--write"]) == 0  # TACHO-HSS droop fixed
    assert _fixable_left(demo, {c.id for c in load_spec(demo).channels}) == []

    broken = _broken_demo(tmp_path / "broken")
    spec = load_spec(broken)
    assert set(P.flagged_channels(spec)) == {"ACC-GBX-01", "STR-BLD-1", "STR-BLD-2", "TACHO-HSS"}
    capsys.readouterr()
    assert cli.main(["propose", str(broken), "--write"]) == cli.EXIT_FINDINGS  # one channel cannot be fixed
    out = capsys.readouterr().out
    assert "the band top 30 kHz needs at least 60 kS/s" in out and "falls short by 8.8 kS/s" in out
    left = _fixable_left(broken, {c.id for c in spec.channels})
    assert left and all("30 kHz" in m for m in left), left  # only the explained channel remains
    full = run_rules(analyze(load_spec(broken)))
    assert not [f for f in full if not f.waived and f.rule in P.SHARED_RULES]


def test_rule_lists_come_from_the_registry_tags() -> None:
    from generator.rules import all_rules, tagged

    rules = {r.id: r.tags for r in all_rules()}
    # what no rate or filter can clear is never a target a design is searched for
    assert set(P.FIXED_BY_OTHER_MEANS) == {r for r in P.TARGET_RULES if "gain-or-bits" in rules[r]}
    assert all("rate-or-filter" in rules[r] for r in P.TARGET_RULES if r not in P.FIXED_BY_OTHER_MEANS)
    assert set(P.SHARED_RULES) == {r for r, tags in rules.items() if "shared" in tags}
    assert not set(P.SHARED_RULES) & set(P.TARGET_RULES)
    # a tag says one thing: nothing is both fixable and unfixable by a rate or filter
    assert not [r for r, tags in rules.items() if {"rate-or-filter", "gain-or-bits"} <= tags]
    with pytest.raises(ValueError, match="unknown tags"):
        tagged("rate-or-filters")
