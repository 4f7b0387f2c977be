"""Budgets of shared hardware: hand-derived cases, scipy cross-checks, and every budget rule on a
failing and a passing fixture."""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from generator.analysis import analyze
from generator.analysis.budgets import member_filter
from generator.dsp import budgets as dsp
from generator.dsp import filters
from generator.load import load_spec
from generator.model import Filter
from generator.rules import Finding, run_rules

from .conftest import DEMO, MINIMAL

# ------------------------------------------------------------------ pure numerics


def test_cd_da_payload() -> None:
    # tests/REFERENCES.md R8.1 [IEC60908]: 44.1 kHz x 16 bit x 2 channels = 1,411,200 bit/s (exact)
    assert dsp.payload_rate(44_100, 16, 2) == 1_411_200
    # one hour = 1,411,200 x 3600 / 8 = 635,040,000 B (tests/REFERENCES.md R8.1 [DER])
    assert dsp.record_bytes(dsp.payload_rate(44_100, 16, 2), 3600) == 635_040_000


@pytest.mark.parametrize(("bits", "container", "eff", "over"), [
    # tests/REFERENCES.md R8.2 [DER]: N in C, efficiency N/C, overhead (C-N)/N
    (12, 16, 0.75, 1 / 3), (14, 16, 0.875, 0.14286), (20, 24, 0.83333, 0.2), (18, 32, 0.5625, 0.77778),
])
def test_container_efficiency(bits: int, container: int, eff: float, over: float) -> None:
    assert_allclose(dsp.container_efficiency(bits, container), eff, rtol=1e-4)
    assert_allclose(dsp.container_overhead(bits, container), over, rtol=1e-4)


def test_packed_stream_example() -> None:
    # tests/REFERENCES.md R8.3 [DER]: 8 ch, 100 kS/s, 14 b in 16 b -> payload 11.2 Mbit/s, stored 12.8 Mbit/s
    assert dsp.payload_rate(100e3, 14, 8) == pytest.approx(11.2e6)
    assert dsp.stream_rate(100e3, 16, 8) == pytest.approx(12.8e6)


def test_multiplexer_overload_is_128_percent() -> None:
    # hand: 32 x 10 kS/s = 320 kS/s on a 250 kS/s converter: 320 / 250 = 1.28
    assert dsp.utilisation(32 * 10e3, 250e3) == pytest.approx(1.28)
    # slot 5 of that scan samples 5 / 320 kS/s = 15.625 us after slot 0 (even scan, common practice)
    assert dsp.scan_skew(5, 320e3) == pytest.approx(15.625e-6)


def test_link_overload_hand_case() -> None:
    # hand: 64 x 51.2 kS/s x 32 bit = 104,857,600 bit/s > 100 Mbit/s even before overhead
    payload = dsp.stream_rate(51.2e3, 32, 64)
    assert payload == 104_857_600
    # with 8 % overhead: 104,857,600 x 1.08 = 113,246,208 bit/s; usable at 20 % headroom: 80 Mbit/s
    assert dsp.link_load(payload, 0.08) == pytest.approx(113_246_208)
    assert dsp.usable_capacity(100e6, 0.2) == pytest.approx(80e6)


def test_clock_division_48k_and_44k1() -> None:
    # 24.576 MHz / 512 = 48 kHz exactly (AES5 48 kHz family; arithmetic)
    assert dsp.exact_divider(24.576e6, 48e3) == 512
    # 24.576 MHz / 44.1 kHz = 557.28..., not an integer: no exact divider
    assert dsp.exact_divider(24.576e6, 44.1e3) is None
    d = dsp.nearest_divider(24.576e6, 44.1e3)
    assert d == 557
    # hand: 24,576,000 / 557 = 44,122.0826 Hz; (44,122.0826 - 44,100) / 44,100 x 1e6 = +500.74 ppm
    assert 24.576e6 / d == pytest.approx(44_122.0826, rel=1e-8)
    assert dsp.ppm_error(24.576e6 / d, 44.1e3) == pytest.approx(500.74, abs=0.01)
    # a divider list restricts the choice: among 256/512/1024 the nearest to 44.1 kHz is 512 (48 kHz)
    assert dsp.nearest_divider(24.576e6, 44.1e3, (256, 512, 1024)) == 512
    # and a range clamps it
    assert dsp.nearest_divider(24.576e6, 44.1e3, divider_range=(600, 700)) == 600


