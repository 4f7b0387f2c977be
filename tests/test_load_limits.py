"""Hostile headers the fuzz corpus found: they must end as located input errors, never a crash."""

from __future__ import annotations

from pathlib import Path

import pytest

from generator.cli import EXIT_BAD_INPUT, main


def _with_header(tree: Path, extra: str) -> None:
    acc = tree / "channels" / "ACC-1.md"
    acc.write_text(acc.read_text().replace('kind = "input"\n', f'kind = "input"\n{extra}\n'))


def test_deeply_nested_arrays_are_refused(minimal_tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # tomllib recurses once per level: 5,000 brackets would raise RecursionError without the limit
    _with_header(minimal_tree, "deep = " + "[" * 5000 + "]" * 5000)
    assert main(["check", str(minimal_tree)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "nested more than 32 deep" in err and "Traceback" not in err


def test_long_dotted_key_is_refused(minimal_tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _with_header(minimal_tree, ".".join(["a"] * 2000) + " = 1")
    assert main(["check", str(minimal_tree)]) == EXIT_BAD_INPUT
    assert "a dotted key of more than 32 parts" in capsys.readouterr().err


def test_absurd_gain_in_db_is_an_input_error(minimal_tree: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # 10 ** (dB / 20) leaves the float range past about 6,000 dB (float max 1.8e308 = 10 ** 308.25)
    acc = minimal_tree / "channels" / "ACC-1.md"
    acc.write_text(acc.read_text().replace('converter = "ds"', 'converter = "ds"\ngain = "7000 dB"'))
    assert main(["check", str(minimal_tree)]) == EXIT_BAD_INPUT
    assert "beyond any real gain" in capsys.readouterr().err


@pytest.mark.parametrize("value", ['"1e-308 µε"', '"1.7976931348623157e308 Hz"'])
def test_values_beyond_any_physical_meaning_are_refused(minimal_tree: Path, value: str,
                                                        capsys: pytest.CaptureFixture[str]) -> None:
    # found by the fuzz corpus: such values overflowed log2, floor() and divider searches downstream
    acc = minimal_tree / "channels" / "ACC-1.md"
    key = "resolution" if "µε" in value else "peak"
    text = acc.read_text()
    if key == "resolution":
        acc.write_text(text.replace('unit = "g"', 'unit = "µε"').replace('peak = "20 g"', 'peak = "200 µε"')
                       .replace('sensitivity = "100 mV/g"', 'sensitivity = "2 µV/µε"')
                       .replace('peak = "200 µε"', f'peak = "200 µε"\nresolution = {value}'))
    else:
        acc.write_text(text.replace('band = ["2 Hz", "10 kHz"]', f'band = ["2 Hz", {value}]'))
    assert main(["check", str(minimal_tree)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "outside what a spec can mean" in err and "Traceback" not in err


def test_an_integer_of_more_than_4300_digits_is_an_input_error(minimal_tree: Path,
                                                                 capsys: pytest.CaptureFixture[str]) -> None:
    # Python refuses to read an integer of more than 4,300 digits (sys.get_int_max_str_digits(), a
    # guard against quadratic conversion): tomllib let that ValueError out, with no position
    acc = minimal_tree / "channels" / "ACC-1.md"
    acc.write_text(acc.read_text().replace('converter = "ds"', 'converter = "ds"\nbits = 1' + "0" * 4300))
    assert main(["check", str(minimal_tree)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    line = acc.read_text().split("\n").index("bits = 1" + "0" * 4300) + 1
    assert f"channels/ACC-1.md:{line}: a number of more than 4,300 digits" in err and "Traceback" not in err
