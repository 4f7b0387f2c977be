"""Frozen model values as plain JSON data and back: what the build cache keeps of a loaded channel.

:func:`encode` turns a value built of frozen dataclasses, tuples, frozensets, mappings, strings,
numbers, booleans and None into lists, dicts and scalars; :func:`decode` rebuilds it from those,
guided by the type annotations of the dataclasses (``decode(Channel, data)``).  A float that JSON
cannot carry (infinity, NaN) is written as a one-key object ``{"float": "inf"}``.  Anything that
does not fit the annotations raises :class:`CodecError`: the cache treats such an entry as absent.
"""

from __future__ import annotations

import dataclasses
import math
import types
import typing
from collections.abc import Mapping
from functools import cache
from types import MappingProxyType
from typing import Any

Json = None | bool | int | float | str | list[Any] | dict[str, Any]


class CodecError(ValueError):
    """The data does not fit the type it is decoded as."""


def encode(value: object) -> Json:
    """``value`` as JSON data (dataclasses as objects of their fields, in declaration order)."""
    if value is None or isinstance(value, (bool, int, str)):
        return value
    if isinstance(value, float):
        return value if math.isfinite(value) else {"float": repr(value)}
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: encode(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, (tuple, list)):
        return [encode(v) for v in value]
    if isinstance(value, frozenset):
        return sorted((encode(v) for v in value), key=repr)
    if isinstance(value, Mapping):
        return {str(k): encode(v) for k, v in value.items()}
    raise CodecError(f"cannot encode a {type(value).__name__}")


Decoder = typing.Callable[[Json], Any]


def decode(kind: Any, data: Json) -> Any:
    """Rebuild a value of type ``kind`` (a dataclass or an annotation) from :func:`encode`'s data."""
    return _decoder(kind)(data)


def _fail(message: str) -> typing.NoReturn:
    raise CodecError(message)


def _float(data: Json) -> float:
    if isinstance(data, float) or (isinstance(data, int) and not isinstance(data, bool)):
        return float(data)
    if isinstance(data, dict) and set(data) == {"float"} and isinstance(data["float"], str):
        return float(data["float"])
    _fail(f"{data!r} is not a number")


@cache
def _decoder(kind: Any) -> Decoder:
    """A function decoding data of type ``kind``: built once per type, so a cache of thousands of
    channels walks no annotations at run time."""
    origin = typing.get_origin(kind)
    args = typing.get_args(kind)
    if kind is Any:
        return lambda data: data
    if origin in (typing.Union, types.UnionType):
        nullable = type(None) in args
        options = [_decoder(a) for a in args if a is not type(None)]

        def union(data: Json) -> Any:
            if data is None and nullable:
                return None
            for option in options:
                try:
                    return option(data)
                except CodecError:
                    continue
            _fail(f"{data!r} fits none of {kind}")
        return union
    if kind is float:
        return _float
    if kind in (int, str, bool):
        def scalar(data: Json) -> Any:
            return data if type(data) is kind else _fail(f"{data!r} is not a {kind.__name__}")
        return scalar
    if origin is tuple:
        if len(args) == 2 and args[1] is Ellipsis:
            item = _decoder(args[0])

            def sequence(data: Json) -> Any:
                return tuple(item(v) for v in data) if isinstance(data, list) else _fail(f"{data!r} is not a list")
            return sequence
        items = [_decoder(a) for a in args]

        def fixed(data: Json) -> Any:
            if not isinstance(data, list) or len(data) != len(items):
                _fail(f"{data!r} is not a list of {len(items)}")
            return tuple(d(v) for d, v in zip(items, data, strict=True))
        return fixed
    if origin is frozenset:
        member = _decoder(args[0])

        def members(data: Json) -> Any:
            return frozenset(member(v) for v in data) if isinstance(data, list) else _fail(f"{data!r} is not a list")
        return members
    if origin in (Mapping, dict) or kind is Mapping:
        value = _decoder(args[1]) if args else _decoder(Any)

        def mapping(data: Json) -> Any:
            if not isinstance(data, dict):
                _fail(f"{data!r} is not an object")
            return MappingProxyType({k: value(v) for k, v in data.items()})
        return mapping
    if isinstance(kind, type) and dataclasses.is_dataclass(kind):
        hints = typing.get_type_hints(kind)
        fields = [(f.name, _decoder(hints[f.name])) for f in dataclasses.fields(kind) if f.init]
        names = {n for n, _ in fields}

        # A frozen dataclass's __init__ sets every field through object.__setattr__; a model class has
        # no __post_init__ and no slots, so filling its __dict__ builds the very same object faster.
        plain = not hasattr(kind, "__post_init__") and not hasattr(kind, "__slots__") and all(
            f.init for f in dataclasses.fields(kind))

        def instance(data: Json) -> Any:
            if not isinstance(data, dict) or data.keys() != names:
                _fail(f"{data!r} does not hold the fields of {kind.__name__}")
            if not plain:
                return kind(**{n: d(data[n]) for n, d in fields})
            obj = object.__new__(kind)
            obj.__dict__.update({n: d(data[n]) for n, d in fields})
            return obj
        return instance
    raise CodecError(f"cannot decode {kind}")
