"""Chart data checked against references outside the project: filter formulas, scipy.signal, numpy."""

from __future__ import annotations

import base64
import math
from typing import Any

import numpy as np
import pytest
from scipy import signal as sps

from generator import views
from generator.analysis import ChannelResult, SystemAnalysis, analyze
from generator.analysis.sampling import SamplingResult
from generator.charts import (
    aperture_chart,
    channel_charts,
    filter_response_chart,
    folding_chart,
    hold_chart,
    noise_budget_chart,
    trade_off_chart,
    trade_off_rates,
)
from generator.dsp import filters as flt
from generator.load import load_spec
from generator.rules import run_rules

from .conftest import DEMO


@pytest.fixture(scope="module")
def demo() -> SystemAnalysis:
    return analyze(load_spec(DEMO))


def _decode(arr: Any) -> np.ndarray:
    """plotly's typed array -> numpy (base64 -> np.frombuffer), as plotly.js reads it."""
    return np.frombuffer(base64.b64decode(arr["bdata"]), dtype="<" + arr["dtype"]).astype(float)


def _trace(fig: dict[str, Any], name: str) -> dict[str, Any]:
    return next(t for t in fig["data"] if t["name"].startswith(name))


def _scipy_zpk(filt: flt.AnalogFilter) -> tuple[Any, Any, Any]:
    """The same family designed directly with scipy.signal at a 1 rad/s corner (analog=True)."""
    n, rp, rs = filt.order, filt.ripple_db, filt.stopband_db
    if filt.family == "butterworth":
        return sps.butter(n, 1.0, analog=True, output="zpk")
    if filt.family == "bessel":
        return sps.bessel(n, 1.0, analog=True, output="zpk", norm="mag")
    if filt.family == "chebyshev1":
        return sps.cheby1(n, rp, 1.0, analog=True, output="zpk")
    if filt.family == "chebyshev2":
        return sps.cheby2(n, rs, 1.0, analog=True, output="zpk")
    return sps.ellip(n, rp, rs, 1.0, analog=True, output="zpk")


def _butterworth_channel(demo: SystemAnalysis) -> ChannelResult:
    """A filtered demo input channel with its filter replaced by a 4-pole Butterworth at 1 kHz and
    the stop edge put at twice the corner, so the trace holds the point 2 f_c exactly."""
    base = next(r for r in demo.channels if r.sampling is not None and r.sampling.filter is not None
                and not r.sampling.delta_sigma)
    assert base.sampling is not None
    s = SamplingResult(rate_hz=2400.0, band_low_hz=0.0, band_high_hz=400.0, nyquist_hz=1200.0,
                       rate_over_nyquist=3.0, first_alias_hz=2000.0, flatness_db=0.5,
                       filter=flt.design("butterworth", 4, 1000.0), required_alias_rejection_db=20.0,
                       stop_edge_hz=2000.0, alias_rejection_source="analog filter")
    return ChannelResult.of(base.channel, base.system, sampling=s)


# ---------------------------------------------------------------------------------------------
# 1. Filter response over its mask
# ---------------------------------------------------------------------------------------------


