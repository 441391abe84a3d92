"""Typed configuration objects built from YAML values, with errors that name the key path and line.

A config is a frozen dataclass. Field types may be ``str``, ``int``, ``float``,
``bool``, ``Literal[...]``, ``list[T]``, ``dict[str, T]``, another config
dataclass, ``None`` and unions of these (``str | FillSpec | None``). Fields
without a default are required. Unknown keys are errors.

    >>> @dataclass(frozen=True)
    ... class Example:
    ...     threshold: float = 0.8
    >>> build(Example, {"threshold": 0.9}, "steps[0].example")
    Example(threshold=0.9)

A dataclass may define ``check(self) -> None`` that raises :class:`ConfigValueError`
for rules the types cannot express (``key`` is relative to the dataclass).
"""

from __future__ import annotations

import dataclasses
import types
import typing
from dataclasses import dataclass
from typing import Any, Literal, Union

__all__ = ["ConfigError", "ConfigValueError", "build", "line_of", "to_plain", "dataclass"]


class ConfigError(Exception):
    """A config value is wrong. ``path`` is the dotted key path, ``line`` 1-based or None."""

    def __init__(self, path: str, message: str, line: int | None = None) -> None:
        super().__init__(message)
        self.path = path
        self.message = message
        self.line = line


class ConfigValueError(Exception):
    """Raised by a config's ``check()``; ``key`` is a field of that config (or "" for the whole)."""

    def __init__(self, key: str, message: str) -> None:
        super().__init__(message)
        self.key = key
        self.message = message


def line_of(container: Any, key: Any = None) -> int | None:
    """1-based YAML line of ``container[key]`` (or of the container), if the loader recorded it."""
    lc = getattr(container, "lc", None)
    if lc is None:
        return None
    try:
        if key is None:
            return lc.line + 1
        if isinstance(key, int):
            return lc.item(key)[0] + 1
        return lc.key(key)[0] + 1
    except Exception:  # ruamel has no position for synthesised nodes
        try:
            return lc.line + 1
        except Exception:
            return None


def _join(path: str, key: Any) -> str:
    if isinstance(key, int):
        return f"{path}[{key}]"
    return f"{path}.{key}" if path else str(key)


def _type_name(tp: Any) -> str:
    origin = typing.get_origin(tp)
    if tp is type(None):
        return "null"
    if tp is str:
        return "a string"
    if tp is bool:
        return "true or false"
    if tp is int:
        return "a whole number"
    if tp is float:
        return "a number"
    if origin is Literal:
        return "one of " + ", ".join(repr(a) for a in typing.get_args(tp))
    if origin is list:
        return "a list"
    if origin is dict:
        return "a mapping"
    if origin in (Union, types.UnionType):
        return " or ".join(_type_name(a) for a in typing.get_args(tp))
    if dataclasses.is_dataclass(tp):
        return "a mapping"
    return getattr(tp, "__name__", str(tp))


def _describe(value: Any) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, (int, float)):
        return f"the number {value!r}"
    if isinstance(value, str):
        return f"the string {value!r}" if len(value) <= 40 else "a long string"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return type(value).__name__


