"""Dataclasses as TOML tables: one declaration drives both reading and writing (used by lockfile.py).

A field's TOML key is its name unless `entry(key=...)` says otherwise. Types come from the
annotations: str, int, float, bool, `X | None`, `tuple[str, ...]`, raw `dict[str, Any]`,
a nested record (a sub-table, left out while it equals its default), `dict[str, Record]`
(a table of tables whose keys fill the record's `from_key` field) and `list[Record]` /
`tuple[Record, ...]` (an array of tables). Reading checks every type and names the full key
in its message; writing leaves out None and empty values, so equal records give equal bytes.
"""

from __future__ import annotations

import dataclasses
import types
import typing
from collections.abc import Callable
from typing import Any, TypeVar

T = TypeVar("T")
_MISSING = dataclasses.MISSING
_TYPE_WORDS: dict[type, str] = {dict: "a table", str: "a string", int: "an integer", float: "a number",
                                 list: "a list", bool: "true or false"}
HEX = frozenset("0123456789abcdef")


def entry(*, default: Any = _MISSING, default_factory: Any = _MISSING, key: str | None = None,
          from_key: bool = False, digest: bool = False, choices: tuple[str, ...] = (), skip: bool = False,
          omit_default: bool = False, derive: Callable[[dict[str, Any]], Any] | None = None,
          read_default: Any = _MISSING, order: float = 0) -> Any:
    """A dataclass field with its lockfile rules."""
    meta = {"key": key, "from_key": from_key, "digest": digest, "choices": choices, "skip": skip,
            "omit_default": omit_default, "derive": derive, "read_default": read_default, "order": order}
    if default_factory is not _MISSING:
        return dataclasses.field(default_factory=default_factory, metadata=meta)
    return dataclasses.field(default=default, metadata=meta)


class SchemaError(Exception):
    """A table does not fit its declaration; the message names the full key."""


@dataclasses.dataclass(frozen=True)
class _Field:
    name: str
    key: str
    hint: Any
    meta: dict[str, Any]
    default: Any
    factory: Any

    @property
    def required(self) -> bool:
        return self.default is _MISSING and self.factory is _MISSING

    def default_value(self) -> Any:
        if self.factory is not _MISSING:
            return self.factory()
        return self.default


_FIELDS: dict[type, tuple[_Field, ...]] = {}


def _fields(cls: type) -> tuple[_Field, ...]:
    if cls in _FIELDS:
        return _FIELDS[cls]
    hints = typing.get_type_hints(cls)
    out = []
    for f in dataclasses.fields(cls):
        meta = dict(f.metadata) if f.metadata else {}
        out.append(_Field(f.name, meta.get("key") or f.name, hints[f.name], meta, f.default, f.default_factory))
    _FIELDS[cls] = tuple(sorted(out, key=lambda x: x.meta.get("order", 0)))
    return _FIELDS[cls]


def _is_record(hint: Any) -> bool:
    return isinstance(hint, type) and dataclasses.is_dataclass(hint)


def _strip_optional(hint: Any) -> tuple[Any, bool]:
    if isinstance(hint, types.UnionType) or typing.get_origin(hint) is typing.Union:
        args = [a for a in typing.get_args(hint) if a is not type(None)]
        return args[0], True
    return hint, False


# ----------------------------------------------------------------------------- writing


def _empty(value: Any) -> bool:
    return value is None or (isinstance(value, (tuple, list, dict)) and not value)


def _dump_value(hint: Any, value: Any) -> Any:
    hint, _ = _strip_optional(hint)
    origin = typing.get_origin(hint)
    if _is_record(hint):
        return to_table(value)
    if origin is dict:
        _, item = typing.get_args(hint)
        if _is_record(item):
            return {k: to_table(value[k]) for k in sorted(value)}
        return dict(sorted(value.items()))
    if origin in (list, tuple):
        item = typing.get_args(hint)[0]
        if _is_record(item):
            return [to_table(v) for v in value]
        if isinstance(item, type) and issubclass(item, tuple) and hasattr(item, "_fields"):
            return [dict(zip(item._fields, v)) for v in value]
        return list(value)
    return value


