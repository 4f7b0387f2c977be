"""Numerical extremes and size limits in real spec files.

Rates from 1 mHz to 100 GHz, 1 to 32 bits, filter orders 1 to 20 and attenuation to 200 dB,
band edges on, just under and just over Nyquist: loading and ``check`` finish with exit 0 or 1,
raise nothing and warn nothing (warnings are errors here), and every figure in the JSON report
is a finite number or null.  The tests are generic over the rules: whatever rules and figures
are registered run on these files.  Files over the size limit and trees over the channel-count
limit are refused with a clear message.
"""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import pytest

from generator import load, source
from generator.cli import EXIT_BAD_INPUT, EXIT_FINDINGS, EXIT_OK, main
from generator.errors import SpecError, SpecErrors

from .conftest import MINIMAL

pytestmark = pytest.mark.filterwarnings("error")

RATES_HZ = [1e-3, 0.1, 1.0, 1e3, 51.2e3, 1e6, 1e8, 1e9, 100e9]  # 1 mHz to 100 GHz
BITS = [1, 2, 8, 16, 24, 32]


def channel(rate_hz: float, bits: int, band: tuple[float, float], extra: str = "") -> str:
    """An input channel on no converter: everything stated in the file."""
    return f"""+++
title = "Extreme channel"
kind = "input"
unit = "V"

[signal]
band = ["{band[0]!r} Hz", "{band[1]!r} Hz"]
peak = "1 V"

[conversion]
rate = "{rate_hz!r} Hz"
bits = {bits}
full_scale = "±10 V"
{extra}
+++
"""


def run_check(tree: Path, capsys: pytest.CaptureFixture[str]) -> tuple[int, dict[str, object], str]:
    code = main(["check", str(tree), "--format", "json"])
    out, err = capsys.readouterr()
    assert "Traceback" not in err
    doc = json.loads(out, parse_constant=_refuse) if out else {}
    for ch in doc.get("channels", []):  # type: ignore[union-attr]
        for key, value in ch["figures"].items():
            assert value is None or not isinstance(value, float) or math.isfinite(value), (key, value)
    return code, doc, err


def _refuse(name: str) -> object:
    raise AssertionError(f"{name} in the JSON report")


@pytest.fixture
def tree(tmp_path: Path) -> Path:
    dest = tmp_path / "specs"
    shutil.copytree(MINIMAL, dest)
    (dest / "channels" / "TEMP-1.md").unlink()
    return dest


def _write(tree: Path, text: str) -> None:
    (tree / "channels" / "ACC-1.md").write_text(text, encoding="utf-8")


