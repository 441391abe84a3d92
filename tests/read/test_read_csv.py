"""CSV reading: RFC 4180 examples, line endings, nulls, malformed records, header problems."""

from __future__ import annotations

import csv
import io

import polars as pl
import pytest
from polars.testing import assert_frame_equal

from prep.errors import InputError
from prep.read import read_columns, read_source
from prep.read.delimited import read_delimited

CRLF = "\r\n"


def rows(result) -> list[tuple]:
    return result.table.rows()


def both_paths(source):
    """Read with the fast and the careful path, check they agree, return the result."""
    fast = read_delimited(source, on_unreadable="set_aside", engine="auto")
    slow = read_delimited(source, on_unreadable="set_aside", engine="slow")
    assert_frame_equal(fast.table, slow.table)
    assert_frame_equal(fast.unreadable, slow.unreadable)
    assert (fast.rows_read, fast.encoding) == (slow.rows_read, slow.encoding)
    return fast


# RFC 4180 section 2 (https://www.rfc-editor.org/rfc/rfc4180#section-2), the examples of rules 1, 2, 5,
# 6 and 7, reproduced from memory of the RFC text. prep always reads a header, so a header line `h1,h2,h3` is put in
# front of each example; the expected values are the RFC's fields.
RFC4180_EXAMPLES = {
    # Rule 1: records separated by CRLF.
    "rule 1": ("aaa,bbb,ccc" + CRLF + "zzz,yyy,xxx" + CRLF, [("aaa", "bbb", "ccc"), ("zzz", "yyy", "xxx")]),
    # Rule 2: the last record may have no ending line break.
    "rule 2": ("aaa,bbb,ccc" + CRLF + "zzz,yyy,xxx", [("aaa", "bbb", "ccc"), ("zzz", "yyy", "xxx")]),
    # Rule 5: fields may be enclosed in double quotes.
    "rule 5": ('"aaa","bbb","ccc"' + CRLF + "zzz,yyy,xxx", [("aaa", "bbb", "ccc"), ("zzz", "yyy", "xxx")]),
    # Rule 6: line breaks (CRLF), double quotes and commas inside enclosed fields.
    "rule 6": ('"aaa","b' + CRLF + 'bb","ccc"' + CRLF + "zzz,yyy,xxx", [("aaa", "b\r\nbb", "ccc"), ("zzz", "yyy", "xxx")]),
    # Rule 7: a double quote inside an enclosed field is escaped by another double quote.
    "rule 7": ('"aaa","b""bb","ccc"', [("aaa", 'b"bb', "ccc")]),
}


@pytest.mark.parametrize("name", sorted(RFC4180_EXAMPLES))
def test_rfc4180_section2_examples(make_source, name):
    body, expected = RFC4180_EXAMPLES[name]
    result = both_paths(make_source("h1,h2,h3" + CRLF + body))
    assert result.table.columns == ["source_row", "h1", "h2", "h3"]
    assert [r[1:] for r in rows(result)] == expected
    assert result.unreadable.height == 0


def test_rfc4180_rule3_example_header_repeats_a_name(make_source):
    # RFC 4180 section 2 rule 3 shows the header `field_name,field_name,field_name`. prep needs unique
    # names, so that exact header is refused, naming the column.
    source = make_source("field_name,field_name,field_name" + CRLF + "aaa,bbb,ccc" + CRLF)
    with pytest.raises(InputError) as info:
        read_source(source)
    assert info.value.column == "field_name"
    assert info.value.line == 1
    assert "exports/" in str(info.value)


