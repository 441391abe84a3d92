"""TSV reading as the IANA registration of text/tab-separated-values defines it.

Reference: IANA media type registration text/tab-separated-values
(https://www.iana.org/assignments/media-types/text/tab-separated-values): records are lines, fields
are separated by tabs, and there is no quoting mechanism, so a double quote is an ordinary character.
"""

from __future__ import annotations

import pytest
from polars.testing import assert_frame_equal

from prep.errors import InputError
from prep.read import read_columns, read_source
from prep.read.delimited import read_delimited


def both_paths(source):
    fast = read_delimited(source, on_unreadable="set_aside", engine="fast")
    slow = read_delimited(source, on_unreadable="set_aside", engine="slow")
    assert_frame_equal(fast.table, slow.table)
    assert_frame_equal(fast.unreadable, slow.unreadable)
    assert fast.rows_read == slow.rows_read
    return fast


def test_iana_example_shape(make_source):
    # The registration's example (reproduced from memory): a header line, then one record per line,
    # fields split on tabs.
    text = "Name\tAge\tAddress\nPaul\t23\t1115 W Franklin\nBessy the Cow\t5\tBig Farm Way\nZeke\t45\tW Main St\n"
    result = both_paths(make_source(text, "tsv"))
    assert result.table.columns == ["source_row", "Name", "Age", "Address"]
    assert result.table.rows() == [
        (0, "Paul", "23", "1115 W Franklin"),
        (1, "Bessy the Cow", "5", "Big Farm Way"),
        (2, "Zeke", "45", "W Main St"),
    ]


def test_double_quote_is_an_ordinary_character(make_source):
    text = 'a\tb\n"quoted"\t5" screen\n"unbalanced\t""\n'
    result = both_paths(make_source(text, "tsv"))
    assert result.table.rows() == [(0, '"quoted"', '5" screen'), (1, '"unbalanced', '""')]


def test_a_quote_cannot_join_lines(make_source):
    # With no quoting, a quote opened on one line does not continue onto the next.
    result = both_paths(make_source('a\tb\n"x\ty\nz"\tw\n', "tsv"))
    assert result.table.rows() == [(0, '"x', "y"), (1, 'z"', "w")]


def test_commas_are_text_and_crlf_is_a_line_break(make_source):
    result = both_paths(make_source("a\tb\r\n1,5\t2\r\n", "tsv"))
    assert result.table.rows() == [(0, "1,5", "2")]


def test_empty_field_is_null(make_source):
    result = both_paths(make_source("a\tb\tc\n\tx\t\n", "tsv"))
    assert result.table.rows() == [(0, None, "x", None)]


def test_ragged_lines_are_unreadable(make_source):
    result = both_paths(make_source("a\tb\n1\t2\n3\n4\t5\t6\n7\t8\n", "tsv"))
    assert result.table["source_row"].to_list() == [0, 3]
    assert result.unreadable.rows() == [
        (1, 3, "the record has 1 fields; the header has 2"),
        (2, 4, "the record has 3 fields; the header has 2"),
    ]


def test_gzip_and_read_columns(make_source):
    source = make_source('"id"\ttext\n1\thello\n', "tsv", gz=True)
    assert read_columns(source) == ['"id"', "text"]
    assert read_source(source).table.rows() == [(0, "1", "hello")]


def test_duplicate_header_is_an_error(make_source):
    with pytest.raises(InputError) as info:
        read_source(make_source("a\tb\ta\n1\t2\t3\n", "tsv"))
    assert info.value.column == "a"