def test_store_holding_time() -> None:
    # hand: 1 TB at 1.536 Mbit/s holds 1e12 x 8 / 1.536e6 = 5,208,333 s = 1446.76 h
    assert dsp.holding_time(1e12, 1.536e6) == pytest.approx(5_208_333.33, rel=1e-9)
    assert dsp.holding_time(1e12, 0.0) == math.inf


def _scipy_phase(filt: filters.AnalogFilter, f_hz: float) -> float:
    """Phase by scipy.signal.freqs on the transfer-function form, unwrapped on a dense grid from DC."""
    b, a = signal.zpk2tf(np.array(filt.zeros), np.array(filt.poles), filt.gain)
    w = np.linspace(0.0, 2 * np.pi * f_hz, 4001)
    _, h = signal.freqs(b, a, worN=w)
    return float(np.unwrap(np.angle(h))[-1])


@pytest.mark.parametrize("family", ["butterworth", "bessel", "chebyshev1", "chebyshev2", "elliptic"])
@pytest.mark.parametrize("order", [2, 4, 7])
def test_phase_response_matches_scipy_freqs(family: str, order: int) -> None:
    zpk = member_filter(Filter(family, order, 1000.0, 0.5, 60.0))
    assert zpk is not None
    # scipy.signal.freqs, unwrapped: the exact phase at 0.3, 0.9 and 1.0 x the corner
    for f in (300.0, 900.0, 1000.0):
        assert_allclose(filters.phase_rad(zpk, f), _scipy_phase(zpk, f), atol=1e-6)


def test_group_delay_dc_matches_handbook() -> None:
    # tests/REFERENCES.md R2.5 [WT], [SCIPY]: tau0 x wc = 2.6131 (butter 4), 2.1139 (bessel 4)
    wc = 2 * math.pi * 1000.0
    butter = member_filter(Filter("butterworth", 4, 1000.0))
    bessel = member_filter(Filter("bessel", 4, 1000.0))
    assert butter is not None and bessel is not None
    assert filters.group_delay_s(butter, 0.0) * wc == pytest.approx(2.6131, rel=1e-4)
    assert filters.group_delay_s(bessel, 0.0) * wc == pytest.approx(2.1139, rel=1e-4)


def test_phase_difference_exact_vs_dc_estimate_near_the_corner() -> None:
    # Butterworth 4 against Bessel 4, both -3 dB at 1 kHz, judged at 900 Hz (near the corner).
    a = member_filter(Filter("butterworth", 4, 1000.0))
    b = member_filter(Filter("bessel", 4, 1000.0))
    assert a is not None and b is not None
    exact = dsp.phase_difference(a, b, 900.0)
    # the same difference straight from scipy.signal.freqs (unwrapped)
    assert exact == pytest.approx(_scipy_phase(a, 900.0) - _scipy_phase(b, 900.0), abs=1e-6)
    estimate = dsp.phase_difference_dc_estimate(a, b, 900.0)
    # the Butterworth delay rises towards the corner (tau(wc)/tau0 = 1.4142, tests/REFERENCES.md R2.5) while the
    # Bessel delay stays flat, so the DC-delay estimate reads well short of the true difference
    assert abs(estimate) < 0.75 * abs(exact)
    # far below the corner both delays are flat and the estimate is good to a few per cent
    assert dsp.phase_difference_dc_estimate(a, b, 50.0) == pytest.approx(dsp.phase_difference(a, b, 50.0),
                                                                        rel=0.03)


