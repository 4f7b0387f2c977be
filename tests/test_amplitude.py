"""Amplitude analysis of whole sensor chains, with every expected number derived by hand below.

Formulas: LSB q = FSR / 2^N [1241]; quantization noise q / sqrt(12) and SQNR [MT-001]; jitter SNR
-20 log10(2 pi f t_j) [MT-007]; power sum of SNRs and ENOB (SINAD - 1.7609) / 6.0206 [MT-003];
processing gain 10 log10(fs / (2 B)) [MT-001]; a sine of peak A has rms A / sqrt(2).  The
arithmetic was done by hand (calculator), independently of generator/dsp.
"""

from __future__ import annotations

import json
import math

import pytest
from numpy.testing import assert_allclose

from generator.analysis import analyze
from generator.analysis.amplitude import AmplitudeResult, analyze_amplitude
from generator.cli import main
from generator.load import load_spec
from generator.model import Channel, Conversion, Noise, Sensor, Signal, SourceRef, System
from generator.quantities import parse_quantity, parse_span, parse_unit

from .conftest import DEMO

SYSTEM = System(name="bench")


def _channel(
    unit: str = "g",
    kind: str = "input",
    peak: str | None = "20 g",
    sensitivity: str | None = "10 mV/g",
    noise: Noise | None = None,
    gain: float = 10.0,
    bits: int = 16,
    full_scale: str = "±5 V",
    rate: float = 25.6e3,
    band: tuple[float, float] = (10.0, 5e3),
    jitter: float | None = 100e-12,
    filtered: bool = False,
) -> Channel:
    return Channel(
        id="X-1",
        kind=kind,
        title="bench chain",
        source=SourceRef("channels/X-1.md"),
        unit=parse_unit(unit),
        signal=Signal(
            band=band,
            peak=None if peak is None else parse_quantity(peak, "*").value,
            filtered_to_band=filtered,
        ),
        sensor=Sensor(None if sensitivity is None else parse_quantity(sensitivity, "*").value, noise),
        conversion=Conversion(
            rate=rate, bits=bits, full_scale=parse_span(full_scale, "V"), gain=gain, jitter=jitter
        ),
    )


def _result(ch: Channel) -> AmplitudeResult:
    a = analyze_amplitude(ch, SYSTEM)
    assert a is not None
    return a


def test_accelerometer_chain_by_hand() -> None:
    # Accelerometer 10 mV/g, peak 20 g, gain 10 V/V (20 dB), 16-bit ±5 V converter, fs 25.6 kS/s,
    # band 10 Hz..5 kHz (not filtered to the band), jitter 100 ps, sensor noise 50 µV rms.
    ch = _channel(noise=Noise(50e-6, density=False, in_volts=True))
    a = _result(ch)
    f = a.figures()
    # peak at the converter: 20 g x 0.01 V/g x 10 = 2.0 V
    assert_allclose(f["peak_volts"], 2.0, rtol=1e-12)
    # range usage 2 V / 5 V = 0.4; headroom 20 log10(5 / 2) = 20 x 0.39794 = 7.9588 dB
    assert_allclose(f["range_usage"], 0.4, rtol=1e-12)
    assert_allclose(f["headroom_db"], 7.9588, atol=1e-4)
    # LSB = 10 V / 65536 = 152.587890625 µV exactly (binary fraction)
    assert f["lsb_volts"] == 152.587890625e-6
    # g per LSB = 152.5879 µV / (0.01 V/g x 10) = 1.525879e-3 g
    assert_allclose(f["lsb_units"], 1.525879e-3, rtol=1e-6)
    # quantization noise 152.5879 µV / 3.4641 = 44.0484 µV rms
    assert_allclose(f["quantization_noise_volts"], 44.0484e-6, rtol=1e-5)
    # no processing gain: not filtered to the band
    assert f["processing_gain_db"] == 0.0
    # jitter: 2 pi x 5 kHz x 100 ps = 3.14159e-6 -> -20 log10 = 110.0570 dB
    assert_allclose(f["jitter_snr_db"], 110.0570, atol=1e-4)
    # sensor: signal 0.2 V peak at the sensor = 141.421 mV rms; 141.421 mV / 50 µV = 2828.43 -> 69.0309 dB
    assert_allclose(f["sensor_snr_db"], 69.0309, atol=1e-4)
    # quantization re the signal: 1.41421 V / 44.0484 µV = 32105.6 -> 90.1317 dB
    # power sum: 10^-9.01317 + 10^-11.0057 + 10^-6.90309 = 9.700e-10 + 9.870e-12 + 1.2500e-7
    #          = 1.25980e-7 -> 68.9970 dB
    assert_allclose(f["total_snr_db"], 68.9970, atol=1e-3)
    # ENOB = (68.9970 - 1.7609) / 6.0206 = 11.1677
    assert_allclose(f["enob_bits"], 11.1677, atol=1e-3)
    # dynamic range: full-scale sine 3.53553 V rms over sqrt(44.0484² + 500²) µV = 501.937 µV -> 76.9561 dB
    assert_allclose(f["dynamic_range_db"], 76.9561, atol=1e-3)
    # the sensor noise dominates, and the budget rows carry it in volts at the converter and in g
    top = a.dominant()
    assert top is not None and top.name == "sensor noise"
    rows = {r["contribution"]: r for r in a.budget_table()}
    assert set(rows) == {"quantization", "sampling jitter", "sensor noise", "total"}
    # 50 µV x gain 10 = 500 µV at the converter; 50 µV / 0.01 V/g = 5 mg
    assert_allclose(rows["sensor noise"]["rms_volts"], 500e-6, rtol=1e-12)
    assert_allclose(rows["sensor noise"]["rms_units"], 5e-3, rtol=1e-12)
    assert_allclose(rows["sensor noise"]["db_re_signal"], -69.0309, atol=1e-4)
    assert_allclose(rows["total"]["db_re_signal"], -68.9970, atol=1e-3)


