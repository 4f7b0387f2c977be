"""Sampling rules: each fires on its failing fixture and stays silent on its passing one.

Fixtures live in tests/data/rules/sampling/<case>/ (laid over tests/data/minimal); their
expected.txt lists ``fires RULE CHANNEL`` or ``silent RULE CHANNEL`` and ``msg <fragment>``
lines.  The numbers in the fragments come from outside the project: butterworth loss
10 log10(1 + (f/fc)^2n) [WT, Williams & Taylor], fold f_a = |f - fs round(f/fs)| [OS],
sine-referenced dBFS [AES17], the delta-sigma values of tests/REFERENCES.md R3.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest
from numpy.testing import assert_allclose

from generator.analysis import analyze
from generator.analysis.sampling import SamplingResult
from generator.load import load_spec
from generator.rules import run_rules, tagged

from .conftest import DATA, DEMO, ROOT, overlay

CASES = sorted(p for p in (DATA / "rules" / "sampling").iterdir() if p.is_dir())
SAMPLING_RULES = set(tagged("sampling"))  # the registry says which rules are about sampling


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_rule_fixture(case: Path, tmp_path: Path) -> None:
    analysis = analyze(load_spec(overlay(case, tmp_path / "specs")))
    findings = run_rules(analysis)
    expected = (case / "expected.txt").read_text().splitlines()
    target: list[str] = []
    for line in expected:
        verb, _, rest = line.partition(" ")
        if verb in ("fires", "silent"):
            rule, channel = rest.split()
            target = [f.message for f in findings if f.rule == rule and channel in f.channels]
            assert bool(target) == (verb == "fires"), f"{rule} on {channel}: {target}"
        elif verb == "msg":
            assert any(rest in m for m in target), f"{rest!r} not in {target}"


def test_every_sampling_rule_has_a_failing_and_a_passing_fixture() -> None:
    fired: set[str] = set()
    silent: set[str] = set()
    for case in CASES:
        for line in (case / "expected.txt").read_text().splitlines():
            verb, _, rest = line.partition(" ")
            if verb == "fires":
                fired.add(rest.split()[0])
            elif verb == "silent":
                silent.add(rest.split()[0])
    assert SAMPLING_RULES, "no rule is tagged sampling"
    assert fired | silent <= SAMPLING_RULES  # every fixture is about a rule the registry tags sampling
    assert fired >= SAMPLING_RULES
    assert silent >= SAMPLING_RULES


def _result(case: str, tmp_path: Path) -> SamplingResult:
    analysis = analyze(load_spec(overlay(DATA / "rules" / "sampling" / case, tmp_path / case)))
    result = analysis.result("CH").sampling
    assert result is not None
    return result


def test_tone_fold_figures(tmp_path: Path) -> None:
    s = _result("interference-folds-fail", tmp_path)
    (tone,) = s.tones
    # 950 Hz at 1 kS/s: zone 2, inverted, lands at 50 Hz [OS]
    assert tone.zone == 2 and tone.inverted and tone.folded and tone.in_band
    assert_allclose(tone.alias_hz, 50.0)
    # 10 g x 100 mV/g = 1 V against a 10 V full-scale peak: -20 dBFS [AES17]
    assert tone.level_dbfs is not None
    assert_allclose(tone.level_dbfs, -20.0, rtol=1e-12)
    # 2nd-order butterworth at 200 Hz, at 950 Hz: 10 log10(1 + 4.75^4) [WT]
    assert_allclose(tone.attenuation_db, 10 * math.log10(1 + 4.75**4), rtol=1e-9)


def test_required_rejection_uses_peak_and_out_of_band(tmp_path: Path) -> None:
    # ACC-GBX-01 of the demo: peak 50 g x 100 mV/g = 5 V on +-10 V -> -6.02 dBFS [AES17];
    # floor = -6.02 - 90 dB; out_of_band -20 dBFS -> 76.02 dB needed [MT-002 criterion]
    s = analyze(load_spec(DEMO)).result("ACC-GBX-01").sampling
    assert s is not None and s.required_alias_rejection_db is not None
    assert_allclose(s.required_alias_rejection_db, 90 - 20 - 20 * math.log10(0.5), rtol=1e-12)
    # without snr the floor is the quantization floor of the 24-bit converter, 6.0206 N + 1.7609 dB
    # [MT-001]: 146.255 dB (tests/REFERENCES.md R5.2, R2.1); out_of_band defaults to 0 dBFS
    tree = overlay(DATA / "rules" / "sampling" / "filter-missing-pass", tmp_path / "s")
    acc_file = tree / "channels" / "ACC-1.md"
    acc_file.write_text(acc_file.read_text().replace('snr = "90 dB"\n', "").replace('out_of_band = "-20 dBFS"\n', ""))
    t = analyze(load_spec(tree))
    acc = t.result("ACC-1").sampling
    assert acc is not None and acc.required_alias_rejection_db is not None
    assert_allclose(acc.required_alias_rejection_db, 146.255, rtol=1e-5)


def test_delta_sigma_sources(tmp_path: Path) -> None:
    s = _result("alias-rejection-modulator-fail", tmp_path)
    assert s.alias_rejection_source == "analog filter"
    # RC at 100 kHz, at 6.144 MHz - 20 kHz: 35.742 dB (tests/REFERENCES.md R3) [WT]
    assert_allclose(s.alias_rejection_db, 35.742, rtol=1e-4)
    t = _result("alias-rejection-digital-pass", tmp_path)
    assert t.alias_rejection_source == "digital decimation filter"
    # 100 dB of decimation stopband plus the 4th-order butterworth at 100 kHz at the first alias, 28 kHz:
    # 10 log10(1 + (f/fc)^2n) [WT]
    assert_allclose(t.alias_rejection_db, 100.0 + 10 * math.log10(1 + 0.28**8), rtol=1e-12)
    # the same filter at the lowest frequency folding through the modulator, 6.144 MHz - 20 kHz [WT]
    assert_allclose(t.modulator_alias_rejection_db, 10 * math.log10(1 + (6.124e6 / 100e3) ** 8), rtol=1e-9)


def test_demo_carries_the_figures_and_warns_where_expected() -> None:
    run = subprocess.run([sys.executable, "-m", "generator", "check", str(DEMO), "--format", "json"],
                         capture_output=True, text=True, cwd=ROOT, check=False)
    assert run.returncode == 0, run.stdout + run.stderr
    doc = json.loads(run.stdout)
    keys = {"sample_rate_hz", "nyquist_hz", "band_low_hz", "band_high_hz", "rate_over_nyquist",
            "first_alias_hz", "band_edge_droop_db", "alias_rejection_db", "alias_rejection_source",
            "group_delay_dc_s", "group_delay_band_edge_s", "required_alias_rejection_db",
            "min_filter_order", "interference_folds"}
    inputs = [c for c in doc["channels"] if c["kind"] == "input"]
    assert inputs
    for c in inputs:
        assert keys <= set(c["figures"]), c["id"]
    tacho = next(c for c in inputs if c["id"] == "TACHO-HSS")
    # 4th-order butterworth, f/fc = 0.8: 0.67358 dB (tests/REFERENCES.md R2.4) [WT]
    assert_allclose(tacho["figures"]["band_edge_droop_db"], 0.67358, rtol=1e-4)
    droop = [f for f in doc["findings"] if f["rule"] == "band-edge-droop"]
    assert [f["channels"] for f in droop] == [["TACHO-HSS"]]
    assert all(f["severity"] != "error" or f["waived"] for f in doc["findings"])


def test_extreme_channels_give_finite_figures_and_no_warnings() -> None:
    # robustness: rates 1 Hz..10 GHz, orders 1..20, every family, tones far up; nothing may warn
    # or come out NaN/inf (figures are None where they do not apply)
    import dataclasses
    import warnings

    from generator.analysis import ChannelResult, SystemAnalysis
    from generator.analysis.sampling import analyze_sampling
    from generator.model import Channel, Conversion, Filter, Signal, SourceRef, Tone
    from generator.quantities import Span, parse_unit

    spec = load_spec(DEMO)
    system = spec.system
    unit = parse_unit("V")
    fs_span = Span(-10.0, 10.0, "V", True)
    results = []
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for conv in ("adc-ds", "adc-sar"):
            for rate in (1.0, 1e3, 1e6, 1e10):
                for family in ("butterworth", "bessel", "chebyshev1", "chebyshev2", "elliptic"):
                    for order in (1, 20):
                        ch = Channel(
                            id="X", kind="input", title="x", source=SourceRef("x.md"), unit=unit,
                            signal=Signal(band=(0.0, rate * 0.4), peak=20.0, snr_db=200.0, out_of_band_dbfs=0.0),
                            conversion=Conversion(converter=conv, rate=rate, bits=24, full_scale=fs_span),
                            filter=Filter(family, order, rate * 0.45, 0.01, 200.0),
                            interference=(Tone(rate * 1e3 + 1.0, 3.0, "V"), Tone(rate * 0.7, -10.0, "dBFS")),
                        )
                        for c in (ch, dataclasses.replace(ch, filter=Filter(family))):
                            result = analyze_sampling(c, system)
                            assert result is not None
                            json.dumps(result.figures(), allow_nan=False)  # raises on NaN or infinity
                            renamed = dataclasses.replace(c, id=f"X{len(results)}")
                            results.append(ChannelResult.of(renamed, system, sampling=result))
        # and the rules turn them into findings without raising or warning
        findings = run_rules(SystemAnalysis(spec, tuple(results)))
        assert findings and all(f.message for f in findings)