def test_scan_skew_phase() -> None:
    # same filter, b sampled 170 us after a: b reads x(nT + 170 us), so it leads a by 2 pi x 100 Hz x 170e-6 =
    # 0.10681 rad (arithmetic; the sign is checked against a sampled simulation in test_truth.py)
    z = member_filter(Filter("butterworth", 4, 400.0))
    assert dsp.phase_difference(z, z, 100.0, 0.0, 170e-6) == pytest.approx(-2 * math.pi * 100 * 170e-6)


# ------------------------------------------------------------------ fixtures


def _channel(tree: Path, cid: str, converter: str, rate: str | None = None, extra: str = "",
             filt: str = "", top: str = "") -> None:
    rate_line = f'rate = "{rate}"\n' if rate else ""
    (tree / "channels" / f"{cid}.md").write_text(
        f'+++\ntitle = "{cid}"\nkind = "input"\nunit = "V"\n{top}\n[signal]\nband = ["0 Hz", "100 Hz"]\n'
        f'peak = "1 V"\n\n[conversion]\nconverter = "{converter}"\n{rate_line}{filt}{extra}+++\n',
        encoding="utf-8")


_FILTER = '\n[filter]\nfamily = "butterworth"\norder = 4\ncorner = "400 Hz"\n'


def _findings(tree: Path, rule: str) -> list[Finding]:
    return [f for f in run_rules(analyze(load_spec(tree))) if f.rule == rule]


@pytest.fixture
def tree(tmp_path: Path) -> Path:
    dest = tmp_path / "specs"
    shutil.copytree(MINIMAL, dest)
    return dest


