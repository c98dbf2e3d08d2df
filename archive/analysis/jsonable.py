"""Result dataclasses to JSON and back, so that the store can keep what the analysis found.

Only data crosses: :func:`dumps` writes plain JSON (dates as ISO strings, non-finite floats as null) and
:func:`rebuild` makes the dataclass again from its type hints. Nothing is ever deserialised into code.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools
import json
import types
import typing
from typing import Any, TypeVar

from archive.analysis.results import json_safe

T = TypeVar("T")


def dumps(value: Any) -> str:
    """JSON of a dataclass (or a list/dict of them): compact, dates as ISO strings, NaN/inf as null."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        value = dataclasses.asdict(value)
    elif isinstance(value, list):
        value = [dataclasses.asdict(v) if dataclasses.is_dataclass(v) else v for v in value]  # type: ignore[arg-type]
    return json.dumps(json_safe(value), separators=(",", ":"), ensure_ascii=False, default=_iso)


def _iso(value: Any) -> str:
    if isinstance(value, dt.date):
        return value.isoformat()
    raise TypeError(f"cannot store {type(value).__name__} as JSON")


def loads(cls: type[T], text: str) -> T:
    """The dataclass ``cls`` rebuilt from :func:`dumps` output."""
    return rebuild(cls, json.loads(text))


def loads_list(cls: type[T], text: str) -> list[T]:
    return [rebuild(cls, item) for item in json.loads(text)]


def rebuild(cls: Any, data: Any) -> Any:
    """A value of type ``cls`` (a dataclass, ``X | None``, ``list[X]``, ``dict[str, X]``, ``tuple``, a date or a
    plain type) from its JSON form."""
    if data is None:
        return None
    origin = typing.get_origin(cls)
    if origin is typing.Union or isinstance(cls, types.UnionType):
        options = [a for a in typing.get_args(cls) if a is not type(None)]
        return rebuild(options[0], data) if len(options) == 1 else data
    if origin is typing.Literal:
        return data
    if origin in (list, tuple):
        args = typing.get_args(cls)
        items = [rebuild(args[0] if args else Any, v) for v in data]
        return items if origin is list else tuple(items)
    if origin is dict:
        _, value_type = typing.get_args(cls) or (str, Any)
        return {k: rebuild(value_type, v) for k, v in data.items()}
    if cls is dt.date:
        return dt.date.fromisoformat(data) if isinstance(data, str) else data
    if cls is float:
        return float(data)
    if isinstance(cls, type) and dataclasses.is_dataclass(cls):
        hints = _hints(cls)
        kwargs = {f.name: rebuild(hints[f.name], data[f.name]) for f in dataclasses.fields(cls) if f.name in data}
        return cls(**kwargs)
    return data


@functools.cache
def _hints(cls: type) -> dict[str, Any]:
    return typing.get_type_hints(cls)
