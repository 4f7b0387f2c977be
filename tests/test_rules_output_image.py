"""Output and image figures and their rules: each rule fires on a failing fixture and stays silent on a passing one."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from generator.analysis import SystemAnalysis, analyze
from generator.analysis.output import filter_loss_db
from generator.load import load_spec
from generator.model import Filter
from generator.rules import Finding, run_rules

from .conftest import DEMO


def _write(tree: Path, cid: str, text: str) -> None:
    (tree / "channels" / f"{cid}.md").write_text(text, encoding="utf-8")


def _check(tree: Path, rule: str) -> tuple[SystemAnalysis, list[Finding]]:
    analysis = analyze(load_spec(tree))
    return analysis, run_rules(analysis, only=[rule])


def _output(band_top: str = "20 kHz", extra_signal: str = "", extra_conv: str = "", filt: str = "") -> str:
    return f"""+++
title = "Test output"
kind = "output"
unit = "V"

[signal]
band = ["0 Hz", "{band_top}"]
{extra_signal}

[conversion]
converter = "dac"
{extra_conv}
{filt}
+++
"""


def _image(pixels: str, area: str, extra: str = "") -> str:
    return f"""+++
title = "Test camera"
kind = "image"

[signal]
{extra}

[sensor]
pixels = {pixels}
active_area = {area}