def test_matches_python_csv_module_on_well_formed_files(make_source):
    # Reference: Python's csv module (RFC 4180 dialect "excel"), on a file mixing quoted fields with
    # delimiters, doubled quotes, LF and CRLF inside quotes, and non-ASCII text.
    records = [
        ["id", "title", "body"],
        ["1", "Plain", "no quotes here"],
        ["2", "Comma, inside", 'He said "stop"'],
        ["3", "Line\nbreak", "Two\r\nlines, CRLF"],
        ["4", "Ünïcödé", "Zeichen ß und 日本語"],
        ["5", "", " leading and trailing spaces "],
    ]
    buffer = io.StringIO(newline="")
    csv.writer(buffer, lineterminator=CRLF).writerows(records)
    text = buffer.getvalue()
    expected = list(csv.reader(io.StringIO(text, newline="")))
    result = both_paths(make_source(text))
    assert result.table.columns[1:] == expected[0]
    # csv writes an empty field unquoted: prep reads it as null (see dialect rules).
    got = [[("" if v is None else v) for v in r[1:]] for r in rows(result)]
    assert got == expected[1:]


def test_empty_unquoted_field_is_null_and_quoted_empty_is_empty_string(make_source):
    result = both_paths(make_source('a,b,c\n,"",x\n'))
    assert rows(result) == [(0, None, "", "x")]


def test_crlf_and_lf_and_final_line_without_break(make_source):
    result = both_paths(make_source("a,b\r\n1,2\n3,4\r\n5,6"))
    assert [r[1:] for r in rows(result)] == [("1", "2"), ("3", "4"), ("5", "6")]


def test_cr_that_is_not_part_of_a_line_break_is_text(make_source):
    # A CR before a delimiter or inside a field is data (only CR LF, or CR at the very end, is a break).
    result = both_paths(make_source("a,b\r\nx\r,y\r\np\rq,z\r\n"))
    assert [r[1:] for r in rows(result)] == [("x\r", "y"), ("p\rq", "z")]


def test_bom_is_stripped_from_first_column_name(make_source):
    result = both_paths(make_source(b"\xef\xbb\xbfid,text\r\n1,hello\r\n"))
    assert result.table.columns == ["source_row", "id", "text"]
    assert result.encoding == "utf-8-sig"


def test_header_names_are_kept_exactly(make_source):
    result = both_paths(make_source(' Case Number ,Subject\tLine,"Full, Text",\n1,2,3,4\n'))
    assert result.table.columns == ["source_row", " Case Number ", "Subject\tLine", "Full, Text", ""]


def test_gzip(make_source):
    result = both_paths(make_source("a,b\n1,2\n", gz=True))
    assert rows(result) == [(0, "1", "2")]


def test_ragged_rows_are_unreadable_with_lines_and_keep_their_index(make_source):
    text = "a,b,c\n1,2,3\n4,5\n\n6,7,8\n9,10,11,12\n\"multi\nline\",x,y\n13,14\n15,16,17\n"
    result = both_paths(make_source(text))
    assert result.rows_read == 7
    assert result.table["source_row"].to_list() == [0, 2, 4, 6]
    assert result.table["a"].to_list() == ["1", "6", "multi\nline", "15"]
    assert result.unreadable.rows() == [
        (1, 3, "the record has 2 fields; the header has 3"),
        (3, 6, "the record has 4 fields; the header has 3"),
        (5, 9, "the record has 2 fields; the header has 3"),
    ]


def test_blank_lines_are_skipped_but_counted_for_line_numbers(make_source):
    result = both_paths(make_source("\n\na,b\r\n\r\n1,2\n\n\n3\n"))
    assert rows(result) == [(0, "1", "2")]
    assert result.unreadable.rows() == [(1, 8, "the record has 1 fields; the header has 2")]


def test_stray_quote_in_unquoted_field_costs_one_record(make_source):
    # RFC 4180 section 2 rule 5: quotes may not appear inside unquoted fields.
    result = both_paths(make_source('a,b\n1,2\n3 "inch,4\n5,6\n'))
    assert rows(result) == [(0, "1", "2"), (2, "5", "6")]
    assert result.unreadable.rows() == [(1, 3, "a double quote inside an unquoted field (RFC 4180 section 2, rule 5)")]


def test_text_after_closing_quote_costs_one_record(make_source):
    result = both_paths(make_source('a,b\n"x"y,2\n5,6\n'))
    assert rows(result) == [(1, "5", "6")]
    assert result.unreadable["line"].to_list() == [2]
    assert "closing double quote" in result.unreadable["detail"][0]


