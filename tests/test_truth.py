"""Figures an independent recomputation would check, each against a reference outside the project.

Alias and image rejection against a dense scipy.signal.freqs_zpk evaluation over every fold band;
the scan-skew sign against a time-domain simulation (scipy.signal.lsim); jitter against a numpy
simulation of two independent jitter sources; the unipolar range against a numpy quantizer; limits
reached through other units; and the conventions the README states.
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import optimize, signal

from generator.analysis import analyze
from generator.analysis.budgets import member_filter
from generator.analysis.sampling import least_orders
from generator.dsp import budgets as dsp_budgets
from generator.dsp import filters as flt
from generator.dsp import folding
from generator.errors import SpecErrors
from generator.load import load_spec
from generator.model import Filter
from generator.rules import Finding, beyond, run_rules

from .conftest import MINIMAL


def _loss(filt: flt.AnalogFilter, f: np.ndarray) -> np.ndarray:
    """-20 log10 |H(j 2 pi f)| from scipy.signal.freqs_zpk, capped like the tool's figures at 400 dB."""
    _, h = signal.freqs_zpk(np.array(filt.zeros), np.array(filt.poles), filt.gain, 2 * np.pi * f)
    with np.errstate(divide="ignore"):
        return np.clip(-20 * np.log10(np.abs(h)), 0.0, 400.0)