def test_filter_trace_matches_the_butterworth_formula(demo: SystemAnalysis) -> None:
    chart = filter_response_chart(_butterworth_channel(demo))
    assert chart is not None and chart.id == "chart-filter"
    gain = _trace(chart.figure, "filter gain")
    x, y = _decode(gain["x"]), _decode(gain["y"])
    assert gain["x"]["dtype"] == "f4"
    # |H(j w)|^2 = 1 / (1 + (f / f_c)^(2n)) [Williams & Taylor]: at 2 f_c, n = 4, the loss is
    # 10 log10(1 + 2^8) = 24.1 dB; at the corner 10 log10 2 = 3.0103 dB
    i2 = int(np.argmin(np.abs(x - 2000.0)))
    assert x[i2] == pytest.approx(2000.0, rel=1e-6)
    assert y[i2] == pytest.approx(-10.0 * math.log10(1.0 + 2.0 ** 8), abs=1e-4)
    ic = int(np.argmin(np.abs(x - 1000.0)))
    assert y[ic] == pytest.approx(-10.0 * math.log10(2.0), abs=1e-4)
    # the whole trace against the same formula
    np.testing.assert_allclose(y, -10.0 * np.log10(1.0 + (x / 1000.0) ** 8), atol=1e-3)
    # group delay, µs: Butterworth tau(0) = 1 / (w_c sin(pi / 2n)) (sum over the poles, Williams & Taylor);
    # the first grid point, f_c / 2.5 / 20 below, is within 0.1 % of DC
    delay = _decode(_trace(chart.figure, "group delay")["y"])
    assert delay[0] == pytest.approx(1e6 / (2 * math.pi * 1000.0 * math.sin(math.pi / 8)), rel=1e-3)
    # the mask: -flatness to f_high, -required from the stop edge up
    np.testing.assert_allclose(_decode(_trace(chart.figure, "allowed passband loss")["y"]), [-0.5, -0.5])
    req = _trace(chart.figure, "required rejection")
    np.testing.assert_allclose(_decode(req["y"]), [-20.0, -20.0])
    assert _decode(req["x"])[0] == 2000.0
    # Nyquist and the first alias are marked
    xs = {sh["x0"] for sh in chart.figure["layout"]["shapes"]}
    assert {1200.0, 2000.0} <= xs


def test_filter_trace_of_each_demo_channel_matches_scipy(demo: SystemAnalysis) -> None:
    seen = 0
    for r in demo.channels:
        chart = filter_response_chart(r)
        if chart is None or r.sampling is None or r.sampling.filter is None:
            continue
        filt = r.sampling.filter
        gain = _trace(chart.figure, "filter gain")
        x, y = _decode(gain["x"]), _decode(gain["y"])
        # scipy.signal.freqs_zpk on the prototype, evaluated at f / corner
        _, h = sps.freqs_zpk(*_scipy_zpk(filt), worN=x / filt.corner_hz)
        ref = np.maximum(20.0 * np.log10(np.maximum(np.abs(h), 1e-300)), -200.0)
        np.testing.assert_allclose(y, ref, atol=2e-3, rtol=1e-5)
        seen += 1
    assert seen >= 3


def test_output_filter_chart_uses_the_reconstruction_filter(demo: SystemAnalysis) -> None:
    r = demo.result("SHK-DRV")
    chart = filter_response_chart(r)
    assert chart is not None and r.output is not None
    req = _trace(chart.figure, "required rejection")
    # the filter must add what the hold leaves: required - 20 log10((fs - f) / f) (ADI MT-017)
    need = r.output.filter_needed_at_image_db
    assert need is not None
    np.testing.assert_allclose(_decode(req["y"]), [-need, -need])
    assert _decode(req["x"])[0] == pytest.approx(r.output.rate_hz - r.output.band_high_hz)


def test_no_filter_chart_without_a_filter(demo: SystemAnalysis) -> None:
    for r in demo.channels:
        if r.channel.kind == "input" and (r.sampling is None or r.sampling.filter is None):
            assert filter_response_chart(r) is None
    assert filter_response_chart(demo.result("CAM-TIP")) is None


# ---------------------------------------------------------------------------------------------
# 2. Folding: landed levels after the filter
# ---------------------------------------------------------------------------------------------


def test_folding_chart_draws_tones_at_their_level_after_the_filter(demo: SystemAnalysis) -> None:
    checked = 0
    for r in demo.channels:
        s = r.sampling
        if s is None or s.filter is None or s.decimation is not None or not s.tones:
            continue
        chart = folding_chart(r)
        assert chart is not None
        ys = _decode(_trace(chart.figure, "where it lands")["y"])
        z, p, k = _scipy_zpk(s.filter)
        expect = []
        for t in sorted(r.channel.interference, key=lambda t: (t.frequency, t.level, t.source)):
            fold = next(f for f in s.tones if f.frequency_hz == t.frequency and f.source == t.source)
            if fold.level_dbfs is None:
                continue
            # level - A(f), A from scipy.signal.freqs_zpk (Williams & Taylor)
            _, h = sps.freqs_zpk(z, p, k, worN=np.array([t.frequency / s.filter.corner_hz]))
            expect.append(fold.level_dbfs + 20.0 * math.log10(abs(h[0])))
        if len(expect) == len(ys):
            np.testing.assert_allclose(ys, expect, atol=1e-6)
            checked += 1
    assert checked >= 1


