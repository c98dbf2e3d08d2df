"""Result dataclasses to JSON and back, so that the store can keep what the analysis found.

Only data crosses: :func:`dumps` writes plain JSON (dates as ISO strings, non-finite floats as null) and
:func:`rebuild` makes the dataclass again from its type hints. Nothing is ever deserialised into code.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools
import json
import math
import types
import typing
from collections.abc import Callable
from typing import Any, TypeVar

from archive.analysis.results import json_safe

T = TypeVar("T")


def dumps(value: Any) -> str:
    """JSON of a dataclass (or a list/dict of them): compact, dates as ISO strings, NaN/inf as null."""
    return json.dumps(plain(value), separators=(",", ":"), ensure_ascii=False)


def plain(value: Any) -> Any:
    """Dataclasses, tuples, numpy scalars and dates as plain JSON values, in one pass (what
    ``json_safe(dataclasses.asdict(value))`` gives, several times faster)."""
    kind = type(value)
    if kind is str or kind is int or kind is bool or value is None:
        return value
    if kind is float:
        return value if math.isfinite(value) else None
    fields = getattr(kind, "__dataclass_fields__", None)
    if fields is not None:
        return {name: plain(getattr(value, name)) for name in fields}
    if kind is list or kind is tuple:
        return [plain(v) for v in value]
    if kind is dict:
        return {k: plain(v) for k, v in value.items()}
    if isinstance(value, dt.date):
        return value.isoformat()
    return json_safe(value.item() if hasattr(value, "item") else value)


def loads(cls: type[T], text: str) -> T:
    """The dataclass ``cls`` rebuilt from :func:`dumps` output."""
    return rebuild(cls, json.loads(text))


def loads_list(cls: type[T], text: str) -> list[T]:
    return [rebuild(cls, item) for item in json.loads(text)]


def rebuild(cls: Any, data: Any) -> Any:
    """A value of type ``cls`` (a dataclass, ``X | None``, ``list[X]``, ``dict[str, X]``, ``tuple``, a date or a
    plain type) from its JSON form."""
    return _converter(cls)(data)


_PLAIN = (str, int, bool, Any)


def _identity(data: Any) -> Any:
    return data


@functools.cache
def _converter(cls: Any) -> Callable[[Any], Any]:
    """A function turning JSON data into ``cls``, built once per type (the identity for plain JSON types)."""
    origin = typing.get_origin(cls)
    if cls in _PLAIN or origin is typing.Literal:
        return _identity
    if origin is typing.Union or isinstance(cls, types.UnionType):
        options = [a for a in typing.get_args(cls) if a is not type(None)]
        inner = _converter(options[0]) if len(options) == 1 else _identity
        if inner is _identity:
            return _identity
        return lambda data: None if data is None else inner(data)
    if origin in (list, tuple):
        args = typing.get_args(cls)
        item = _converter(args[0]) if args else _identity
        if origin is list:
            return _identity if item is _identity else (lambda data: None if data is None else [item(v) for v in data])
        return lambda data: None if data is None else tuple(item(v) for v in data)
    if origin is dict:
        args = typing.get_args(cls)
        value = _converter(args[1]) if args else _identity
        if value is _identity:
            return _identity
        return lambda data: None if data is None else {k: value(v) for k, v in data.items()}
    if cls is dt.date:
        return lambda data: dt.date.fromisoformat(data) if isinstance(data, str) else data
    if cls is float:
        return _identity  # JSON gives floats back as floats (an int where a float is due is harmless)
    if isinstance(cls, type) and dataclasses.is_dataclass(cls):
        hints = typing.get_type_hints(cls)
        fields = [(f.name, _converter(hints[f.name])) for f in dataclasses.fields(cls)]

        def build(data: Any) -> Any:
            if data is None:
                return None
            return cls(**{name: conv(data[name]) for name, conv in fields if name in data})

        return build
    return _identity