def test_unterminated_quote_makes_the_rest_one_unreadable_record(make_source):
    result = both_paths(make_source('a,b\n1,2\n3,"never closed\n4,5\n6,7\n'))
    assert rows(result) == [(0, "1", "2")]
    assert result.rows_read == 2
    assert result.unreadable.rows() == [
        (1, 3, "a quoted field is never closed; the rest of the file (4 lines) is this one record")
    ]


def test_stop_raises_at_first_unreadable_record(make_source):
    source = make_source("a,b\n1,2\n3\n4\n")
    with pytest.raises(InputError) as info:
        read_source(source, on_unreadable="stop")
    assert info.value.line == 3
    assert info.value.file == "exports/src0.csv"


def test_stop_raises_for_unterminated_quote(make_source):
    source = make_source('a,b\n1,2\n3,"open\n')
    with pytest.raises(InputError) as info:
        read_source(source, on_unreadable="stop")
    assert info.value.line == 3


@pytest.mark.parametrize("content", ["", "\n\r\n\n", b"\xef\xbb\xbf"])
def test_empty_file_is_an_error(make_source, content):
    with pytest.raises(InputError, match="is empty"):
        read_source(make_source(content))


def test_header_only_gives_no_rows(make_source):
    result = both_paths(make_source("a,b\r\n"))
    assert result.table.shape == (0, 3)
    assert result.table.dtypes == [pl.Int64, pl.String, pl.String]
    assert result.rows_read == 0


def test_malformed_header_is_an_error(make_source):
    with pytest.raises(InputError, match="header cannot be read") as info:
        read_source(make_source('a,b"c\n1,2\n'))
    assert info.value.line == 1


def test_delimiter_override(make_source):
    result = both_paths(make_source('a;b\n"x;y";2,5\n', delimiter=";"))
    assert rows(result) == [(0, "x;y", "2,5")]


@pytest.mark.parametrize("delimiter", ['"', "\n", ";;", "§"])
def test_unusable_delimiter_is_an_error(make_source, delimiter):
    with pytest.raises(InputError, match="delimiter"):
        read_source(make_source("a,b\n", delimiter=delimiter))


def test_mapped_columns_only_in_mapping_order(make_source):
    source = make_source("a,b,c\n1,2,3\n", columns={"label": "c", "title": "a"})
    assert both_paths(source).table.columns == ["source_row", "c", "a"]


def test_missing_mapped_column_returns_every_column(make_source):
    # The caller names the missing column and what the file has; the reader does not decide.
    source = make_source("a,b,c\n1,2,3\n", columns={"label": "nope", "title": "a"})
    assert both_paths(source).table.columns == ["source_row", "a", "b", "c"]


def test_file_column_named_source_row_is_refused_when_used(make_source):
    source = make_source("source_row,b\n1,2\n", columns={"ticket_id": "source_row"})
    with pytest.raises(InputError, match="source_row"):
        read_source(source)


def test_read_columns_reads_only_the_header(make_source):
    source = make_source('"multi\nline",b\n1,2\n', columns={"x": "b"})
    assert read_columns(source) == ["multi\nline", "b"]


def test_read_columns_header_longer_than_first_chunk(make_source):
    # The prefix reader starts with 64 KiB; a header with a quoted name spanning that boundary must
    # still come back whole.
    long_name = "x" * 70_000 + "\n" + "y" * 10
    source = make_source(f'"{long_name}",b\n1,2\n', gz=True)
    assert read_columns(source) == [long_name, "b"]


def test_read_columns_empty_file(make_source):
    with pytest.raises(InputError, match="is empty"):
        read_columns(make_source("\n\n"))


def test_read_columns_stops_before_a_bad_byte_after_the_header(make_source):
    # Cheap: bytes after the header are not decoded (a later invalid byte is read_source's concern).
    source = make_source(b"a,b\n" + b"1,2\n" * 40_000 + b"\xff,3\n")
    assert read_columns(source) == ["a", "b"]
    with pytest.raises(InputError):
        read_source(source)