@pytest.mark.parametrize("bits", BITS)
@pytest.mark.parametrize("rate_hz", RATES_HZ)
def test_rates_and_bits(rate_hz: float, bits: int, tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # band to 40 % of the rate: inside Nyquist (fs / 2, Shannon 1949), so no finding needs to fire
    _write(tree, channel(rate_hz, bits, (rate_hz * 1e-4, rate_hz * 0.4)))
    code, doc, err = run_check(tree, capsys)
    assert code in (EXIT_OK, EXIT_FINDINGS), err
    figures = doc["channels"][0]["figures"]  # type: ignore[index]
    # f_N = fs / 2 (Shannon 1949; Nyquist 1928)
    assert figures["nyquist_hz"] == pytest.approx(rate_hz / 2, rel=1e-12)


@pytest.mark.parametrize("rate_hz", [1e-3, 1.0, 51.2e3, 100e9])
@pytest.mark.parametrize("edge", ["on", "under", "over"])
def test_band_edge_at_nyquist(rate_hz: float, edge: str, tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    nyquist = rate_hz / 2  # f_N = fs / 2 (Shannon 1949)
    high = {"on": nyquist, "under": math.nextafter(nyquist, 0.0), "over": math.nextafter(nyquist, math.inf)}[edge]
    extra = '\n[filter]\nfamily = "butterworth"\norder = 8\ncorner = "' + repr(nyquist) + ' Hz"\n'
    _write(tree, channel(rate_hz, 24, (high / 10, high), extra))
    code, doc, err = run_check(tree, capsys)
    findings = doc["findings"]  # type: ignore[index]
    if edge == "over":
        # above f_N the band cannot be captured (Shannon 1949): an error finding, never a crash
        assert code == EXIT_FINDINGS, err
        assert any(f["severity"] == "error" for f in findings)  # type: ignore[index]
    else:
        assert code in (EXIT_OK, EXIT_FINDINGS), err


FILTERS = [
    ("butterworth", 1, ""), ("butterworth", 20, ""), ("bessel", 20, ""), ("chebyshev1", 20, 'ripple = "3 dB"'),
    ("chebyshev2", 20, 'stopband_attenuation = "200 dB"'),
    ("elliptic", 20, 'ripple = "0.001 dB"\nstopband_attenuation = "200 dB"'),
    ("elliptic", 1, 'stopband_attenuation = "200 dB"'),
]  # fmt: skip


@pytest.mark.parametrize(("family", "order", "more"), FILTERS, ids=[f"{f}-{o}" for f, o, _ in FILTERS])
@pytest.mark.parametrize("rate_hz", [1e-3, 51.2e3, 100e9])
@pytest.mark.parametrize("corner_share", [1e-9, 0.5, 10.0])
def test_filters_at_the_extremes(
    family: str, order: int, more: str, rate_hz: float, corner_share: float, tree: Path,
    capsys: pytest.CaptureFixture[str],
) -> None:
    # the corner far below the band, at Nyquist, and far above it
    corner = rate_hz * corner_share
    extra = f'\n[filter]\nfamily = "{family}"\norder = {order}\ncorner = "{corner!r} Hz"\n{more}\n'
    _write(tree, channel(rate_hz, 24, (rate_hz * 1e-3, rate_hz * 0.45), extra))
    code, _, err = run_check(tree, capsys)
    assert code in (EXIT_OK, EXIT_FINDINGS), err


EXTREME_VALUES = [
    ('[signal]\nsnr = "200 dB"', "snr"),
    ('[signal]\nresolution = "1e-30 V"', "resolution"),
    ('[signal]\npeak = "1e30 V"', "peak"),
    ('[signal]\nout_of_band = "-200 dBFS"', "out_of_band"),
    ('[signal]\nflatness = "1e-9 dB"', "flatness"),
    ('[conversion]\njitter = "1e-30 s"', "jitter"),
    ('[conversion]\njitter = "1 s"', "jitter"),
    ('[conversion]\ngain = "200 dB"', "gain"),
    ('[conversion]\ngain = "-200 dB"', "gain"),
    ('[conversion]\nfull_scale = "±1e-30 V"', "full_scale"),
    ('[conversion]\nfull_scale = "±1e30 V"', "full_scale"),
    ('[sensor]\nnoise = "1e-30 V/√Hz"', "noise"),
    ('[sensor]\nnoise = "1e6 V"', "noise"),
    ('[[interference]]\nfrequency = "1e15 Hz"\nlevel = "0 dBFS"', "interference"),
    ('[[interference]]\nfrequency = "1e-15 Hz"\nlevel = "-300 dBFS"', "interference"),
]


@pytest.mark.parametrize(("table_text", "what"), EXTREME_VALUES, ids=[f"{w}-{i}" for i, (_, w) in
                                                                     enumerate(EXTREME_VALUES)])
@pytest.mark.parametrize("rate_hz", [1e-3, 100e9])
def test_other_values_at_the_extremes(
    table_text: str, what: str, rate_hz: float, tree: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    table, _, lines = table_text.partition("\n")
    text = channel(rate_hz, 32, (rate_hz * 1e-3, rate_hz * 0.45))
    if table in ("[signal]", "[conversion]"):
        # add to the table the channel already has; a key it already holds is replaced
        key = lines.split(" = ")[0]
        text = "\n".join(ln for ln in text.split("\n") if not ln.startswith(key + " ="))
        text = text.replace(table + "\n", f"{table}\n{lines}\n", 1)
    else:
        text = text.replace("\n+++\n", f"\n{table}\n{lines}\n+++\n").replace("+++\n\n" + table, "+++\n" + table)
    _write(tree, text)
    code, _, err = run_check(tree, capsys)
    # loaded and checked (0 or 1), or refused as bad input (2) with a message: never a crash
    assert code in (EXIT_OK, EXIT_FINDINGS, EXIT_BAD_INPUT), err
    if code == EXIT_BAD_INPUT:
        assert "ACC-1.md:" in err


# ------------------------------------------------------------------------------ limits


def _padded(size: int) -> str:
    """A valid channel file of exactly ``size`` bytes (the notes are padding)."""
    head = (MINIMAL / "channels" / "ACC-1.md").read_text(encoding="utf-8").rstrip("\n") + "\n"
    pad = size - len(head.encode())
    lines = ("x" * 99 + "\n") * (pad // 100)
    return head + lines + "y" * (pad - len(lines))


def test_channel_file_at_the_size_limit_loads(tree: Path) -> None:
    text = _padded(source.MAX_FILE_BYTES)
    assert len(text.encode()) == source.MAX_FILE_BYTES
    _write(tree, text)
    spec = load.load_spec(tree)
    assert len(spec.channel("ACC-1").notes) > 900_000


def test_channel_file_over_the_size_limit_is_refused(tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _write(tree, _padded(source.MAX_FILE_BYTES + 1))
    code = main(["check", str(tree)])
    _, err = capsys.readouterr()
    assert code == EXIT_BAD_INPUT
    assert "channels/ACC-1.md: the file is 1,000,001 bytes; spec files are limited to 1,000,000 bytes" in err


def test_system_file_over_the_size_limit_is_refused(tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    system = (tree / "system.toml").read_text(encoding="utf-8")
    (tree / "system.toml").write_text(system + "#" * (source.MAX_FILE_BYTES * 3), encoding="utf-8")
    code = main(["check", str(tree)])
    _, err = capsys.readouterr()
    assert code == EXIT_BAD_INPUT
    assert "system.toml: the file is 3,00" in err and "limited to 1,000,000 bytes" in err
    assert "Traceback" not in err


def test_channel_count_limit(tree: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setattr(load, "MAX_CHANNELS", 3)
    source = (tree / "channels" / "ACC-1.md").read_text(encoding="utf-8")
    for n in (2, 3):
        (tree / "channels" / f"ACC-{n}.md").write_text(source, encoding="utf-8")
    assert len(load.load_spec(tree).channels) == 3  # at the limit: accepted
    (tree / "channels" / "sub").mkdir()
    (tree / "channels" / "sub" / "ACC-4.md").write_text(source, encoding="utf-8")
    with pytest.raises(SpecErrors) as info:
        load.load_spec(tree)
    assert [e.message for e in info.value.errors] == ["4 channel files; a spec tree is limited to 3 channels"]
    code = main(["check", str(tree)])
    _, err = capsys.readouterr()
    assert code == EXIT_BAD_INPUT
    assert "channels: 4 channel files; a spec tree is limited to 3 channels" in err


class _CountedSplits(str):
    """A file's text that counts how often it is split into lines."""

    splits = 0

    def split(self, sep: str | None = None, maxsplit: int = -1) -> list[str]:  # type: ignore[override]
        type(self).splits += 1
        return super().split(sep, maxsplit)


def test_many_problems_in_one_file_stay_fast(tree: Path, capsys: pytest.CaptureFixture[str],
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    # 20,000 incomplete [[waiver]] tables, 0.4 MB: every one is reported.  The loader used to
    # split the whole file into lines once per problem, which took over a minute here; the splits
    # are counted rather than timed, so the check does not depend on the machine's speed.
    head = (tree / "channels" / "ACC-1.md").read_text(encoding="utf-8").split("+++")[1]
    _write(tree, "+++" + head + '[[waiver]]\nrule = "x"\n' * 20_000 + "+++\n")
    real = source.read_text

    def read(path: Path, rel: str, problems: list[SpecError], *args: object) -> str | None:
        text = real(path, rel, problems, *args)  # type: ignore[arg-type]
        return _CountedSplits(text) if text is not None and rel == "channels/ACC-1.md" else text

    monkeypatch.setattr(load, "read_text", read)
    code = main(["check", str(tree)])
    _, err = capsys.readouterr()
    assert code == EXIT_BAD_INPUT
    assert err.count("[[waiver]] reason is required") == 20_000
    # split once to find the header and once for the messages' source lines, not once per problem
    assert _CountedSplits.splits == 2