def test_bridge_chain_with_processing_gain() -> None:
    # Torque bridge 40 nV/(N·m), peak 200 kN·m, gain 1000 V/V (60 dB), 24-bit ±10 V, fs 51.2 kS/s,
    # band 0..1 kHz filtered to the band, jitter 20 ps, sensor noise 10 nV/√Hz.
    ch = _channel(
        unit="N·m", peak="200 kN·m", sensitivity="40 nV/N·m", noise=Noise(10e-9, density=True, in_volts=True),
        gain=1000.0, bits=24, full_scale="±10 V", rate=51.2e3, band=(0.0, 1e3), jitter=20e-12, filtered=True,
    )
    a = _result(ch)
    f = a.figures()
    # 2e5 N·m x 4e-8 V/(N·m) x 1000 = 8 V; 8 / 10 = 0.8; 20 log10(10 / 8) = 1.9382 dB
    assert_allclose(f["peak_volts"], 8.0, rtol=1e-12)
    assert_allclose(f["headroom_db"], 1.9382, atol=1e-4)
    # LSB 20 V / 2^24 = 1.192093 µV; per N·m at the converter 4e-5 V -> 0.0298023 N·m
    assert_allclose(f["lsb_units"], 0.0298023, rtol=1e-5)
    # processing gain 10 log10(51200 / 2000) = 10 log10(25.6) = 14.0824 dB; noise bandwidth 1 kHz
    assert_allclose(f["processing_gain_db"], 14.0824, atol=1e-4)
    assert a.noise_bandwidth_hz == 1e3
    # sensor: 10 nV x sqrt(1000) = 316.228 nV; signal 8 mV peak = 5.65685 mV rms -> 17888.5 -> 85.0515 dB
    assert_allclose(f["sensor_snr_db"], 85.0515, atol=1e-4)
    # quantization re the signal: 146.2553 + 20 log10(0.8) + 14.0824 = 146.2553 - 1.9382 + 14.0824 = 158.3995
    quantization = next(c for c in a.budget if c.name == "quantization")
    assert quantization.db is not None
    assert_allclose(-quantization.db, 158.3995, atol=1e-3)
    # jitter at 1 kHz, 20 ps: 2 pi x 1e3 x 2e-11 = 1.25664e-7 -> 138.0158 dB
    assert_allclose(f["jitter_snr_db"], 138.0158, atol=1e-4)
    # the sensor sets the total: 85.0515 dB, others 50+ dB below it
    assert_allclose(f["total_snr_db"], 85.0515, atol=1e-3)
    # sensor row in N·m: 316.228 nV / 4e-8 V/(N·m) = 7.9057 N·m rms
    rows = {r["contribution"]: r for r in a.budget_table()}
    assert_allclose(rows["sensor noise"]["rms_units"], 7.9057, rtol=1e-4)


def test_filtered_band_at_nyquist_earns_nothing() -> None:
    # processing gain needs B < fs / 2 [MT-001]: a 12.8 kHz band at 25.6 kS/s earns 0 dB
    a = _result(_channel(band=(0.0, 12.8e3), filtered=True))
    assert a.processing_gain_db == 0.0
    assert a.noise_bandwidth_hz == 12.8e3  # = fs / 2


def test_noise_in_engineering_units() -> None:
    # current probe 10 mV/A, peak 600 A, noise 0.25 A rms (in amperes):
    # 600 / sqrt(2) = 424.264 A rms; 424.264 / 0.25 = 1697.06 -> 64.5939 dB
    ch = _channel(unit="A", peak="600 A", sensitivity="10 mV/A", noise=Noise(0.25, False, False), gain=1.0,
                  full_scale="±10 V")
    f = _result(ch).figures()
    assert_allclose(f["sensor_snr_db"], 64.5939, atol=1e-4)
    # peak 6 V; dynamic range: 7.07107 V over sqrt((20/65536/sqrt 12)² + (2.5 mV)²) = 2.50155 mV -> 69.026 dB
    assert_allclose(f["dynamic_range_db"], 69.026, atol=1e-3)