def _replace(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, old
    path.write_text(text.replace(old, new), encoding="utf-8")


def test_converter_throughput_128_percent(tree: Path) -> None:
    # 32 channels x 10 kS/s on the fixture's 250 kS/s multiplexed 'sar' -> 128 %
    (tree / "channels" / "TEMP-1.md").unlink()
    for i in range(32):
        _channel(tree, f"V-{i:02d}", "sar", "10 kS/s", filt=_FILTER)
    found = _findings(tree, "converter-throughput")
    assert len(found) == 1 and "128 %" in found[0].message and "320 kS/s" in found[0].message
    assert found[0].file == "system.toml" and found[0].line > 1 and len(found[0].channels) == 32
    a = analyze(load_spec(tree))
    assert a.budgets.converter("sar").load == pytest.approx(1.28)
    assert a.totals()["converter_load"]["sar"] == pytest.approx(1.28)
    # 24 channels (240 kS/s, 96 %) pass
    for i in range(24, 32):
        (tree / "channels" / f"V-{i:02d}.md").unlink()
    assert _findings(tree, "converter-throughput") == []


def test_shared_rate(tree: Path) -> None:
    # a second channel on the simultaneous 'ds' at 96 kS/s (6.144 MHz / 64: a valid OSR) vs ACC-1's 48 kS/s
    _channel(tree, "ACC-2", "ds", "96 kS/s")
    found = _findings(tree, "shared-rate")
    assert len(found) == 1 and "ACC-2" in found[0].message and "48 kS/s" in found[0].message
    assert found[0].file == "channels/ACC-2.md"
    assert _findings(tree, "clock-divider") == []
    _channel(tree, "ACC-2", "ds", "48 kS/s")
    assert _findings(tree, "shared-rate") == []


def test_clock_divider_44k1_from_24m576(tree: Path) -> None:
    # 48 kS/s from the 24.576 MHz clock: divider 512, passes
    _replace(tree / "channels" / "TEMP-1.md", 'rate = "10 S/s"', 'rate = "48 kS/s"')
    assert _findings(tree, "clock-divider") == []
    _replace(tree / "channels" / "TEMP-1.md", 'rate = "48 kS/s"', 'rate = "44.1 kS/s"')
    found = _findings(tree, "clock-divider")
    assert len(found) == 1
    # nearest divider 557 -> 44.12208 kHz, +500.7 ppm (hand-derived above)
    assert "/557" in found[0].message and "+500.7 ppm" in found[0].message and "44.12208 kHz" in found[0].message
    assert found[0].file == "channels/TEMP-1.md"


def test_clock_divider_delta_sigma_modulator(tree: Path) -> None:
    # 6.144 MHz / 48 kS/s = OSR 128, allowed; 6.5536 MHz is 24.576 MHz / 3.75: the modulator is not MCLK / N
    _replace(tree / "system.toml", 'modulator_rate = "6.144 MHz"', 'modulator_rate = "6.5536 MHz"')
    found = _findings(tree, "clock-divider")
    msgs = " ".join(f.message for f in found)
    assert "ratio is 3.75" in msgs
    # and 48 kS/s is then 6.5536 MHz / 136.53: no allowed OSR; nearest 128 -> 51.2 kHz, +66666.7 ppm
    assert "51.2 kHz (/128, +66666.7 ppm)" in msgs


def test_link_capacity_error_and_warning(tree: Path) -> None:
    _replace(tree / "system.toml", 'rate = "48 kS/s"\nmax_rate = "192 kS/s"',
             'rate = "51.2 kS/s"\nmax_rate = "192 kS/s"')
    _replace(tree / "system.toml", 'modulator_rate = "6.144 MHz"', 'modulator_rate = "6.5536 MHz"')
    for i in range(2, 65):
        _channel(tree, f"ACC-{i}", "ds")
    found = _findings(tree, "link-capacity")
    # 64 x 51.2 kS/s x 32 bit = 104.86 Mbit/s (+ TEMP-1's 160 bit/s) x 1.08 = 113.2 Mbit/s > 100 Mbit/s
    assert len(found) == 1 and found[0].severity == "error"
    assert "104.9 Mbit/s" in found[0].message and "113.2 Mbit/s" in found[0].message
    # 48 channels: 78.64 Mbit/s x 1.08 = 84.93 Mbit/s, under 100 but over the 80 Mbit/s left by 20 % headroom
    for i in range(49, 65):
        (tree / "channels" / f"ACC-{i}.md").unlink()
    found = _findings(tree, "link-capacity")
    assert len(found) == 1 and found[0].severity == "warning" and "84.93 Mbit/s" in found[0].message
    # 40 channels: 65.54 x 1.08 = 70.78 Mbit/s: fits
    for i in range(41, 49):
        (tree / "channels" / f"ACC-{i}.md").unlink()
    assert _findings(tree, "link-capacity") == []


def test_storage_capacity(tree: Path) -> None:
    # ACC-1 48 kS/s x 32 = 1.536 Mbit/s, TEMP-1 10 S/s x 16 = 160 bit/s: 1,536,160 bit/s
    # 10,000 h: 1,536,160 x 3.6e7 / 8 = 6.913 TB > 1 TB; holds 1e12 x 8 / 1,536,160 s = 1446.6 h = 60.28 d
    _replace(tree / "system.toml", 'record_duration = "1 h"', 'record_duration = "10000 h"')
    found = _findings(tree, "storage-capacity")
    assert len(found) == 1 and "6.913 TB" in found[0].message and "holds 60.3 d" in found[0].message
    store = analyze(load_spec(tree)).budgets.store("disk")
    assert store.holding_time_s == pytest.approx(1e12 * 8 / 1_536_160)
    _replace(tree / "system.toml", 'record_duration = "10000 h"', 'record_duration = "1000 h"')
    assert _findings(tree, "storage-capacity") == []


def test_group_skew_exact_phase(tree: Path) -> None:
    # two channels on the simultaneous 'ds' (no scan skew), one behind a 4th-order Butterworth and one behind
    # a 4th-order Bessel, both at 400 Hz; group 'pair' allows 1 degree at the band edge (100 Hz)
    bessel = _FILTER.replace("butterworth", "bessel")
    _channel(tree, "P-1", "ds", filt=_FILTER, top='match = "pair"\n')
    _channel(tree, "P-2", "ds", filt=bessel, top='match = "pair"\n')
    found = _findings(tree, "group-skew")
    assert len(found) == 1 and set(found[0].channels) == {"P-1", "P-2"}
    g = analyze(load_spec(tree)).budgets.group("pair")
    za, zb = member_filter(Filter("butterworth", 4, 400.0)), member_filter(Filter("bessel", 4, 400.0))
    assert za is not None and zb is not None
    # the spread equals |phase difference| from scipy.signal.freqs at 100 Hz
    assert g.phase_error_rad == pytest.approx(abs(_scipy_phase(za, 100.0) - _scipy_phase(zb, 100.0)), abs=1e-6)
    # identical filters pass
    _channel(tree, "P-2", "ds", filt=_FILTER, top='match = "pair"\n')
    assert _findings(tree, "group-skew") == []


def test_group_skew_from_multiplexer_scan(tree: Path) -> None:
    # two identical channels on the multiplexed 'sar' at 2 kS/s, plus TEMP-1 at 10 S/s: aggregate 4010 S/s,
    # slots 0 and 1 are 1/4010 s apart: 2 pi x 100 x 249.4 us = 8.98 degrees > 1 degree
    _channel(tree, "P-1", "sar", "2 kS/s", filt=_FILTER, top='match = "pair"\n')
    _channel(tree, "P-2", "sar", "2 kS/s", filt=_FILTER, top='match = "pair"\n')
    found = _findings(tree, "group-skew")
    assert len(found) == 1 and "8.98°" in found[0].message
    g = analyze(load_spec(tree)).budgets.group("pair")
    assert g.skew_s == pytest.approx(1 / 4010)


def test_stated_figure_mismatch(tree: Path) -> None:
    acc = tree / "channels" / "ACC-1.md"
    # computed: 48 kS/s x 32 = 1.536 Mbit/s; LSB 20 V / 2^24 = 1.19209 uV ([1241])
    _replace(acc, 'converter = "ds"\n', 'converter = "ds"\n\n[stated]\ndata_rate = "1.6 Mbit/s"\nlsb = "1.2 µV"\n')
    found = _findings(tree, "stated-figure-mismatch")
    assert len(found) == 1 and "+4.17 %" in found[0].message and found[0].severity == "warning"
    # 1.2 uV is within 1 % (+0.66 %); 1.54 Mbit/s too (+0.26 %)
    _replace(acc, '"1.6 Mbit/s"', '"1.54 Mbit/s"')
    assert _findings(tree, "stated-figure-mismatch") == []
    _replace(acc, '"1.2 µV"', '"2.384 µV"')
    assert len(_findings(tree, "stated-figure-mismatch")) == 1


def test_demo_budgets() -> None:
    a = analyze(load_spec(DEMO))
    net = a.budgets.link("net0")
    # 9 x 51.2 kS/s x 32 + (2 x 2.048 k + 1 k + 2 x 400) x 16 + 2 x 12.8 k x 16 + 1.5 k x 2048 x 16
    expected = 9 * 51.2e3 * 32 + (2 * 2048 + 1000 + 2 * 400) * 16 + 2 * 12.8e3 * 16 + 1500 * 2048 * 16
    assert net.data_rate_bps == pytest.approx(expected)
    assert net.utilisation == pytest.approx(expected * 1.08 / 100e6)
    assert all(c.ok for c in a.budgets.clocks)


def test_dividers_of_absurd_rates_are_none_not_a_crash() -> None:
    # a rate of 5e-321 Hz from 24.576 MHz needs a divider past 2^63: no integer divider exists [DER]
    from generator.dsp import budgets as b

    assert b.exact_divider(24.576e6, 5e-321) is None
    assert b.nearest_divider(24.576e6, 5e-321, divider_range=(4, 65536)) == 65536