def to_table(record: Any) -> dict[str, Any]:
    """The TOML table for `record`: declared keys in declared order, empty values left out."""
    out: dict[str, Any] = {}
    for f in _fields(type(record)):
        if f.meta.get("skip") or f.meta.get("from_key") or f.meta.get("derive"):
            continue
        value = getattr(record, f.name)
        if _empty(value):
            continue
        if f.meta.get("omit_default") and not f.required and value == f.default_value():
            continue
        if _is_record(_strip_optional(f.hint)[0]) and not f.required and value == f.default_value():
            continue
        out[f.key] = _dump_value(f.hint, value)
    return out


# ----------------------------------------------------------------------------- reading


def _type_word(value: Any) -> str:
    return _TYPE_WORDS.get(type(value), type(value).__name__)


def _check_scalar(hint: Any, value: Any, where: str) -> Any:
    if hint is float and isinstance(value, int) and not isinstance(value, bool):
        return float(value)
    ok = isinstance(value, hint) and not (hint is int and isinstance(value, bool))
    if not ok:
        raise SchemaError(f"key '{where}' should be {_TYPE_WORDS.get(hint, hint.__name__)}, found {_type_word(value)}")
    return value


def _load_value(hint: Any, value: Any, where: str) -> Any:
    hint, optional = _strip_optional(hint)
    origin = typing.get_origin(hint)
    if _is_record(hint):
        if not isinstance(value, dict):
            raise SchemaError(f"key '{where}' should be a table")
        return from_table(hint, value, where)
    if origin is dict:
        if not isinstance(value, dict):
            raise SchemaError(f"key '{where}' should be a table")
        _, item = typing.get_args(hint)
        if _is_record(item):
            out = {}
            for k, sub in value.items():
                if not isinstance(sub, dict):
                    raise SchemaError(f"key '{where}.{k}' should be a table")
                out[k] = from_table(item, sub, f"{where}.{k}", key=k)
            return out
        return dict(value)
    if origin in (list, tuple):
        if not isinstance(value, list):
            raise SchemaError(f"key '{where}' should be a list, found {_type_word(value)}")
        item = typing.get_args(hint)[0]
        if _is_record(item):
            items = []
            for i, sub in enumerate(value):
                if not isinstance(sub, dict):
                    raise SchemaError(f"key '{where}[{i}]' should be a table")
                items.append(from_table(item, sub, f"{where}[{i}]"))
            return items if origin is list else tuple(items)
        if isinstance(item, type) and issubclass(item, tuple) and hasattr(item, "_fields"):
            return tuple(_load_named(item, sub, f"{where}[{i}]") for i, sub in enumerate(value))
        if item is str and not all(isinstance(x, str) for x in value):
            raise SchemaError(f"key '{where}' should be a list of strings")
        return tuple(value) if origin is tuple else list(value)
    return _check_scalar(hint, value, where)


def _load_named(cls: Any, value: Any, where: str) -> Any:
    if not isinstance(value, dict):
        raise SchemaError(f"key '{where}' should be a table")
    hints = typing.get_type_hints(cls)
    parts = []
    for name in cls._fields:
        if name not in value:
            raise SchemaError(f"missing key '{where}.{name}'")
        parts.append(_check_scalar(hints[name], value[name], f"{where}.{name}"))
    return cls(*parts)


def from_table(cls: type[T], table: dict[str, Any], where: str = "", *, key: str | None = None) -> T:
    """Build a `cls` record from its TOML table, checking every declared key."""
    prefix = f"{where}." if where else ""
    values: dict[str, Any] = {}
    for f in _fields(cls):
        if f.meta.get("skip"):
            continue
        if f.meta.get("from_key"):
            values[f.name] = key
            continue
        if f.meta.get("derive"):
            values[f.name] = f.meta["derive"](table)
            continue
        full = prefix + f.key
        if f.key not in table:
            if f.meta.get("read_default", _MISSING) is not _MISSING:
                values[f.name] = f.meta["read_default"]
                continue
            if f.required and _is_record(f.hint):  # name the first key the absent table needs
                values[f.name] = from_table(f.hint, {}, full)
                continue
            if f.required:
                raise SchemaError(f"missing key '{full}'")
            continue
        value = _load_value(f.hint, table[f.key], full)
        choices = f.meta.get("choices")
        if choices and value not in choices:
            raise SchemaError(f"key '{full}' is '{value}', expected one of {', '.join(choices)}")
        if f.meta.get("digest") and value is not None and (len(value) != 64 or not set(value) <= HEX):
            raise SchemaError(f"key '{full}' is not a SHA-256 hex digest")
        values[f.name] = value
    return cls(**values)
