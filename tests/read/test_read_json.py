"""JSON Lines and JSON array reading."""

from __future__ import annotations

import json

import polars as pl
import pytest

from prep.errors import InputError
from prep.read import read_columns, read_source


def jsonl(*objects) -> str:
    return "".join((o if isinstance(o, str) else json.dumps(o)) + "\n" for o in objects)


def test_jsonl_basic_missing_keys_are_null(make_source):
    result = read_source(make_source(jsonl({"a": "x", "b": "y"}, {"b": "z"}, {"a": "w", "c": "v"}), "jsonl"))
    assert result.table.columns == ["source_row", "a", "b", "c"]
    assert result.table.rows() == [(0, "x", "y", None), (1, None, "z", None), (2, "w", None, "v")]
    assert result.encoding == "utf-8"


def test_jsonl_blank_lines_skipped_but_counted(make_source):
    text = '\n{"a": "1"}\n   \n\t\r\n{"a": "2"}\n{oops\n\n{"a": "3"}\n'
    result = read_source(make_source(text, "jsonl"))
    assert result.table.rows() == [(0, "1"), (1, "2"), (3, "3")]
    assert result.rows_read == 4
    assert result.unreadable["source_row"].to_list() == [2]
    assert result.unreadable["line"].to_list() == [6]


def test_jsonl_invalid_and_non_object_lines_are_unreadable(make_source):
    text = jsonl({"a": "1"}, "[1, 2]", '"just a string"', "null", "{\"a\": 'single'}", {"a": "2"})
    result = read_source(make_source(text, "jsonl"))
    assert result.table["source_row"].to_list() == [0, 5]
    assert result.unreadable["line"].to_list() == [2, 3, 4, 5]
    details = result.unreadable["detail"].to_list()
    assert details[:3] == [
        "the line is a JSON array, not an object",
        "the line is a JSON string, not an object",
        "the line is a JSON null, not an object",
    ]
    assert details[3].startswith("the line is not valid JSON")
    assert "single" not in details[3]  # no data in details


def test_jsonl_nan_and_infinity_are_refused(make_source):
    # RFC 8259 section 6: "Numeric values that cannot be represented in the grammar below (such as
    # Infinity and NaN) are not permitted." Python's json accepts them unless told otherwise.
    text = jsonl('{"a": NaN}', '{"a": Infinity}', '{"a": -Infinity}', {"a": 1})
    result = read_source(make_source(text, "jsonl"))
    assert result.unreadable["line"].to_list() == [1, 2, 3]
    assert result.table.rows() == [(3, "1")]


def test_jsonl_line_separator_inside_a_string_does_not_split_the_record(make_source):
    # RFC 8259 section 7 only requires escaping quotation mark, reverse solidus and U+0000..U+001F,
    # so U+2028 LINE SEPARATOR and U+2029 may appear raw inside a string. str.splitlines() would split there.
    text = '{"a": "before\u2028after\u2029end\x85x"}\n'
    result = read_source(make_source(text, "jsonl"))
    assert result.table.rows() == [(0, "before\u2028after\u2029end\x85x")]


def test_jsonl_crlf(make_source):
    result = read_source(make_source('{"a": "1"}\r\n{"a": "2"}\r\n', "jsonl"))
    assert result.table.rows() == [(0, "1"), (1, "2")]


def test_values_become_strings(make_source):
    obj = {"i": 42, "neg": -7, "big": 12345678901234567890, "f": 0.1, "e": 1e20, "t": True, "n": None,
           "o": {"k": "ü", "l": [1, 2.5, None]}, "l": ["x", {"y": False}], "s": "text"}
    result = read_source(make_source(jsonl(obj), "jsonl"))
    row = dict(zip(result.table.columns, result.table.row(0)))
    assert row["i"] == "42" and row["neg"] == "-7" and row["big"] == "12345678901234567890"
    # Floats as polars casts a Float64 to String (the same rule as for Parquet sources).
    assert row["f"] == pl.Series([0.1]).cast(pl.String)[0]
    assert row["e"] == pl.Series([1e20]).cast(pl.String)[0]
    assert row["t"] == "true"  # RFC 8259 literal names
    assert row["n"] is None
    # Nested values: compact JSON that parses back to the same value (checked with Python's json).
    assert json.loads(row["o"]) == obj["o"] and row["o"] == '{"k":"ü","l":[1,2.5,null]}'
    assert json.loads(row["l"]) == obj["l"]
    assert all(dtype == pl.String for dtype in result.table.dtypes[1:])


def test_mixed_types_in_one_column(make_source):
    result = read_source(make_source(jsonl({"a": "x"}, {"a": 3}, {"a": False}, {"a": 2.5}, {"a": None}), "jsonl"))
    assert result.table["a"].to_list() == ["x", "3", "false", "2.5", None]


def test_jsonl_stop(make_source):
    with pytest.raises(InputError) as info:
        read_source(make_source(jsonl({"a": 1}, "{broken"), "jsonl"), on_unreadable="stop")
    assert info.value.line == 2


