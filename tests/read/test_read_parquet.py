"""Parquet reading: typed columns become strings; damaged files are InputErrors."""

from __future__ import annotations

import datetime as dt
import json

import polars as pl
import pytest

from prep.errors import InputError
from prep.read import read_columns, read_source


@pytest.fixture
def typed_parquet(make_source):
    frame = pl.DataFrame(
        {
            "s": ["text", None],
            "i": [42, -7],
            "f": [0.1, 1e20],
            "b": [True, False],
            "d": [dt.date(2024, 1, 2), None],
            "ts": [dt.datetime(2024, 1, 2, 3, 4, 5, 120000), dt.datetime(2024, 1, 2)],
            "tz": pl.Series([dt.datetime(2024, 1, 2, 3, 4, 5)] * 2).dt.replace_time_zone("Europe/Paris"),
            "t": [dt.time(3, 4, 5), None],
            "l": [[1, 2], None],
            "st": [{"k": "ü", "n": 1}, {"k": None, "n": 2}],
            "cat": pl.Series(["x", "y"], dtype=pl.Categorical),
            "nul": [None, None],
        }
    )
    source = make_source(b"", "parquet")
    frame.write_parquet(source.path)
    return source


def test_values_become_strings(typed_parquet):
    result = read_source(typed_parquet)
    table = result.table
    assert result.encoding is None and result.rows_read == 2 and result.unreadable.height == 0
    assert table.columns[0] == "source_row" and table["source_row"].to_list() == [0, 1]
    assert all(dtype == pl.String for dtype in table.dtypes[1:])
    assert table["s"].to_list() == ["text", None]
    assert table["i"].to_list() == ["42", "-7"]
    assert table["f"].to_list() == pl.Series([0.1, 1e20]).cast(pl.String).to_list()
    assert table["b"].to_list() == ["true", "false"]
    assert table["d"].to_list() == ["2024-01-02", None]
    assert table["t"].to_list() == ["03:04:05", None]
    assert table["cat"].to_list() == ["x", "y"]
    assert table["nul"].to_list() == [None, None]
    assert table["l"].to_list() == ["[1,2]", None]
    assert [json.loads(v) for v in table["st"]] == [{"k": "ü", "n": 1}, {"k": None, "n": 2}]


def test_timestamps_are_iso_8601(typed_parquet):
    # Reference: Python's datetime.fromisoformat (ISO 8601 parser of the standard library) must read
    # each string back to the original instant; the date/time separator is "T" (ISO 8601-1:2019 5.4.2).
    table = read_source(typed_parquet).table
    naive = [dt.datetime.fromisoformat(v) for v in table["ts"]]
    assert naive == [dt.datetime(2024, 1, 2, 3, 4, 5, 120000), dt.datetime(2024, 1, 2)]
    assert all("T" in v for v in table["ts"])
    aware = dt.datetime.fromisoformat(table["tz"][0])
    # Europe/Paris is UTC+1 in January (from memory of the tz database).
    assert aware.utcoffset() == dt.timedelta(hours=1)
    assert aware.replace(tzinfo=None) == dt.datetime(2024, 1, 2, 3, 4, 5)


def test_mapped_columns_only(typed_parquet):
    typed_parquet.columns = {"label": "s", "ticket_id": "i"}
    assert read_source(typed_parquet).table.columns == ["source_row", "s", "i"]


def test_read_columns_from_footer(typed_parquet):
    assert read_columns(typed_parquet)[:3] == ["s", "i", "f"]


def test_truncated_parquet_is_an_input_error(make_source, tmp_path):
    good = tmp_path / "whole.parquet"
    pl.DataFrame({"a": [str(i) for i in range(1000)]}).write_parquet(good)
    data = good.read_bytes()
    source = make_source(data[: len(data) // 2], "parquet")
    with pytest.raises(InputError, match="cannot be read as Parquet") as info:
        read_source(source)
    assert info.value.__cause__ is not None
    assert str(tmp_path) not in str(info.value)
    with pytest.raises(InputError):
        read_columns(source)


def test_not_parquet_is_an_input_error(make_source):
    with pytest.raises(InputError, match="cannot be read as Parquet"):
        read_source(make_source("a,b\n1,2\n", "parquet"))


def test_missing_file_is_an_input_error(make_source):
    source = make_source(b"", "parquet")
    source.path.unlink()
    with pytest.raises(InputError, match="does not exist"):
        read_source(source)


def test_gzip_parquet_is_refused(make_source):
    source = make_source(b"", "parquet")
    source.compression = "gzip"
    with pytest.raises(InputError, match="cannot be gzip-compressed"):
        read_source(source)


def test_binary_that_is_not_utf8_names_the_column(make_source):
    source = make_source(b"", "parquet")
    pl.DataFrame({"raw": [b"\xff\xfe"]}).write_parquet(source.path)
    with pytest.raises(InputError) as info:
        read_source(source)
    assert info.value.column == "raw"