# ---------------------------------------------------------------------------------------------
# 3. Noise budget
# ---------------------------------------------------------------------------------------------


def test_noise_bars_equal_the_amplitude_figures(demo: SystemAnalysis) -> None:
    checked = 0
    for r in demo.channels:
        chart = noise_budget_chart(r)
        if chart is None:
            continue
        assert r.amplitude is not None
        rows = [c for c in r.amplitude.budget if c.db is not None]
        bars = chart.figure["data"][0]
        assert bars["y"] == [c.name for c in rows]
        x = _decode(bars["x"])
        np.testing.assert_allclose(x, [c.db for c in rows], rtol=1e-12)
        if rows[-1].name == "total":
            # power sum of uncorrelated noise (ADI MT-003): total = 10 log10(sum 10^(db_i / 10)), numpy here
            np.testing.assert_allclose(x[-1], 10.0 * np.log10(np.sum(10.0 ** (x[:-1] / 10.0))), atol=1e-9)
            checked += 1
        snr = r.channel.signal.snr_db
        if snr is not None:
            assert any(sh["x0"] == -snr for sh in chart.figure["layout"]["shapes"])
    assert checked >= 3


# ---------------------------------------------------------------------------------------------
# 4. Trade-off: least order against rate
# ---------------------------------------------------------------------------------------------


def test_trade_off_orders_match_scipy_order_estimates(demo: SystemAnalysis) -> None:
    r = next(r for r in demo.channels if trade_off_chart(r) is not None)
    s = r.sampling
    assert s is not None and s.required_alias_rejection_db is not None
    chart = trade_off_chart(r)
    assert chart is not None and chart.id == "chart-tradeoff"
    fh = s.band_high_hz
    rates = trade_off_rates(fh)
    np.testing.assert_allclose(rates[[0, -1]], [2.2 * fh, 20.0 * fh])  # the brief's span
    stop = max(s.required_alias_rejection_db, s.flatness_db + 0.01)
    estimators = {"butterworth": sps.buttord, "chebyshev1": sps.cheb1ord, "chebyshev2": sps.cheb2ord,
                  "elliptic": sps.ellipord}
    for fam, order_fn in estimators.items():
        trace = _trace(chart.figure, fam)
        xs, ys = _decode(trace["x"]), _decode(trace["y"])
        for fs, n in zip(xs, ys, strict=True):
            # scipy.signal's closed-form order estimates (analog=True) [Williams & Taylor]
            ref, _ = order_fn(2 * math.pi * fh, 2 * math.pi * (fs - fh), s.flatness_db, stop, analog=True)
            assert int(n) == ref, (fam, fs)
    # the order falls (never rises) as the rate goes up
    ys = _decode(_trace(chart.figure, "butterworth")["y"])
    assert np.all(np.diff(ys) <= 0) and ys[0] > ys[-1]


def test_no_trade_off_for_delta_sigma(demo: SystemAnalysis) -> None:
    ds = [r for r in demo.channels if r.sampling is not None and r.sampling.delta_sigma]
    assert ds
    assert all(trade_off_chart(r) is None for r in ds)


# ---------------------------------------------------------------------------------------------
# 5. Outputs: hold and images
# ---------------------------------------------------------------------------------------------


