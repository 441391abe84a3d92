"""The public API across formats: invariants of ReadResult, errors at the boundary, privacy of messages."""

from __future__ import annotations

import csv
import gzip
import io
import json

import polars as pl
import pytest
from polars.testing import assert_frame_equal

from prep.errors import InputError
from prep.read import UNREADABLE_SCHEMA, ReadResult, read_columns, read_source

# Invented demo records; personal-data look-alikes from reserved example domains (RFC 2606).
RECORDS = [
    {"ref": "T-1", "summary": "Scooter will not unlock", "description": "Write to ana@example.com", "queue": "unlock"},
    {"ref": "T-2", "summary": "Charged twice", "description": 'She said "refund, please"\nthanks', "queue": "billing"},
    {"ref": "T-3", "summary": "Ünïcödé title", "description": "日本語のテキスト", "queue": "app"},
]
COLUMNS = {"ticket_id": "ref", "title": "summary", "body": "description", "label": "queue"}


def write_all_formats(make_source) -> dict[str, object]:
    buffer = io.StringIO(newline="")
    writer = csv.DictWriter(buffer, fieldnames=list(RECORDS[0]), lineterminator="\r\n")
    writer.writeheader()
    writer.writerows(RECORDS)
    tsv = "\t".join(RECORDS[0]) + "\n" + "".join(
        "\t".join(r[k].replace("\n", " ") for k in RECORDS[0]) + "\n" for r in RECORDS
    )
    sources = {
        "csv": make_source(buffer.getvalue(), "csv", columns=COLUMNS),
        "csv.gz": make_source(buffer.getvalue(), "csv", gz=True, columns=COLUMNS),
        "jsonl": make_source("".join(json.dumps(r) + "\n" for r in RECORDS), "jsonl", columns=COLUMNS),
        "json": make_source(json.dumps(RECORDS), "json", columns=COLUMNS),
        "tsv": make_source(tsv, "tsv", columns=COLUMNS),
    }
    parquet = make_source(b"", "parquet", columns=COLUMNS)
    pl.DataFrame(RECORDS).write_parquet(parquet.path)
    sources["parquet"] = parquet
    return sources


def test_every_format_gives_the_same_table(make_source):
    sources = write_all_formats(make_source)
    reference = read_source(sources["csv"]).table
    assert reference.columns == ["source_row", "ref", "summary", "description", "queue"]
    assert reference["description"].to_list() == [r["description"] for r in RECORDS]
    for name, source in sources.items():
        result = read_source(source)
        expected = reference
        if name == "tsv":  # TSV cannot hold a line break inside a field
            expected = reference.with_columns(pl.col("description").str.replace_all("\n", " "))
        assert_frame_equal(result.table, expected)


@pytest.mark.parametrize(
    "fmt, content",
    [
        ("csv", "a,b\n1,2\n3\n4,5\n\n6,7,8\n9,10\n"),
        ("tsv", "a\tb\n1\t2\n3\n4\t5\n"),
        ("jsonl", '{"a": "1"}\n[]\n\n{"a": "2"}\nnope\n'),
        ("json", '[{"a": "1"}, 2, {"a": "3"}]'),
    ],
)
def test_result_invariants(make_source, fmt, content):
    result = read_source(make_source(content, fmt))
    assert isinstance(result, ReadResult)
    assert result.rows_read == result.table.height + result.unreadable.height
    indices = result.table["source_row"].to_list() + result.unreadable["source_row"].to_list()
    assert sorted(indices) == list(range(result.rows_read))
    assert result.table["source_row"].is_sorted() and result.unreadable["source_row"].is_sorted()
    assert result.table.schema["source_row"] == pl.Int64
    assert all(dtype == pl.String for name, dtype in result.table.schema.items() if name != "source_row")
    assert dict(result.unreadable.schema) == UNREADABLE_SCHEMA
    assert result.unreadable.height > 0


def test_same_bytes_same_result(make_source):
    source = make_source('a,b\n1,"x\ny"\n2\n3,4\n')
    first, second = read_source(source), read_source(source)
    assert_frame_equal(first.table, second.table)
    assert_frame_equal(first.unreadable, second.unreadable)


def test_details_and_errors_never_hold_data_or_absolute_paths(make_source, tmp_path):
    secret = "ana@example.com"
    source = make_source(f'a,b\n{secret}\n"{secret}" x,1\n{secret},"open\n')
    result = read_source(source)
    assert result.unreadable.height == 3
    assert not any(secret in d for d in result.unreadable["detail"])
    with pytest.raises(InputError) as info:
        read_source(source, on_unreadable="stop")
    assert secret not in str(info.value) and str(tmp_path) not in str(info.value)
    jsonl = make_source(f'{{"a": "{secret}"\n', "jsonl")
    assert secret not in read_source(jsonl).unreadable["detail"][0]


@pytest.mark.parametrize("fmt", ["csv", "jsonl", "json", "parquet"])
def test_missing_file_names_path_as_written(make_source, tmp_path, fmt):
    source = make_source(b"", fmt)
    source.path.unlink()
    with pytest.raises(InputError) as info:
        read_source(source)
    assert info.value.file == source.path_text
    assert str(tmp_path) not in str(info.value)
    with pytest.raises(InputError):
        read_columns(source)


def test_truncated_gzip_is_an_input_error(make_source):
    source = make_source("a,b\n" + "1,2\n" * 1000, gz=True)
    data = source.path.read_bytes()
    source.path.write_bytes(data[: len(data) - 12])
    with pytest.raises(InputError, match="truncated") as info:
        read_source(source)
    assert isinstance(info.value.__cause__, EOFError)


def test_not_gzip_is_an_input_error(make_source):
    source = make_source("a,b\n1,2\n")
    source.compression = "gzip"
    with pytest.raises(InputError, match="not a valid gzip file"):
        read_source(source)
    with pytest.raises(InputError, match="not a valid gzip file"):
        read_columns(source)


def test_gzip_with_several_members(make_source):
    # RFC 1952 section 2.2: a gzip file is a series of members; all of them are the content.
    source = make_source("a,b\n")
    source.path.write_bytes(gzip.compress(b"a,b\n1,2\n") + gzip.compress(b"3,4\n"))
    source.compression = "gzip"
    assert read_source(source).table.rows() == [(0, "1", "2"), (1, "3", "4")]


def test_unknown_format_and_bad_on_unreadable(make_source):
    source = make_source("a\n1\n")
    source.format = "xlsx"
    with pytest.raises(InputError, match="format"):
        read_source(source)
    with pytest.raises(InputError, match="format"):
        read_columns(source)
    with pytest.raises(ValueError):
        read_source(make_source("a\n1\n"), on_unreadable="ignore")