[conversion]
link = "net"
rate = "30 fps"
bits = 12
container_bits = 16
+++
"""


# ---------------------------------------------------------------- the reconstruction filter


@pytest.mark.parametrize(
    ("order", "at_2fc"),
    [(1, 6.9897), (2, 12.3045), (3, 18.1291), (4, 24.0993), (5, 30.1072), (6, 36.1247), (7, 42.1445), (8, 48.1649)],
)
def test_butterworth_loss_at_twice_the_corner(order: int, at_2fc: float) -> None:
    # source: tests/REFERENCES.md R2.2 [WT], [SCIPY]: Butterworth A at 2fc = 10 log10(1 + 4^n)
    assert_allclose(filter_loss_db(Filter("butterworth", order, 10e3), 20e3), at_2fc, rtol=1e-4)


def test_corner_definitions_per_family() -> None:
    # source: tests/REFERENCES.md R2.3: bessel with norm='mag' is 3.0103 dB down at its corner;
    # chebyshev1/elliptic corners are the ripple-band edge, chebyshev2's the stopband edge [SCIPY]
    assert_allclose(filter_loss_db(Filter("bessel", 4, 1e3), 1e3), 3.0103, rtol=1e-4)
    assert_allclose(filter_loss_db(Filter("chebyshev1", 5, 1e3, ripple_db=0.5), 1e3), 0.5, rtol=1e-4)
    assert_allclose(filter_loss_db(Filter("elliptic", 5, 1e3, 0.1, 80.0), 1e3), 0.1, rtol=1e-4)
    assert_allclose(filter_loss_db(Filter("chebyshev2", 5, 1e3, stopband_db=60.0), 1e3), 60.0, rtol=1e-4)
    assert filter_loss_db(Filter("butterworth"), 1e3) is None  # no order or corner: nothing designed


# ----------------------------------------------------------------------- output figures


def test_demo_outputs_and_camera_carry_their_figures() -> None:
    analysis = analyze(load_spec(DEMO))
    shk = analysis.result("SHK-DRV").figures
    # ADI MT-017: 20 log10|sinc(2 kHz / 12.8 kHz)|, numpy.sinc as the reference
    assert_allclose(shk["zoh_droop_db"], 20 * np.log10(np.sinc(2e3 / 12.8e3)), rtol=1e-12)
    assert shk["first_image_hz"] == pytest.approx(10.8e3)
    # tests/REFERENCES.md R7.2 [DER]: hold puts the image 20 log10(f/(fs - f)) below the tone
    assert_allclose(shk["hold_image_attenuation_db"], 20 * np.log10(10.8e3 / 2e3), rtol=1e-12)
    # [WT] Butterworth: 10 log10(1 + (f/fc)^(2n)), n = 4, fc = 4 kHz
    assert_allclose(shk["filter_image_attenuation_db"], 10 * np.log10(1 + (10.8 / 4) ** 8), rtol=1e-6)
    assert_allclose(shk["filter_droop_db"], 10 * np.log10(1 + 0.5**8), rtol=1e-6)  # 0.016932, REFERENCES.md R2.4
    total = shk["hold_image_attenuation_db"] + shk["filter_image_attenuation_db"]
    assert shk["image_rejection_db"] == pytest.approx(total)
    assert shk["output_peak_volts"] == pytest.approx(100.0)  # ±10 V x 20 dB (x10)
    pitch = analysis.result("PITCH-VLV").figures
    assert pitch["required_image_rejection_db"] == 60.0 and pitch["sample_rate_hz"] == 12.8e3
    cam = analysis.result("CAM-TIP").figures
    # arithmetic: 28.672 mm / 2048 = 14 µm; 1/(2 p) = 35.714 cycles/mm; 2048 x 12 bit x 1.5 kHz
    assert cam["pixel_pitch_m"] == pytest.approx(14e-6)
    assert cam["spatial_nyquist_cycles_per_m"] == pytest.approx(35714.2857)
    assert cam["frame_bits"] == 2048 * 12 and cam["frame_bits_stored"] == 2048 * 16
    assert cam["payload_rate_bps"] == pytest.approx(36.864e6)
    assert cam["spatial_nyquist_y_cycles_per_m"] is None  # line sensor: no vertical sampling by pixels


def test_hold_none_and_sinc_compensation(minimal_tree: Path) -> None:
    _write(minimal_tree, "OUT-NONE", _output(extra_conv='hold = "none"'))
    _write(minimal_tree, "OUT-COMP", _output(extra_conv="sinc_compensation = true"))
    analysis = analyze(load_spec(minimal_tree))
    none = analysis.result("OUT-NONE").figures
    assert none["zoh_droop_db"] is None and none["hold_image_attenuation_db"] == 0.0
    comp = analysis.result("OUT-COMP").figures
    assert comp["zoh_droop_db"] == 0.0  # ideal inverse-sinc correction leaves no residual (MT-017)
    # tests/REFERENCES.md R7.1, R7.2: 20 kHz @ 48 kHz loses 2.6399 dB before correction; image -2.9226 dB
    assert_allclose(comp["zoh_droop_uncorrected_db"], -2.6399, rtol=1e-4)
    assert_allclose(comp["hold_image_attenuation_db"], 2.9226, rtol=1e-4)
    # default target: the 16-bit DAC's floor, 98.0905 dB (tests/REFERENCES.md R5.2, exact constants)
    assert_allclose(comp["required_image_rejection_db"], 98.0905, rtol=1e-5)


# ------------------------------------------------------------------------------- rules


def test_zoh_droop_fires_and_its_fix_works(minimal_tree: Path) -> None:
    # tests/REFERENCES.md R7.1: 20 kHz at 48 kHz loses 2.6399 dB, more than the default 0.5 dB
    _write(minimal_tree, "OUT-1", _output())
    _, found = _check(minimal_tree, "zoh-droop")
    assert [f.channels for f in found] == [("OUT-1",)]
    assert "2.64 dB" in found[0].message and "0.5 dB" in found[0].message
    rate = re.search(r"raise the rate to at least ([0-9.]+) kHz", found[0].message)
    assert rate is not None
    # the suggested rate (rounded up) passes: independent of the message, via the rule itself
    _write(minimal_tree, "OUT-1", _output(extra_conv=f'rate = "{float(rate.group(1)) + 0.1} kHz"'))
    assert _check(minimal_tree, "zoh-droop")[1] == []


def test_zoh_droop_silent_when_compensated_or_oversampled(minimal_tree: Path) -> None:
    _write(minimal_tree, "OUT-1", _output(extra_conv="sinc_compensation = true"))
    _write(minimal_tree, "OUT-2", _output("2 kHz"))  # 0.0248 dB at 2 kHz / 48 kHz
    assert _check(minimal_tree, "zoh-droop")[1] == []


def test_zoh_droop_counts_the_filter_too(minimal_tree: Path) -> None:
    # hold 0.0248 dB + butterworth n=4 at f/fc = 0.8: 0.67358 dB (tests/REFERENCES.md R2.4) > 0.5 dB
    filt = '[filter]\nfamily = "butterworth"\norder = 4\ncorner = "2.5 kHz"'
    _write(minimal_tree, "OUT-1", _output("2 kHz", filt=filt))
    _, found = _check(minimal_tree, "zoh-droop")
    assert len(found) == 1 and "filter alone" in found[0].message


def test_demo_zoh_droop_fires_on_shaker_and_is_waived() -> None:
    _, found = _check(DEMO, "zoh-droop")
    assert [(f.channels, f.waived) for f in found] == [(("SHK-DRV",), True)]


def test_image_rejection_fires_without_filter(minimal_tree: Path) -> None:
    # hold alone: 2.9226 dB at 28 kHz (tests/REFERENCES.md R7.2) against 60 dB required
    text = _output(extra_signal='image_rejection = "60 dB"', extra_conv="sinc_compensation = true")
    _write(minimal_tree, "OUT-1", text)
    _, found = _check(minimal_tree, "image-rejection")
    assert len(found) == 1
    msg = found[0].message
    assert "28 kHz" in msg and "2.923 dB" in msg and "60 dB" in msg and "add a reconstruction filter" in msg


def test_image_rejection_passes_with_steep_filter(minimal_tree: Path) -> None:
    # hold 33.442 dB at 47 kHz (tests/REFERENCES.md R7.2) + butterworth n=4 at 4 kHz:
    # 10 log10(1 + 11.75^8) = 85.6 dB [WT]: 119 dB >= 60 dB
    filt = '[filter]\nfamily = "butterworth"\norder = 4\ncorner = "4 kHz"'
    _write(minimal_tree, "OUT-1", _output("1 kHz", extra_signal='image_rejection = "60 dB"', filt=filt))
    assert _check(minimal_tree, "image-rejection")[1] == []


def test_image_rejection_fix_corner_is_sufficient(minimal_tree: Path) -> None:
    filt = '[filter]\nfamily = "butterworth"\norder = 4\ncorner = "{}"'
    need = 'image_rejection = "90 dB"'
    _write(minimal_tree, "OUT-1", _output("2 kHz", extra_signal=need, filt=filt.format("10 kHz")))
    _, found = _check(minimal_tree, "image-rejection")
    corner = re.search(r"corner to at most ([0-9.]+) kHz", found[0].message)
    assert corner is not None
    lower = filt.format(f"{float(corner.group(1)) - 0.01} kHz")
    _write(minimal_tree, "OUT-1", _output("2 kHz", extra_signal=need, filt=lower))
    assert _check(minimal_tree, "image-rejection")[1] == []


def test_output_overrange(minimal_tree: Path) -> None:
    # ±10 V x 20 dB = 100 V peak against a 10 V limit
    _write(minimal_tree, "OUT-1", _output(extra_signal='limit = "10 V"', extra_conv='gain = "20 dB"'))
    _write(minimal_tree, "OUT-2", _output(extra_signal='limit = "10 V"'))  # 10 V: exactly at the limit
    _, found = _check(minimal_tree, "output-overrange")
    assert [f.channels for f in found] == [("OUT-1",)]
    assert "100 V" in found[0].message and "at most 1 (0 dB)" in found[0].message and found[0].severity == "error"


def test_spatial_nyquist(minimal_tree: Path) -> None:
    # tests/REFERENCES.md R8.4: 3.45 µm pitch -> 144.928 cycles/mm
    area = '["7.0656 mm", "5.2992 mm"]'
    _write(minimal_tree, "CAM-1", _image("[2048, 1536]", area, 'detail = "150 cycles/mm"'))
    _write(minimal_tree, "CAM-2", _image("[2048, 1536]", area, 'detail = "140 cycles/mm"'))
    _, found = _check(minimal_tree, "spatial-nyquist")
    assert [f.channels for f in found] == [("CAM-1",)]
    assert "144.9 cycles/mm" in found[0].message and "3.333 µm" in found[0].message


def test_non_square_pixels(minimal_tree: Path) -> None:
    _write(minimal_tree, "CAM-1", _image("[2048, 1536]", '["7.0656 mm", "6 mm"]', "square_pixels = true"))
    _write(minimal_tree, "CAM-2", _image("[2048, 1536]", '["7.0656 mm", "5.2992 mm"]', "square_pixels = true"))
    _write(minimal_tree, "CAM-3", _image("[2048, 1536]", '["7.0656 mm", "6 mm"]'))  # not assumed: silent
    # line sensors: pixel height 28 µm vs 14 µm pitch; flagged only when square pixels are assumed
    _write(minimal_tree, "LINE-1", _image("[2048, 1]", '["28.672 mm", "0.028 mm"]', "square_pixels = true"))
    _write(minimal_tree, "LINE-2", _image("[2048, 1]", '["28.672 mm", "0.028 mm"]'))
    analysis, found = _check(minimal_tree, "non-square-pixels")
    assert sorted(f.channels[0] for f in found) == ["CAM-1", "LINE-1"]
    line = analysis.result("LINE-2").figures
    assert line["pixel_pitch_y_m"] == pytest.approx(28e-6) and line["square_pixels"] is False
    assert line["pixel_pitch_m"] == pytest.approx(14e-6)  # along the line
