"""Reading JSON Lines and JSON (a top-level array of objects) sources.

JSON Lines (one JSON text per line):

* lines are split on LF only. ``str.splitlines`` would also split on U+2028, U+2029, VT, FF and others,
  which RFC 8259 allows unescaped inside strings; a CR before the LF is JSON whitespace;
* a line holding only JSON whitespace (RFC 8259 section 2: space, tab, CR) is skipped, is not a record,
  and still counts for line numbers;
* a line that is not valid JSON, or is valid JSON but not an object, is an unreadable record with its
  line number.

JSON: the whole file must be one array (anything else is an :class:`InputError` naming the line of a
syntax error); an element that is not an object is an unreadable record (line null: an element has no
line of its own in general).

Both: NaN, Infinity and -Infinity are refused as invalid JSON (RFC 8259 section 6 excludes them;
Python's ``json`` accepts them by default). A key missing from an object gives null; a nested value
(object or array) becomes its compact JSON text; numbers and booleans their string form (see
:mod:`prep.read.strings`). When an object repeats a key, the last value wins (Python's ``json``
behaviour; RFC 8259 section 4 leaves it open).

The columns returned are the mapped keys when every one of them occurs in some object (or there are
no objects); otherwise every key seen, in order of first appearance, so the caller can say which exist.

Speed: one parse per line in a Python loop. Parsing the lines as one joined array would be
faster but cannot tell which line a record came from when a line is malformed (``{"a":1},{"b":`` plus
``2}`` would join into two valid objects), so correctness wins here. Each JSON Lines line is given to
orjson first when it is installed (a dependency of prep; measured about 1.5 times faster per line than
the standard parser, and it skips the JSON whitespace around the line itself). orjson accepts only
valid JSON (RFC 8259) and refuses lone surrogates, NaN and Infinity. Its result is kept only when it
is an object whose values are strings, integers, booleans or null, which orjson reads exactly as
``json`` does; anything else (a float, which may be an integer beyond 64 bits that orjson turned into a
float; a nested value, which ``json`` may refuse as too deep; a non-object) and every line orjson
refuses goes through the standard parser as before, so the values, the messages and the line numbers
of unreadable lines do not depend on orjson (tests/read/test_read_json.py compares both paths).
"""

from __future__ import annotations

import json
import re
from typing import Any

try:  # optional fast path for JSON Lines; the standard parser decides every line orjson refuses
    from orjson import loads as _fast_loads
except ImportError:  # pragma: no cover - orjson is a dependency; kept working without it
    _fast_loads = None

from prep.errors import InputError
from prep.read.encoding import decode
from prep.read.rawbytes import load_bytes
from prep.read.result import ReadResult, Unreadable, string_frame, wanted_columns, with_source_row
from prep.read.strings import values_to_string

# RFC 8259 section 2: the four whitespace characters of JSON (LF never occurs within a line here).
JSON_WHITESPACE = " \t\r\n"


def _refuse_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a JSON value (RFC 8259 section 6)")


_DECODER = json.JSONDecoder(parse_constant=_refuse_constant)


def _loads(text: str) -> Any:
    return _DECODER.decode(text)


def _loads_line(line: str) -> Any:
    """Parse one JSON text that has no surrounding whitespace.

    The same parser as :func:`_loads`, called through its scanner directly: ``decode`` adds two Python
    calls and a regex match per line, a third of the reading time for short lines.
    """
    try:
        value, end = _DECODER.scan_once(line, 0)
    except StopIteration as exc:
        raise json.JSONDecodeError("Expecting value", line, exc.value) from None
    if end != len(line):
        rest = line[end:]
        # Point at the extra value itself, after the whitespace, as json.loads does.
        raise json.JSONDecodeError("Extra data", line, end + len(rest) - len(rest.lstrip(JSON_WHITESPACE)))
    return value


# An escape of a UTF-16 surrogate (\ud800-\udfff). RFC 8259 section 8.2 allows such escapes
# without a partner ("\ud800" alone), which name no Unicode character; the json module reads them
# as lone surrogates, which no column can hold. Only texts holding such an escape are checked.
_SURROGATE_ESCAPE = re.compile(r"\\u[dD][89abcdefABCDEF]")
LONE_SURROGATE = (
    "holds an escaped lone surrogate (a \\ud800-\\udfff escape without its partner), which is not "
    "a Unicode character (RFC 8259 section 8.2)"
)


def _has_lone_surrogate(value: Any) -> bool:
    """Whether a parsed JSON value holds a lone surrogate anywhere (keys and nested values too)."""
    try:
        json.dumps(value, ensure_ascii=False).encode("utf-8")
    except UnicodeEncodeError:
        return True
    return False


_REFUSED = object()
# The value types orjson's result may hold for it to be used: for these it reads every literal as
# ``json`` does. Integer literals beyond 64 bits come back from orjson as floats, and orjson nests
# 1024 levels deep where ``json`` stops at Python's recursion limit, so a line with a float or a
# nested value (or one that is not an object) goes to the standard parser: rare in ticket exports.
_PLAIN_TYPES = frozenset({str, int, bool, type(None)})


def _fast_line(raw: str) -> Any:
    """The object on one JSON Lines line by orjson (JSON whitespace around it allowed), or
    :data:`_REFUSED` when orjson is missing, refuses the line (invalid JSON, a blank line, lone
    surrogates, NaN) or the result is not an object of plain values (see :data:`_PLAIN_TYPES`);
    the standard parser then decides."""
    if _fast_loads is None:
        return _REFUSED
    try:
        value = _fast_loads(raw)
    except ValueError:  # orjson.JSONDecodeError
        return _REFUSED
    if type(value) is not dict or not _PLAIN_TYPES.issuperset(map(type, value.values())):
        return _REFUSED
    return value