def test_jsonl_gzip(make_source):
    result = read_source(make_source(jsonl({"a": "1"}), "jsonl", gz=True))
    assert result.table.rows() == [(0, "1")]


def test_jsonl_mapped_columns(make_source):
    source = make_source(jsonl({"a": "1", "b": "2", "c": "3"}, {"a": "4"}), "jsonl", columns={"x": "c", "y": "a"})
    result = read_source(source)
    assert result.table.columns == ["source_row", "c", "a"]
    assert result.table.rows() == [(0, "3", "1"), (1, None, "4")]


def test_mapped_key_in_no_object_returns_every_key(make_source):
    source = make_source(jsonl({"a": "1", "b": "2"}), "jsonl", columns={"x": "missing"})
    assert read_source(source).table.columns == ["source_row", "a", "b"]


def test_json_array(make_source):
    text = json.dumps([{"a": "1"}, {"a": "2", "b": 3}], indent=2)
    result = read_source(make_source(text, "json"))
    assert result.table.rows() == [(0, "1", None), (1, "2", "3")]
    assert read_columns(make_source(text, "json")) == ["a", "b"]


def test_json_array_element_not_an_object_is_unreadable_without_line(make_source):
    result = read_source(make_source('[{"a": "1"}, 5, [], {"a": "2"}]', "json"))
    assert result.table.rows() == [(0, "1"), (3, "2")]
    assert result.unreadable.rows() == [
        (1, None, "array element 1 is a JSON number, not an object"),
        (2, None, "array element 2 is a JSON array, not an object"),
    ]
    assert result.rows_read == 4


@pytest.mark.parametrize("text, kind", [('{"a": 1}', "object"), ('"text"', "string"), ("3", "number")])
def test_json_not_an_array_is_an_error(make_source, text, kind):
    with pytest.raises(InputError, match=f"holds a JSON {kind}"):
        read_source(make_source(text, "json"))


def test_invalid_json_names_the_line(make_source):
    with pytest.raises(InputError) as info:
        read_source(make_source('[\n{"a": 1},\n{"a": }\n]', "json"))
    assert info.value.line == 3
    assert isinstance(info.value.__cause__, json.JSONDecodeError)


def test_empty_array_gives_mapped_columns_and_no_rows(make_source):
    result = read_source(make_source("[]", "json", columns={"x": "a"}))
    assert result.table.columns == ["source_row", "a"]
    assert result.table.height == 0 and result.rows_read == 0


@pytest.mark.parametrize("fmt", ["json", "jsonl"])
def test_empty_file_is_an_error(make_source, fmt):
    with pytest.raises(InputError, match="is empty"):
        read_source(make_source(" \n\r\n", fmt))


def test_read_columns_jsonl_keys_in_order_of_first_appearance(make_source):
    assert read_columns(make_source(jsonl({"b": 1}, "nope", {"a": 1, "b": 2}), "jsonl")) == ["b", "a"]


def test_jsonl_syntax_error_column_counts_from_line_start(make_source):
    # Columns are 1-based like Python's json.JSONDecodeError.colno, counted on the whole line.
    text = '  {"a": 1} {"b": 2}\n'
    expected_column = json.JSONDecodeError("x", text, text.index('{"b"')).colno
    result = read_source(make_source(text, "jsonl"))
    assert result.unreadable["detail"].to_list() == [f"the line is not valid JSON (Extra data at column {expected_column})"]


def _tricky_jsonl() -> str:
    """JSON Lines whose lines the two parsers could read differently, and ordinary ones."""
    import random

    rng = random.Random(11)
    lines = [
        '{"n": 9223372036854775807}', '{"n": -9223372036854775808}', '{"n": 18446744073709551615}',
        '{"n": 18446744073709551616}', '{"n": -9223372036854775809}', '{"n": 123456789012345678901234567890}',
        '{"n": 1e400}', '{"n": -1e400}', '{"n": NaN}', '{"n": Infinity}', '{"n": -0}', '{"n": -0.0}', '{"n": 1E5}',
        '{"n": 2.2250738585072011e-308}', '{"n": 4.9406564584124654e-324}', '{"n": 1e-400}', '{"n": 0.1}',
        '{"s": "\\ud83d\\ude00"}', '{"s": "a\\u0000b"}', '{"s": "tab\there"}', '{"s": "\x7f"}',
        '{"b": 1, "a": 2, "b": 3}', '\ufeff{"a": 1}', '  {"a": "padded"}  \r', '{"a": 1} {"a": 2}', '{"a": 1},',
        '[1, 2]', '"text"', 'null', 'true', '12', '', '   ', '\t\r', '{"a": [1, {"b": null}], "c": {"d": true}}',
        '[' * 70 + ']' * 70, '[' * 1100 + ']' * 1100, '{"x":' * 63 + '1' + '}' * 63, '{"x":' * 900 + '1' + '}' * 900, '{"x":' * 1010 + '1' + '}' * 1010, '[' * 1010 + ']' * 1010,
        '{"a": "Ñandú ✓ 😀"}', '{"a": 1,}', "{'a': 1}", '{"a": 01}', '{"a": 1.}', '{"a": .5}',
    ]
    for _ in range(500):  # floats (the standard parser reads them)
        digits = "".join(rng.choice("0123456789") for _ in range(rng.randint(1, 17)))
        cut = rng.randint(1, len(digits))
        literal = f"{rng.choice(['', '-'])}{digits[:cut].lstrip('0') or '0'}.{digits[cut:] or '0'}e{rng.randint(-330, 310)}"
        lines.append(f'{{"f": {literal}, "g": {rng.choice(["0.1", "1.5e-7", str(rng.random())])}}}')
    for i in range(2000):  # plain objects (orjson reads them): integers up to 64 bits, text, booleans, null
        n = rng.choice([rng.randint(-(2**63), 2**64 - 1), rng.randint(-1000, 1000), 0])
        lines.append(json.dumps({"n": n, "s": rng.choice(["x", "Ñandú", "\u2028", "a\"b", ""]), "b": i % 2 == 0, "z": None},
                                ensure_ascii=rng.random() < 0.5))
    return "\n".join(lines) + "\n"