def test_no_sensitivity_no_crash() -> None:
    # a g channel without sensitivity: the converter's own figures only, nothing that needs the chain
    f = _result(_channel(sensitivity=None)).figures()
    assert "peak_volts" not in f and "lsb_units" not in f and "total_snr_db" not in f
    assert_allclose(f["lsb_volts"], 152.587890625e-6, rtol=1e-12)
    assert "jitter_snr_db" in f  # jitter SNR does not depend on the level


def test_voltage_channel_without_sensitivity() -> None:
    # unit V, no sensor: peak 0.5 V x gain 10 = 5 V; LSB in volts at the input = 152.588 µV / 10
    f = _result(_channel(unit="V", peak="0.5 V", sensitivity=None)).figures()
    assert_allclose(f["peak_volts"], 5.0, rtol=1e-12)
    assert_allclose(f["lsb_units"], 15.2587890625e-6, rtol=1e-12)


def test_outputs_get_a_budget_and_images_nothing() -> None:
    # DAC 16-bit ±10 V with a x10 amplifier driving volts: 305.176 µV code width, 3.05176 mV at the load
    out = _result(_channel(unit="V", kind="output", peak="70 V", sensitivity=None, full_scale="±10 V",
                           jitter=None))
    f = out.figures()
    assert_allclose(f["lsb_units"], 3.05176e-3, rtol=1e-5)
    assert_allclose(f["sqnr_db"], 98.0905, atol=1e-4)
    # the converter must produce 70 V / 10 = 7 V: 70 % of its 10 V amplitude (arithmetic)
    assert_allclose(f["peak_volts"], 7.0, rtol=1e-12)
    assert_allclose(f["range_usage"], 0.7, rtol=1e-12)
    # quantization only: SQNR of a full-scale sine less 20 log10(10 / 7) = 98.0905 - 3.0980 = 94.9925 dB
    # (tests/REFERENCES.md R5.2 [MT-001], scaled to the sine's amplitude)
    assert_allclose(f["total_snr_db"], 98.0905 - 20 * math.log10(10 / 7), atol=1e-4)
    image = _channel(kind="image")
    assert analyze_amplitude(image, SYSTEM) is None


# ------------------------------------------------------------------------------------ the demo

AMPLITUDE_KEYS = {
    "peak_volts", "range_usage", "headroom_db", "lsb_volts", "lsb_units", "sqnr_db",
    "quantization_noise_volts", "processing_gain_db", "jitter_snr_db", "total_snr_db", "enob_bits",
    "dynamic_range_db",
}  # fmt: skip


def test_every_demo_input_carries_the_figures(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["check", str(DEMO), "--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    spec = load_spec(DEMO)
    noisy = {c.id for c in spec.channels if c.sensor.noise is not None}
    inputs = [c for c in doc["channels"] if c["kind"] == "input"]
    assert inputs
    for c in inputs:
        missing = AMPLITUDE_KEYS - set(c["figures"])
        assert not missing, (c["id"], missing)
        assert ("sensor_snr_db" in c["figures"]) == (c["id"] in noisy), c["id"]
        # each figure is a finite number
        assert all(isinstance(c["figures"][k], float) and math.isfinite(c["figures"][k]) for k in AMPLITUDE_KEYS)


def test_demo_thermocouple_lsb_matches_its_notes() -> None:
    # TMP-MB-01's notes: "one LSB is already about 0.03 °C": 20 V / 65536 / 10 mV/°C = 0.0305 °C
    result = analyze(load_spec(DEMO)).result("TMP-MB-01")
    assert result.amplitude is not None
    assert_allclose(result.figures["lsb_units"], 0.030518, rtol=1e-4)


def test_unipolar_full_scale() -> None:
    # "0..10 V" is a 10 V range; the largest sine it holds has a 5 V amplitude about 5 V, and that sine is
    # 0 dBFS (AES17, sine-referenced dBFS), so a signal of 2 V amplitude uses 2 / 5 = 40 % (arithmetic);
    # LSB 10 V / 65536 = 152.588 µV; the full-scale sine for the dynamic range spans the range,
    # 5 V peak = 3.53553 V rms, over 44.0484 µV of quantization noise: 80148 -> 98.0905 dB (= SQNR [MT-001])
    a = _result(_channel(unit="V", peak="2 V", sensitivity=None, gain=1.0, full_scale="0..10 V"))
    f = a.figures()
    assert_allclose(f["range_usage"], 0.4, rtol=1e-12)
    assert_allclose(f["headroom_db"], 20 * math.log10(5 / 2), rtol=1e-12)
    assert_allclose(f["lsb_volts"], 152.587890625e-6, rtol=1e-12)
    assert_allclose(f["dynamic_range_db"], 98.0905, atol=1e-4)