def build(tp: Any, value: Any, path: str, *, parent: Any = None, key: Any = None) -> Any:
    """Build a value of type ``tp`` from a YAML value, raising :class:`ConfigError` on mismatch."""
    line = line_of(parent, key) if parent is not None else line_of(value)
    origin = typing.get_origin(tp)

    def fail(message: str) -> typing.NoReturn:
        raise ConfigError(path, message, line)

    if tp is Any:
        return to_plain(value)
    if origin in (Union, types.UnionType):
        options = typing.get_args(tp)
        if value is None and type(None) in options:
            return None
        # Pick the first option whose shape matches; report the expected shapes otherwise.
        for option in options:
            if option is type(None):
                continue
            if _shape_matches(option, value):
                return build(option, value, path, parent=parent, key=key)
        fail(f"expected {_type_name(tp)}, got {_describe(value)}")
    if tp is type(None):
        if value is not None:
            fail(f"expected null, got {_describe(value)}")
        return None
    if tp is str:
        if not isinstance(value, str):
            fail(f"expected a string, got {_describe(value)}")
        return str(value)
    if tp is bool:
        if not isinstance(value, bool):
            fail(f"expected true or false, got {_describe(value)}")
        return bool(value)
    if tp is int:
        if isinstance(value, bool) or not isinstance(value, int):
            fail(f"expected a whole number, got {_describe(value)}")
        return int(value)
    if tp is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            fail(f"expected a number, got {_describe(value)}")
        return float(value)
    if origin is Literal:
        allowed = typing.get_args(tp)
        if not any(value == a and type(value) is type(a) for a in allowed):
            fail(f"expected one of {', '.join(repr(a) for a in allowed)}, got {_describe(value)}")
        return value
    if origin is list:
        (item_tp,) = typing.get_args(tp)
        if not isinstance(value, list):
            fail(f"expected a list, got {_describe(value)}")
        return [build(item_tp, v, _join(path, i), parent=value, key=i) for i, v in enumerate(value)]
    if origin is dict:
        key_tp, item_tp = typing.get_args(tp)
        if not isinstance(value, dict):
            fail(f"expected a mapping, got {_describe(value)}")
        out = {}
        for k, v in value.items():
            if not isinstance(k, str):
                raise ConfigError(_join(path, k), "keys must be strings", line_of(value, k))
            out[k] = build(item_tp, v, _join(path, k), parent=value, key=k)
        return out
    if dataclasses.is_dataclass(tp):
        return _build_dataclass(tp, value, path, line)
    raise TypeError(f"unsupported config type {tp!r}")  # a programming error, not a user error


def _shape_matches(tp: Any, value: Any) -> bool:
    origin = typing.get_origin(tp)
    if tp is str:
        return isinstance(value, str)
    if tp is bool:
        return isinstance(value, bool)
    if tp is int:
        return isinstance(value, int) and not isinstance(value, bool)
    if tp is float:
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if origin is Literal:
        return any(value == a and type(value) is type(a) for a in typing.get_args(tp))
    if origin is list:
        return isinstance(value, list)
    if origin is dict or dataclasses.is_dataclass(tp):
        return isinstance(value, dict)
    if tp is Any:
        return True
    return False


def _build_dataclass(tp: Any, value: Any, path: str, line: int | None) -> Any:
    if value is None:
        value = {}
    if not isinstance(value, dict):
        raise ConfigError(path, f"expected a mapping, got {_describe(value)}", line)
    hints = typing.get_type_hints(tp)
    fields = {f.name: f for f in dataclasses.fields(tp) if f.init}
    for k in value:
        if k not in fields:
            known = ", ".join(sorted(fields)) or "none"
            raise ConfigError(_join(path, k), f"unknown key (known keys: {known})", line_of(value, k))
    kwargs = {}
    for name, field in fields.items():
        if name in value:
            kwargs[name] = build(hints[name], value[name], _join(path, name), parent=value, key=name)
        elif field.default is dataclasses.MISSING and field.default_factory is dataclasses.MISSING:
            raise ConfigError(_join(path, name), "required key is missing", line)
    obj = tp(**kwargs)
    check = getattr(obj, "check", None)
    if callable(check):
        try:
            check()
        except ConfigValueError as exc:
            where = _join(path, exc.key) if exc.key else path
            at = line_of(value, exc.key) if exc.key and exc.key in value else line
            raise ConfigError(where, exc.message, at) from None
    return obj


def to_plain(value: Any) -> Any:
    """A config (or YAML value) as plain JSON-safe Python: dicts, lists, str, numbers, None."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): to_plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_plain(v) for v in value]
    if isinstance(value, bool) or value is None:
        return value
    if isinstance(value, int):
        return int(value)
    if isinstance(value, float):
        return float(value)
    if isinstance(value, str):
        return str(value)
    return str(value)
