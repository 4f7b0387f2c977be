"""The safety caution: shown for hazardous voltages and powered actuators, never for benign channels."""

from __future__ import annotations

from pathlib import Path

import pytest

from generator.analysis import analyze
from generator.load import load_spec
from generator.rules import Finding, run_rules, worst_status

from .conftest import DEMO


def _cautions(tree: Path) -> dict[str, Finding]:
    return {f.channels[0]: f for f in run_rules(analyze(load_spec(tree)), only=["caution"])}


def _channel(cid: str, body: str, tree: Path) -> None:
    (tree / "channels" / f"{cid}.md").write_text(f'+++\ntitle = "{cid}"\n{body}\n+++\n', encoding="utf-8")


INPUT_V = 'kind = "input"\nunit = "V"\n[signal]\nband = ["0 Hz", "1 kHz"]\npeak = "{}"\n[conversion]\nconverter = "ds"'
OUTPUT = 'kind = "output"\nunit = "V"\n[signal]\nband = ["0 Hz", "1 kHz"]\n[conversion]\nconverter = "dac"\n{}'


def test_caution_for_hazardous_fixtures_only(minimal_tree: Path) -> None:
    # limits are common practice: 30 V rms, 42.4 V peak, 60 V DC (extra-low voltage)
    _channel("HV-IN", INPUT_V.format("400 V"), minimal_tree)  # 400 V peak > 42.4 V
    _channel("LV-IN", INPUT_V.format("40 V"), minimal_tree)  # below 42.4 V peak
    _channel("HV-DRIVE", OUTPUT.format('gain = "20 dB"'), minimal_tree)  # ±10 V x 10 = 100 V peak
    _channel("LV-DRIVE", OUTPUT.format("gain = 4"), minimal_tree)  # 40 V peak
    _channel("ACTUATOR", OUTPUT.format('[safety]\npowered_actuator = true\nnote = "Lock out the HPU."'), minimal_tree)
    _channel("MAINS-ACC", 'kind = "input"\nunit = "g"\n[signal]\nband = ["1 Hz", "1 kHz"]\npeak = "5 g"\n'
             '[sensor]\nsensitivity = "100 mV/g"\n[conversion]\nconverter = "ds"\n[safety]\nworking_voltage = "230 V"',
             minimal_tree)
    _channel("SELV-ACC", 'kind = "input"\nunit = "g"\n[signal]\nband = ["1 Hz", "1 kHz"]\npeak = "5 g"\n'
             '[sensor]\nsensitivity = "100 mV/g"\n[conversion]\nconverter = "ds"\n[safety]\nworking_voltage = "24 V"',
             minimal_tree)
    found = _cautions(minimal_tree)
    assert sorted(found) == ["ACTUATOR", "HV-DRIVE", "HV-IN", "MAINS-ACC"]
    for f in found.values():
        assert f.severity == "info"
        assert "rated for it" in f.message and "isolation and interlocks" in f.message
        assert "local codes and licensed practice govern" in f.message
    assert "Lock out the HPU." in found["ACTUATOR"].message
    assert "100 V peak" in found["HV-DRIVE"].message and "230 V rms" in found["MAINS-ACC"].message
    # a note, never a failure: the channel's status stays ok
    assert worst_status(f for f in found.values() if "HV-IN" in f.channels) == "ok"


@pytest.mark.parametrize("cid", ["I-GEN-A", "I-GEN-B", "I-GEN-C", "PITCH-VLV", "SHK-DRV"])
def test_demo_cautions(cid: str) -> None:
    found = _cautions(DEMO)
    assert cid in found
    assert found[cid].line > 1  # points at the [safety] key that triggered it


def test_demo_benign_channels_have_no_caution() -> None:
    found = _cautions(DEMO)
    assert "ACC-GBX-01" not in found and "CAM-TIP" not in found and "TMP-MB-01" not in found
