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