def _syntax_detail(exc: Exception, *, indent: int = 0) -> str:
    if isinstance(exc, json.JSONDecodeError):
        # exc.msg is json's fixed wording ("Expecting value"), never part of the data. The line was
        # parsed without its leading whitespace: add it back so the column counts from the line start.
        return f"the line is not valid JSON ({exc.msg} at column {exc.colno + indent})"
    if isinstance(exc, RecursionError):
        return "the line nests JSON values too deeply to read"
    return "the line is not valid JSON (NaN or Infinity, excluded by RFC 8259 section 6)"


def _text(source: Any) -> tuple[str, str]:
    decoded = decode(source, load_bytes(source))
    if not decoded.text.strip(JSON_WHITESPACE):
        raise InputError("the file is empty: it holds no JSON.", file=source.path_text)
    return decoded.text, decoded.encoding


def _keys(objects: list[dict]) -> list[str]:
    keys: dict[str, None] = {}
    for obj in objects:
        keys.update(dict.fromkeys(obj))
    return list(keys)


def _table(source: Any, objects: list[dict], rows: list[int]):
    mapped = list(dict.fromkeys((source.columns or {}).values()))
    if not objects:
        available = mapped
    elif mapped and all(any(key in obj for obj in objects) for key in mapped):
        available = mapped  # usually found in the first object: no need to gather every key
    else:
        available = _keys(objects)
    wanted = wanted_columns(source, available)
    table = string_frame([values_to_string(key, [obj.get(key) for obj in objects]) for key in wanted], wanted)
    return with_source_row(table, rows)


def read_jsonl(source: Any, *, on_unreadable: str) -> ReadResult:
    objects, rows, unreadable, count, encoding = _jsonl_objects(source, on_unreadable)
    return ReadResult(_table(source, objects, rows), unreadable.frame(), count, encoding)


def read_json(source: Any, *, on_unreadable: str) -> ReadResult:
    objects, rows, unreadable, count, encoding = _json_objects(source, on_unreadable)
    return ReadResult(_table(source, objects, rows), unreadable.frame(), count, encoding)


def read_keys(source: Any) -> list[str]:
    """Every key of every readable object, in order of first appearance (JSON has no header)."""
    collect = _jsonl_objects if source.format == "jsonl" else _json_objects
    return _keys(collect(source, "set_aside")[0])


def _jsonl_objects(source: Any, on_unreadable: str):
    text, encoding = _text(source)
    unreadable = Unreadable(source, on_unreadable)
    objects: list[dict] = []
    rows: list[int] = []
    index = 0
    for number, raw in enumerate(text.split("\n"), start=1):
        value = _fast_line(raw)
        if value is _REFUSED:
            line = raw.strip(JSON_WHITESPACE)
            if not line:
                continue
            try:
                value = _loads_line(line)
            except (ValueError, RecursionError) as exc:
                indent = len(raw) - len(raw.lstrip(JSON_WHITESPACE))
                unreadable.add(index, number, _syntax_detail(exc, indent=indent))
                index += 1
                continue
            # orjson refuses lone surrogates, so only lines read here can hold one.
            if _SURROGATE_ESCAPE.search(line) and _has_lone_surrogate(value):
                unreadable.add(index, number, f"the line {LONE_SURROGATE}")
                index += 1
                continue
        if type(value) is dict:
            objects.append(value)
            rows.append(index)
        else:
            unreadable.add(index, number, f"the line is a JSON {_kind(value)}, not an object")
        index += 1
    return objects, rows, unreadable, index, encoding


def _json_objects(source: Any, on_unreadable: str):
    text, encoding = _text(source)
    try:
        value = _loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(
            f"the file is not valid JSON ({exc.msg} at column {exc.colno}).", file=source.path_text, line=exc.lineno
        ) from exc
    except (ValueError, RecursionError) as exc:
        raise InputError(
            "the file is not valid JSON (NaN or Infinity, or nesting too deep).", file=source.path_text
        ) from exc
    if type(value) is not list:
        raise InputError(
            f"the file holds a JSON {_kind(value)}; prep reads a JSON array of objects.",
            file=source.path_text,
            hint="Export one array of records, or one object per line as JSON Lines (.jsonl).",
        )
    unreadable = Unreadable(source, on_unreadable)
    surrogates = _SURROGATE_ESCAPE.search(text) is not None
    objects = [item for item in value if type(item) is dict and not (surrogates and _has_lone_surrogate(item))]
    if len(objects) == len(value):
        rows = list(range(len(value)))
    else:
        rows = []
        for index, item in enumerate(value):
            if type(item) is not dict:
                unreadable.add(index, None, f"array element {index} is a JSON {_kind(item)}, not an object")
            elif surrogates and _has_lone_surrogate(item):
                unreadable.add(index, None, f"array element {index} {LONE_SURROGATE}")
            else:
                rows.append(index)
    return objects, rows, unreadable, len(value), encoding


def _kind(value: Any) -> str:
    # RFC 8259 section 3 names the kinds of JSON values.
    if isinstance(value, bool):
        return "boolean"
    if value is None:
        return "null"
    if isinstance(value, (int, float)):
        return "number"
    if isinstance(value, str):
        return "string"
    if isinstance(value, list):
        return "array"
    return "object"
