"""The model's JSON round trip, which the build cache relies on."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

import pytest

from generator.codec import CodecError, decode, encode
from generator.load import load_spec
from generator.model import Channel, System

from .conftest import DEMO


def test_every_demo_channel_and_the_system_come_back_equal() -> None:
    spec = load_spec(DEMO)
    for ch in spec.channels:
        assert decode(Channel, json.loads(json.dumps(encode(ch), allow_nan=False))) == ch, ch.id
    assert decode(System, json.loads(json.dumps(encode(spec.system), allow_nan=False))) == spec.system


@dataclass(frozen=True)
class _Point:
    x: float
    label: str | None = None


def test_non_finite_floats_and_bad_data() -> None:
    data = json.loads(json.dumps(encode(_Point(math.inf)), allow_nan=False))
    assert decode(_Point, data) == _Point(math.inf)
    for bad in ({"x": "1"}, {"x": 1.0, "label": 3}, {"x": 1.0}, [1.0], {"x": 1.0, "label": None, "y": 2}):
        with pytest.raises(CodecError):
            decode(_Point, bad)
