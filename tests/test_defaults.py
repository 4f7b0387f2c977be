"""Defaults live once, in the schema: the model, the analysis and the filter designs read them there."""

from __future__ import annotations

from dataclasses import fields

import pytest

from generator import model, schema
from generator.analysis.sampling import SamplingResult
from generator.dsp import filters as flt
from generator.load import load_spec
from generator.model import key_default

from .conftest import MINIMAL

# key path -> (model class, attribute) holding that key's value
HOLDERS = {
    "signal.flatness": (model.Signal, "flatness_db"),
    "signal.out_of_band": (model.Signal, "out_of_band_dbfs"),
    "signal.filtered_to_band": (model.Signal, "filtered_to_band"),
    "signal.square_pixels": (model.Signal, "square_pixels"),
    "conversion.gain": (model.Conversion, "gain"),
    "conversion.hold": (model.Conversion, "hold"),
    "conversion.sinc_compensation": (model.Conversion, "sinc_compensation"),
    "filter.ripple": (model.Filter, "ripple_db"),
    "filter.stopband_attenuation": (model.Filter, "stopband_db"),
    "safety.powered_actuator": (model.Safety, "powered_actuator"),
    "system.revision": (model.System, "revision"),
    "system.format": (model.System, "format"),
    "converters.*.sampling": (model.Converter, "sampling"),
    "links.*.overhead": (model.Link, "overhead"),
    "links.*.headroom": (model.Link, "headroom"),
}


def _default(cls: type, name: str) -> object:
    return next(f.default for f in fields(cls) if f.name == name)


def test_every_schema_default_is_the_model_default() -> None:
    with_default = {k.path for k in (*schema.CHANNEL_KEYS, *schema.SYSTEM_KEYS) if k.default}
    assert set(HOLDERS) == with_default - {"unit"}  # the unit is parsed into a Unit by the loader
    for path, (cls, name) in HOLDERS.items():
        assert _default(cls, name) == key_default(path), path
    # the values as the schema writes them, read by hand
    assert key_default("signal.flatness") == 0.5 and key_default("filter.stopband_attenuation") == 80.0
    assert key_default("links.*.overhead") == 0.0 and key_default("conversion.hold") == "zero-order"
    with pytest.raises(KeyError):
        key_default("signal.band")


def test_analysis_and_filter_designs_use_the_schema_defaults() -> None:
    assert _default(SamplingResult, "flatness_db") == key_default("signal.flatness")
    assert _default(SamplingResult, "out_of_band_dbfs") == key_default("signal.out_of_band")
    # the ripple and stopband a family ignores are the ones a file without them reads back
    assert key_default("filter.ripple") == flt.IGNORED_RIPPLE_DB
    assert key_default("filter.stopband_attenuation") == flt.IGNORED_STOPBAND_DB
    d = flt.least_order("butterworth", 1e3, 4e3, 0.5, 60.0)
    assert d is not None and (d.ripple_db, d.stopband_db) == (flt.IGNORED_RIPPLE_DB, flt.IGNORED_STOPBAND_DB)


def test_the_loader_fills_in_the_schema_defaults() -> None:
    spec = load_spec(MINIMAL)
    checked = 0
    for ch in spec.channels:
        for path, (_, name) in HOLDERS.items():
            table = path.split(".")[0]
            part = {"signal": ch.signal, "conversion": ch.conversion, "filter": ch.filter,
                    "safety": ch.safety}.get(table)
            if part is None or path in ch.lines or path not in {k.path for k in schema.CHANNEL_KEYS
                                                                if ch.kind in k.kinds}:
                continue
            assert getattr(part, name) == key_default(path), (ch.id, path)
            checked += 1
    assert checked >= 8