def _dense_fold_min(filt: flt.AnalogFilter, fs: float, fh: float, points: int = 2001) -> tuple[float, float]:
    """Least loss on a dense grid over k fs - fh .. k fs + fh for k = 1.. up to 2000 x max(fs, corner)
    (band edges included), the reference the figure must match within 0.05 dB and never exceed."""
    top = 2000 * max(fs, filt.corner_hz)
    ks = np.arange(1, int(top / fs) + 2)
    if ks.size > 4000:  # beyond a few thousand bands, take a log-spread sample of them (edges of each kept)
        ks = np.unique(np.round(np.geomspace(1, ks[-1], 4000)).astype(int))
    per = max(21, points // max(1, ks.size // 50))
    grid = np.concatenate([np.linspace(k * fs - fh, k * fs + fh, per) for k in ks])
    loss = _loss(filt, grid)
    i = int(np.argmin(loss))
    best, where = float(loss[i]), float(grid[i])
    # the grid's best point refined between its neighbours (scipy.optimize, bounded Brent), so a narrow
    # ripple trough between two grid points is not missed by the reference
    k = round(where / fs)  # the band the best point lies in: the refinement stays inside it
    lo = max(float(grid[max(i - 1, 0)]), k * fs - fh)
    hi = min(float(grid[min(i + 1, grid.size - 1)]), k * fs + fh)
    if hi > lo:
        res = optimize.minimize_scalar(lambda f: float(_loss(filt, np.array([f]))[0]), bounds=(lo, hi),
                                       method="bounded", options={"xatol": 1e-9 * hi})
        if res.success and float(res.fun) < best:
            best, where = float(res.fun), float(res.x)
    return best, where


# ------------------------------------------------------------------------------ 1. alias rejection


def test_chebyshev2_notch_at_the_first_alias_is_not_taken_for_the_worst_case() -> None:
    # A 4th-order chebyshev2 (70 dB floor) cornered so that its first transmission zero sits on fs - f_high:
    # the loss there is enormous, but the stopband rises back to the 70 dB floor between and beyond the zeros
    # and tends to it as f grows (even order). Reference: scipy.signal.freqs_zpk on a dense grid.
    fs, fh = 48e3, 10e3
    proto = flt.design("chebyshev2", 4, 1.0, 0.1, 70.0)
    notch = min(abs(z.imag) for z in proto.zeros) / (2 * math.pi)
    filt = flt.design("chebyshev2", 4, (fs - fh) / notch, 0.1, 70.0)
    assert flt.attenuation_db(filt, fs - fh) > 150  # the single point the old figure read
    got = folding.alias_rejection(filt, fs, fh)
    dense, _ = _dense_fold_min(filt, fs, fh)
    assert got.db <= dense + 1e-9
    assert dense - got.db < 0.05
    assert_allclose(got.db, 70.0, atol=1e-6)  # the chebyshev2 floor [WT]


def test_elliptic_worst_case_lies_past_its_notch() -> None:
    # 5th-order elliptic, 0.1 dB ripple, 60 dB floor, notch placed at fs - f_high: the worst fold lies elsewhere
    fs, fh = 10e3, 2e3
    proto = flt.design("elliptic", 5, 1.0, 0.1, 60.0)
    notch = min(abs(z.imag) for z in proto.zeros) / (2 * math.pi)
    filt = flt.design("elliptic", 5, (fs - fh) / notch, 0.1, 60.0)
    got = folding.alias_rejection(filt, fs, fh)
    dense, where = _dense_fold_min(filt, fs, fh)
    assert got.db <= dense + 1e-9 and dense - got.db < 0.05
    assert abs(got.frequency_hz - where) < 0.02 * fs  # and it says where (within the grid's spacing)
    assert flt.attenuation_db(filt, fs - fh) - got.db > 15  # what the single-point reading overstated by


@settings(max_examples=60, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(
    family=st.sampled_from(flt.FAMILIES),
    order=st.integers(1, 12),
    ripple=st.floats(0.01, 3.0),
    stop=st.floats(20.0, 120.0),
    corner_ratio=st.floats(0.3, 3.0),
    band_ratio=st.floats(0.05, 0.5),
)
def test_alias_rejection_is_the_least_loss_over_every_fold_band(
        family: str, order: int, ripple: float, stop: float, corner_ratio: float, band_ratio: float) -> None:
    # property (dense grid of scipy.signal.freqs_zpk over k fs +/- f_high, k >= 1): the figure is never larger
    # than the grid's least value and within 0.05 dB of it
    fs = 1000.0
    fh = band_ratio * fs
    filt = flt.design(family, order, corner_ratio * fs, ripple, max(stop, ripple + 1.0))
    got = folding.alias_rejection(filt, fs, fh)
    dense, _ = _dense_fold_min(filt, fs, fh)
    assert got.db <= dense + 1e-9
    assert dense - got.db < 0.05


def _ds_dense(filt: flt.AnalogFilter | None, fs: float, fh: float, dec: folding.Decimation) -> float:
    """Least analog + digital loss over the fold bands up to 3 f_mod: analog from scipy.signal.freqs_zpk,
    digital the stopband rejection wherever the distance to the nearest multiple of f_mod reaches the
    stopband edge (the decimation filter repeats at f_mod), else 0 dB."""
    assert dec.modulator_rate_hz is not None
    top = 3 * dec.modulator_rate_hz
    grid = np.concatenate([np.linspace(k * fs - fh, k * fs + fh, 41) for k in range(1, int(top / fs) + 1)])
    analog = _loss(filt, grid) if filt is not None else np.zeros_like(grid)
    d = np.abs(np.remainder(grid + dec.modulator_rate_hz / 2, dec.modulator_rate_hz) - dec.modulator_rate_hz / 2)
    digital = np.where(d >= dec.stopband_hz, dec.rejection_db, 0.0)
    return float(np.min(analog + digital))


@pytest.mark.parametrize(("family", "order", "corner", "rejection"), [
    ("butterworth", 3, 100e3, 100.0),  # the modulator alias decides
    ("butterworth", 4, 100e3, 60.0),  # a weak decimation filter decides, near fs
    ("elliptic", 4, 60e3, 100.0),  # an even-order floor near the modulator rate
    ("chebyshev2", 5, 400e3, 120.0),
])
def test_delta_sigma_rejection_against_a_dense_model(family: str, order: int, corner: float,
                                                     rejection: float) -> None:
    fs, fh = 48e3, 20e3
    dec = folding.Decimation(6.144e6, 0.4535 * fs, 0.5465 * fs, rejection)
    filt = flt.design(family, order, corner, 0.1, 60.0)
    got = folding.alias_rejection(filt, fs, fh, dec)
    dense = _ds_dense(filt, fs, fh, dec)
    assert got.db <= dense + 1e-9 and dense - got.db < 0.05


def _write(tree: Path, cid: str, body: str) -> None:
    (tree / "channels" / f"{cid}.md").write_text(body, encoding="utf-8")


def _ds_channel(filt: str = "") -> str:
    return f"""+++
title = "delta-sigma input"
kind = "input"
unit = "g"

[signal]
band = ["2 Hz", "20 kHz"]
peak = "20 g"
snr = "90 dB"
out_of_band = "-20 dBFS"

[sensor]
sensitivity = "100 mV/g"

[conversion]
converter = "ds"
{filt}
+++
"""


@pytest.fixture
def tree(tmp_path: Path) -> Path:
    dest = tmp_path / "specs"
    shutil.copytree(MINIMAL, dest)
    return dest


def _rules(tree: Path, rule: str) -> list[Finding]:
    return [f for f in run_rules(analyze(load_spec(tree))) if f.rule == rule and not f.waived]


def test_delta_sigma_without_a_filter_gets_the_verdict_of_a_0_db_filter(tree: Path) -> None:
    # Content near the 6.144 MHz modulator rate folds through the modulator before the decimation filter acts
    # (sampling theorem, Oppenheim & Schafer ch. 4): without an analog filter nothing rejects it, exactly as
    # behind a filter that loses 0 dB there (a 1st-order butterworth cornered at 1 THz: 10 log10(1 + 1e-11)).
    _write(tree, "DS-1", _ds_channel())
    none = _rules(tree, "alias-rejection")
    _write(tree, "DS-1", _ds_channel('[filter]\nfamily = "butterworth"\norder = 1\ncorner = "1 THz"'))
    zero = _rules(tree, "alias-rejection")
    assert [f.severity for f in none if "DS-1" in f.channels] == ["error"]
    assert [f.severity for f in zero if "DS-1" in f.channels] == ["error"]
    # a filter that does its job passes: 3rd-order butterworth at 100 kHz gives 60 log10(6.124e6 / 1e5) ~ 107 dB
    _write(tree, "DS-1", _ds_channel('[filter]\nfamily = "butterworth"\norder = 3\ncorner = "100 kHz"'))
    assert not [f for f in _rules(tree, "alias-rejection") if "DS-1" in f.channels]


def test_delta_sigma_data_that_is_missing_is_said(tree: Path) -> None:
    system = tree / "system.toml"
    text = system.read_text(encoding="utf-8")
    # no modulator rate and no oversampling ratios: where the modulator folds cannot be placed
    system.write_text(text.replace('modulator_rate = "6.144 MHz"\n', "").replace(
        "oversampling_ratios = [64, 128, 256]\n", ""), encoding="utf-8")
    _write(tree, "DS-1", _ds_channel('[filter]\nfamily = "butterworth"\norder = 3\ncorner = "100 kHz"'))
    found = [f for f in _rules(tree, "alias-rejection") if "DS-1" in f.channels]
    assert [f.severity for f in found] == ["warning"] and "modulator_rate" in found[0].message
    # no decimation filter data either: near fs only the analog filter counts, and it does not reach 84 dB
    system.write_text(system.read_text(encoding="utf-8").replace("passband = 0.4535\n", "")
                      .replace("stopband = 0.5465\n", "").replace('stopband_rejection = "100 dB"\n', ""),
                      encoding="utf-8")
    found = [f for f in _rules(tree, "alias-rejection") if "DS-1" in f.channels]
    assert [f.severity for f in found] == ["error"] and "does not describe its decimation filter" in found[0].message


def test_least_orders_meet_the_same_definition() -> None:
    # Each family's least order is the least n whose design reaches the requirement by the very figure the
    # channel reports: checked independently on a dense scipy grid (that n passes, n - 1 does not).
    fs, fh, need = 48e3, 18e3, 70.0
    found = least_orders(fs, fh, 0.5, need)
    assert found["elliptic"] is not None and found["butterworth"] is not None
    for family, design in found.items():
        if design is None:  # bessel: more than 20 poles for so short a transition
            continue
        assert _dense_fold_min(design.as_filter(), fs, fh)[0] >= need - 1e-6, family
        if design.order > 1:
            lower = flt.design_for_flatness(family, design.order - 1, fh, 0.5, max(need, 0.51))
            if lower is not None:
                assert _dense_fold_min(lower.as_filter(), fs, fh)[0] < need, family


def _image_dense(filt: flt.AnalogFilter | None, fs: float, fh: float, hold: bool) -> float:
    """Least image level below its tone over tones 0 < f <= f_high and images k fs +/- f, k = 1..60:
    20 log10 |sinc(f/fs) / sinc(g/fs)| (numpy's sinc; the zero-order hold, ADI MT-017) + the filter's loss."""
    tones = np.linspace(fh / 400, fh, 400)
    best = math.inf
    for k in range(1, 61):
        for g in (k * fs - tones, k * fs + tones):
            hold_db = 20 * np.log10(np.abs(np.sinc(tones / fs)) / np.abs(np.sinc(g / fs))) if hold else 0.0
            loss = _loss(filt, g) if filt is not None else 0.0
            best = min(best, float(np.min(hold_db + loss)))
    return best


@pytest.mark.parametrize(("family", "order", "corner"), [
    ("butterworth", 4, 4e3), ("elliptic", 4, 3e3), ("chebyshev2", 6, 9e3), ("bessel", 2, 5e3)])
@pytest.mark.parametrize("hold", [True, False])
def test_image_rejection_is_the_least_over_every_image(family: str, order: int, corner: float, hold: bool) -> None:
    fs, fh = 12.8e3, 2e3
    filt = flt.design(family, order, corner, 0.1, 50.0)
    got = folding.image_rejection(filt, fs, fh, hold)
    dense = _image_dense(filt, fs, fh, hold)
    assert got.db <= dense + 1e-9 and dense - got.db < 0.05


# ------------------------------------------------------------------------------ 3. scan-skew sign


def _fitted_phase(filt: flt.AnalogFilter, f: float, sample_times: np.ndarray, nominal: np.ndarray) -> float:
    """Phase of a unit sine at f after ``filt``, simulated in the time domain (scipy.signal.lsim, ZOH-exact
    input on a fine grid) and read at ``sample_times``; fitted by least squares against the nominal sample
    instants, as the recorded stream presents it."""
    b, a = signal.zpk2tf(np.array(filt.zeros), np.array(filt.poles), filt.gain)
    t = np.linspace(0.0, sample_times[-1], int(sample_times[-1] * f * 400) + 1)
    _, y, _ = signal.lsim((b, a), np.sin(2 * np.pi * f * t), t)
    ys = np.interp(sample_times, t, y)
    keep = nominal > 0.5 * nominal[-1]  # past the transient
    basis = np.column_stack([np.sin(2 * np.pi * f * nominal[keep]), np.cos(2 * np.pi * f * nominal[keep])])
    (c_sin, c_cos), *_ = np.linalg.lstsq(basis, ys[keep], rcond=None)
    return math.atan2(c_cos, c_sin)


def test_scan_skew_sign_against_a_time_domain_simulation() -> None:
    # a sampled at nT, b at nT + 1/4010 s (one multiplexer slot later); both behind different filters.
    f, fs, slot = 100.0, 2000.0, 1 / 4010
    a = member_filter(Filter("butterworth", 4, 400.0))
    b = member_filter(Filter("bessel", 4, 400.0))
    assert a is not None and b is not None
    nominal = np.arange(0, 0.4, 1 / fs)
    sim = _fitted_phase(a, f, nominal, nominal) - _fitted_phase(b, f, nominal + slot, nominal)
    assert dsp_budgets.phase_difference(a, b, f, 0.0, slot) == pytest.approx(sim, abs=2e-3)
    # the old sign would read the skew as adding to the filter difference: 2 x 2 pi f t away
    assert abs(sim - (dsp_budgets.sampled_phase(a, f) - dsp_budgets.sampled_phase(b, f) + 2 * math.pi * f * slot)) > 0.2


# ------------------------------------------------------------------------------ 4. jitter


def test_aperture_and_clock_jitter_add_as_rss(tree: Path) -> None:
    system = tree / "system.toml"
    text = system.read_text(encoding="utf-8")
    system.write_text(text.replace('divider_range = [4, 16777216]  # a 24-bit counter',
                                   'divider_range = [4, 16777216]  # a 24-bit counter\njitter = "20 ps"')
                      .replace('bits = 24\n', 'bits = 24\njitter = "20 ps"\n', 1), encoding="utf-8")
    acc = analyze(load_spec(tree)).result("ACC-1")
    assert acc.amplitude is not None
    # 20 ps and 20 ps, independent: sqrt(20^2 + 20^2) = 28.284 ps (common practice; ADI MT-007)
    assert_allclose(acc.figures["sampling_jitter_s"], math.hypot(20e-12, 20e-12), rtol=1e-12)
    # and the SNR a numpy simulation gives with both sources drawn independently, at the 10 kHz band top
    rng = np.random.default_rng(7)
    f, n = 10e3, 200_000
    t = np.arange(n) / 48e3
    dt = rng.normal(0, 20e-12, n) + rng.normal(0, 20e-12, n)
    err = np.sin(2 * np.pi * f * (t + dt)) - np.sin(2 * np.pi * f * t)
    measured = 10 * math.log10(0.5 / np.mean(err**2))
    assert acc.figures["jitter_snr_db"] == pytest.approx(measured, abs=0.1)


# ------------------------------------------------------------------------------ 5. unipolar ranges


@pytest.mark.parametrize("bits", [8, 12])
def test_unipolar_full_scale_sine_matches_a_quantizer_simulation(tree: Path, bits: int) -> None:
    # numpy: an ideal N-bit quantizer on 0..5 V, a sine of 2.5 V about 2.5 V (the largest that fits) sampled
    # incommensurately; its SNR is the ideal SQNR 6.02 N + 1.76 dB (tests/REFERENCES.md R5 [MT-001]).
    rng_t = np.arange(1 << 16)
    x = 2.5 + 2.5 * np.sin(2 * np.pi * 0.1234567 * rng_t) * (1 - 1e-12)
    q = 5.0 / 2**bits
    y = np.clip(np.floor(x / q), 0, 2**bits - 1) * q + q / 2
    measured = 10 * math.log10(np.mean((x - 2.5) ** 2) / np.mean((y - x) ** 2))
    _write(tree, "UNI-1", f"""+++
title = "unipolar"
kind = "input"
unit = "V"

[signal]
band = ["0 Hz", "20 kHz"]
peak = "2.5 V"

[conversion]
converter = "sar"
rate = "48 kS/s"
bits = {bits}
full_scale = "0..5 V"

[filter]
family = "butterworth"
order = 8
corner = "21 kHz"
+++
""")
    analysis = analyze(load_spec(tree))
    f = analysis.result("UNI-1").figures
    assert_allclose(f["peak_level_dbfs"], 0.0, atol=1e-12)  # a full-scale sine is 0 dBFS (AES17)
    assert_allclose(f["range_usage"], 1.0, rtol=1e-12)
    assert f["total_snr_db"] == pytest.approx(measured, abs=0.25)
    assert f["total_snr_db"] <= f["sqnr_db"] + 1e-9  # never more than the converter's ideal SQNR
    assert not [x for x in run_rules(analysis) if x.rule == "clipping" and "UNI-1" in x.channels]


# ------------------------------------------------------------------------------ 6. outputs


def _out(peak: str, extra: str = "") -> str:
    return f"""+++
title = "drive"
kind = "output"
unit = "V"

[signal]
band = ["0 Hz", "1 kHz"]
peak = "{peak}"
{extra}

[conversion]
converter = "dac"
gain = "20 dB"

[filter]
family = "butterworth"
order = 4
corner = "4 kHz"
+++
"""


def test_output_peak_beyond_full_scale_times_gain_is_clipping(tree: Path) -> None:
    # ±10 V x 10 = 100 V of amplitude: 100 V fits, 101 V does not (arithmetic)
    _write(tree, "OUT-1", _out("100 V"))
    assert not [f for f in _rules(tree, "clipping") if "OUT-1" in f.channels]
    _write(tree, "OUT-1", _out("101 V"))
    assert [f.channels for f in _rules(tree, "clipping")] == [("OUT-1",)]


def test_output_snr_is_judged(tree: Path) -> None:
    # 16 bits, a 10 V-amplitude sine uses 10 % of the range: SQNR 98.09 - 20 dB = 78.09 dB (MT-001), so
    # 80 dB is out of reach and 70 dB is not
    _write(tree, "OUT-1", _out("10 V", 'snr = "80 dB"'))
    found = [f for f in _rules(tree, "noise-floor") if "OUT-1" in f.channels]
    assert len(found) == 1 and "78.1 dB" in found[0].message
    _write(tree, "OUT-1", _out("10 V", 'snr = "70 dB"'))
    assert not [f for f in _rules(tree, "noise-floor") if "OUT-1" in f.channels]


def test_keys_an_image_channel_cannot_use_are_refused(tree: Path) -> None:
    _write(tree, "CAM-1", """+++
title = "camera"
kind = "image"

[sensor]
pixels = [64, 1]
active_area = ["1 mm", "0.01 mm"]

[conversion]
link = "net"
rate = "1 kHz"
bits = 12
gain = "2"
+++
""")
    with pytest.raises(SpecErrors) as caught:
        load_spec(tree)
    assert any("gain" in str(e) and e.line == 13 for e in caught.value.errors)


# ------------------------------------------------------------------------------ 7. limits


@pytest.mark.parametrize(("peak", "sensitivity", "unit"), [("100 g", "100 mV/g", "g"), ("10 V", None, "V"),
                                                           ("980.665 m/s²", "100 mV/g", "m/s²")])
def test_a_peak_exactly_at_full_scale_does_not_clip(tree: Path, peak: str, sensitivity: str | None,
                                                     unit: str) -> None:
    # 100 g x 100 mV/g = 10 V exactly; floating point reaches 10.000000000000002 V (arithmetic)
    sens = f'[sensor]\nsensitivity = "{sensitivity}"\n' if sensitivity else ""
    _write(tree, "LIM-1", f"""+++
title = "limit"
kind = "input"
unit = "{unit}"

[signal]
band = ["0 Hz", "100 Hz"]
peak = "{peak}"

{sens}
[conversion]
converter = "sar"
rate = "1 kS/s"

[filter]
family = "butterworth"
order = 8
corner = "150 Hz"
+++
""")
    assert not [f for f in _rules(tree, "clipping") if "LIM-1" in f.channels]


def test_one_tolerance_for_every_threshold() -> None:
    assert not beyond(10.000000000000002, 10.0)
    assert beyond(10.0001, 10.0)
    assert not beyond(0.0, 0.0)


# ------------------------------------------------------------------------------ conventions


def test_flatness_is_the_worst_loss_inside_the_band(tree: Path) -> None:
    # a 4th-order chebyshev1 with 1 dB of ripple loses its whole ripple at DC (even order) while its ripple
    # edge sits above the band top; a dense scipy evaluation over the band finds the same 1 dB [WT]
    body = _ds_channel('[filter]\nfamily = "chebyshev1"\norder = 4\ncorner = "21 kHz"\nripple = "1 dB"')
    _write(tree, "DS-1", body.replace('band = ["2 Hz", "20 kHz"]', 'band = ["0 Hz", "20 kHz"]')
           .replace('out_of_band = "-20 dBFS"', 'out_of_band = "-20 dBFS"\nflatness = "0.5 dB"'))
    analysis = analyze(load_spec(tree))
    s = analysis.result("DS-1").sampling
    assert s is not None and s.filter is not None and s.band_edge_droop_db is not None
    dense = float(np.max(_loss(s.filter, np.linspace(0.0, 20e3, 20001))))
    assert s.band_edge_droop_db < 0.5 < dense  # the band top alone passes
    assert s.passband_loss_db == pytest.approx(dense, abs=1e-4)
    assert [f.channels for f in run_rules(analysis) if f.rule == "band-edge-droop"] == [("DS-1",)]


def test_scan_order_ignores_case(tree: Path) -> None:
    for cid in ("b-1", "A-2"):
        _write(tree, cid, _ds_channel('[filter]\nfamily = "butterworth"\norder = 3\ncorner = "100 kHz"'))
    ids = [c.id for c in load_spec(tree).channels]
    assert ids == sorted(ids, key=str.lower) and ids.index("A-2") < ids.index("b-1")


def test_a_stated_packed_data_rate_is_not_flagged(tree: Path) -> None:
    acc = tree / "channels" / "ACC-1.md"
    # 48 kS/s x 24 bits packed = 1.152 Mbit/s; in 32-bit containers 1.536 Mbit/s (IEC 60908 arithmetic)
    stated = '[stated]\ndata_rate = "1.152 Mbit/s"\n\n[filter]'
    acc.write_text(acc.read_text(encoding="utf-8").replace("[filter]", stated), encoding="utf-8")
    analysis = analyze(load_spec(tree))
    assert analysis.result("ACC-1").figures["stated_data_rate_basis"] == "packed"
    assert not [f for f in run_rules(analysis) if f.rule == "stated-figure-mismatch"]
    acc.write_text(acc.read_text(encoding="utf-8").replace('"1.152 Mbit/s"', '"1.3 Mbit/s"'), encoding="utf-8")
    found = [f for f in run_rules(analyze(load_spec(tree))) if f.rule == "stated-figure-mismatch"]
    assert len(found) == 1 and "matches neither" in found[0].message


def test_filter_keys_a_family_has_no_use_for_are_refused(tree: Path) -> None:
    acc = tree / "channels" / "ACC-1.md"
    acc.write_text(acc.read_text(encoding="utf-8").replace('corner = "100 kHz"', 'corner = "100 kHz"\nripple = "1 dB"'),
                   encoding="utf-8")
    with pytest.raises(SpecErrors) as caught:
        load_spec(tree)
    assert [(e.line, "ripple" in str(e)) for e in caught.value.errors] == [(24, True)]


def test_a_proposal_that_changes_family_removes_the_keys_it_leaves_unused() -> None:
    from generator.edit import edit_header

    text = ('+++\ntitle = "x"\n\n[filter]\nfamily = "elliptic"\norder = 5\nripple = "0.5 dB"\n'
            'stopband_attenuation = "60 dB"  # supplier\n+++\nnotes\n')
    after = edit_header(text, [("filter.family", '"butterworth"'), ("filter.ripple", None),
                               ("filter.stopband_attenuation", None), ("conversion.rate", '"1 kS/s"')])
    assert after == ('+++\ntitle = "x"\n\n[filter]\nfamily = "butterworth"\norder = 5\n\n[conversion]\n'
                     'rate = "1 kS/s"\n+++\nnotes\n')