def test_jsonl_orjson_path_equals_the_standard_parser(make_source, monkeypatch):
    # Reference: Python's own json module (the standard parser) reading every line; with orjson on,
    # the table, the unreadable lines (numbers and messages) and the row count must be identical.
    from prep.read import jsonfile

    if jsonfile._fast_loads is None:
        pytest.skip("orjson is not installed")
    taken = []
    original = jsonfile._fast_line
    monkeypatch.setattr(jsonfile, "_fast_line", lambda raw: taken.append(raw) or original(raw))
    text = _tricky_jsonl()
    fast = read_source(make_source(text, "jsonl"))
    accepted = [raw for raw in taken if original(raw) is not jsonfile._REFUSED]
    assert len(accepted) >= 2000  # the fast path was really taken
    monkeypatch.setattr(jsonfile, "_fast_line", original)
    monkeypatch.setattr(jsonfile, "_fast_loads", None)
    slow = read_source(make_source(text, "jsonl"))
    assert fast.table.equals(slow.table) and fast.table.columns == slow.table.columns
    assert fast.unreadable.equals(slow.unreadable)
    assert fast.rows_read == slow.rows_read
    values = dict(zip(slow.table["source_row"].to_list(), slow.table["n"].to_list()))
    assert values[3] == "18446744073709551616" and values[5] == "123456789012345678901234567890"  # exact integers kept


def test_jsonl_integers_beyond_64_bits_stay_exact(make_source):
    # Python's json keeps integers of any size (reference: the int built from the literal); orjson
    # would return a float, so such a line goes to the standard parser.
    text = '{"n": 1.5}\n{"n": 123456789012345678901}\n{"n": 7}\n'
    result = read_source(make_source(text, "jsonl"))
    assert result.table["n"].to_list() == ["1.5", "123456789012345678901", "7"]


def test_escaped_lone_surrogates_make_the_record_unreadable(make_source):
    # RFC 8259 section 8.2: an escape such as "\ud800" without its partner names no Unicode
    # character, and software receiving it behaves unpredictably. prep sets such a record aside
    # (it cannot be stored as text); a proper pair ("\ud83d\ude00", U+1F600) is read as the character.
    text = "\n".join([
        '{"a": "pair \\ud83d\\ude00"}',
        '{"a": "lone \\ud800 high"}',
        '{"a": "lone \\uDFFF low"}',
        '{"\\udc00key": "x"}',
        '{"a": "x", "b": {"c": ["\\ud801"]}}',
        '{"a": "reversed \\ude00\\ud83d"}',
        '{"a": "fine \\u00e9"}',
    ]) + "\n"
    result = read_source(make_source(text, "jsonl"))
    assert result.table.rows() == [(0, "pair \U0001F600"), (6, "fine é")]
    assert result.unreadable["line"].to_list() == [2, 3, 4, 5, 6]
    assert set(result.unreadable["detail"].to_list()) == {
        "the line holds an escaped lone surrogate (a \\ud800-\\udfff escape without its partner), which is not "
        "a Unicode character (RFC 8259 section 8.2)"
    }
    array = '[{"a": "ok"}, {"a": "lone \\ud800"}, {"a": "\\ud83d\\ude00"}]'
    result = read_source(make_source(array, "json"))
    assert result.table.rows() == [(0, "ok"), (2, "\U0001F600")]
    assert result.unreadable.rows() == [(1, None, "array element 1 holds an escaped lone surrogate (a \\ud800-\\udfff "
                                         "escape without its partner), which is not a Unicode character (RFC 8259 section 8.2)")]