def test_hold_envelope_and_images(demo: SystemAnalysis) -> None:
    r = demo.result("SHK-DRV")
    chart = hold_chart(r)
    assert chart is not None and r.output is not None
    fs, fh = r.output.rate_hz, r.output.band_high_hz
    hold = _trace(chart.figure, "hold")
    x, y = _decode(hold["x"]), _decode(hold["y"])
    # tests/REFERENCES.md R7.1 [MT-017]: the hold's gain at fs/2 is 20 log10(2/pi) = -3.9224 dB
    i = int(np.argmin(np.abs(x - fs / 2.0)))
    assert x[i] == pytest.approx(fs / 2.0, rel=1e-6)
    assert y[i] == pytest.approx(-3.9224, abs=1e-4)
    # nulls at every multiple of fs (sin(pi k) = 0), drawn at the floor
    assert y[int(np.argmin(np.abs(x - fs)))] <= -150.0
    images = _decode(_trace(chart.figure, "images")["x"])
    # images of the band top at k fs ± f_high (ADI MT-017), those on the 0..3 fs span
    expect = sorted(f for f in (k * fs + d * fh for k in (1, 2, 3) for d in (-1, 1)) if f <= 3 * fs)
    np.testing.assert_allclose(images, expect, rtol=1e-12)
    assert len(images) == 5
    assert filter_response_chart(r) is not None
    assert hold_chart(demo.result("TMP-GBX-01")) is None  # an input


# ---------------------------------------------------------------------------------------------
# 6. Images: aperture MTF
# ---------------------------------------------------------------------------------------------


def test_aperture_mtf_at_nyquist(demo: SystemAnalysis) -> None:
    r = demo.result("CAM-TIP")
    chart = aperture_chart(r)
    assert chart is not None and r.image is not None
    x, y = (_decode(v) for v in (chart.figure["data"][0]["x"], chart.figure["data"][0]["y"]))
    nyq_mm = r.image.spatial_nyquist_cycles_per_m / 1000.0
    i = int(np.argmin(np.abs(x - nyq_mm)))
    # full-fill box aperture at 1/(2p): sinc(1/2) = 2/pi = 0.63662 [Holst]
    assert y[i] == pytest.approx(0.63662, abs=1e-5)
    assert y[-1] == pytest.approx(0.0, abs=1e-6)  # first null at 1/p = 2 x Nyquist
    assert x[-1] == pytest.approx(2.0 * nyq_mm, rel=1e-6)
    assert aperture_chart(demo.result("SHK-DRV")) is None


# ---------------------------------------------------------------------------------------------
# Pages, ids, determinism and budget bars
# ---------------------------------------------------------------------------------------------


def test_chart_ids_unique_and_figures_deterministic(demo: SystemAnalysis) -> None:
    again = analyze(load_spec(DEMO))
    for r, r2 in zip(demo.channels, again.channels, strict=True):
        a, b = channel_charts(r), channel_charts(r2)
        assert [c.to_json() for c in a] == [c.to_json() for c in b]
        assert len({c.id for c in a}) == len(a)


def test_budget_bars_show_utilisation(demo: SystemAnalysis) -> None:
    findings = run_rules(demo)
    ctx = views.Context(demo, findings, views.channel_paths([r.channel.id for r in demo.channels]))
    converters, links, stores = views.budget_items(ctx, "")
    spec_links = demo.spec.system.links
    for item in links:
        (bar,) = item.bars
        lk = spec_links[item.id]
        payload = sum(demo.budgets.channels[c].data_rate_bps for c in demo.budgets.link(item.id).channels)
        # load = payload x (1 + overhead) against capacity x (1 - headroom) (common practice)
        assert bar.percent == pytest.approx(100.0 * payload * (1 + lk.overhead) / (lk.capacity_bps * (1 - lk.headroom)))
    for item in converters:
        load = demo.budgets.converter(item.id)
        if item.bars:
            assert item.bars[0].percent == pytest.approx(100.0 * load.aggregate_rate_hz / load.max_rate_hz)
            assert item.bars[0].status == ("error" if load.load > 1.0 else "ok")
    for item in stores:
        st = demo.budgets.store(item.id)
        if st.bytes_needed is not None:
            assert item.bars[0].percent == pytest.approx(100.0 * st.bytes_needed / st.capacity_bytes)
    assert sum(len(i.bars) for i in (*converters, *links, *stores)) >= 3
