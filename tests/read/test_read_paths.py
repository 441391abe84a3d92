"""The fast path (numpy scan + polars) and the careful path (record parser) give identical results.

Generated files, seeded so that a failure reproduces. Well-formed files are built from known records,
so each is also checked against the values it was built from (an answer computed outside the readers).
"""

from __future__ import annotations

import random

import pytest
from polars.testing import assert_frame_equal

from prep.errors import InputError
from prep.read.delimited import FastPathUnavailable, read_delimited

# Characters chosen to hit every rule: delimiters, quotes, both line breaks, a lone CR, tab,
# a multi-byte character, and a space.
FIELD_CHARS = ["a", "b", ",", '"', "\n", "\r\n", "\r", "\t", "é", "日", " "]
PLAIN_CHARS = ["a", "b", "é", "日", " ", "x"]


def _field(rng: random.Random) -> tuple[str, str | None]:
    """(text as written in the CSV, value prep must read) for one random field."""
    kind = rng.random()
    if kind < 0.15:
        return "", None  # empty unquoted -> null
    if kind < 0.55:
        value = "".join(rng.choice(PLAIN_CHARS) for _ in range(rng.randint(1, 6)))
        return value, value
    value = "".join(rng.choice(FIELD_CHARS) for _ in range(rng.randint(0, 8)))
    return '"' + value.replace('"', '""') + '"', value


def _well_formed(rng: random.Random) -> tuple[str, list[tuple], int]:
    width = rng.randint(1, 4)
    header = [f"c{i}" for i in range(width)]
    lines = [",".join(header)]
    expected, bad = [], 0
    for index in range(rng.randint(0, 12)):
        if rng.random() < 0.1 and width > 1:
            lines.append(",".join("z" for _ in range(rng.choice([width - 1, width + 1]))))
            bad += 1
            continue
        if rng.random() < 0.1:
            lines.append("")  # blank line: not a record
        fields = [_field(rng) for _ in range(width)]
        if width == 1 and fields[0][0] == "":
            fields = [("q", "q")]  # a lone empty field would be a blank line
        lines.append(",".join(f[0] for f in fields))
        expected.append((index, *[f[1] for f in fields]))
    newline = rng.choice(["\n", "\r\n"])
    text = newline.join(lines) + rng.choice(["", newline])
    return text, expected, bad


def _compare(source):
    fast = read_delimited(source, on_unreadable="set_aside", engine="fast")
    slow = read_delimited(source, on_unreadable="set_aside", engine="slow")
    assert_frame_equal(fast.table, slow.table)
    assert_frame_equal(fast.unreadable, slow.unreadable)
    assert fast.rows_read == slow.rows_read
    return fast


def test_generated_well_formed_files_take_the_fast_path_and_match(make_source):
    rng = random.Random(4180)
    for _ in range(100):
        text, expected, bad = _well_formed(rng)
        source = make_source(text)
        result = _compare(source)  # engine="fast" raises if the fast path could not decide
        assert result.table.rows() == expected, text
        assert result.unreadable.height == bad


def test_generated_random_files_agree_where_the_fast_path_decides(make_source):
    # Random bytes from FIELD_CHARS: many malformed files. Where the fast path declines, nothing to
    # compare; where it reads, both must agree, and both must fail the same way.
    rng = random.Random(20)
    decided = 0
    for _ in range(250):
        fmt = rng.choice(["csv", "tsv"])
        text = "".join(rng.choice(FIELD_CHARS) for _ in range(rng.randint(0, 30)))
        source = make_source(text, fmt)
        try:
            slow = read_delimited(source, on_unreadable="set_aside", engine="slow")
        except InputError as exc:
            with pytest.raises((InputError, FastPathUnavailable)) as info:
                read_delimited(source, on_unreadable="set_aside", engine="fast")
            if isinstance(info.value, InputError):
                assert str(info.value) == str(exc)
            continue
        try:
            fast = read_delimited(source, on_unreadable="set_aside", engine="fast")
        except FastPathUnavailable:
            continue
        decided += 1
        assert_frame_equal(fast.table, slow.table)
        assert_frame_equal(fast.unreadable, slow.unreadable)
        assert fast.rows_read == slow.rows_read
    assert decided > 60  # the comparison must actually exercise the fast path


HAND_WRITTEN = {
    "quotes everywhere": '"a","b"\r\n"1","x ""y"" z"\r\n"2",""\r\n',
    "embedded newlines": 'a,b\n"1\n2",3\n"4\r\n5","6\n"\n',
    "ragged between good": "a,b\n1,2\n3\n4,5,6\n7,8\n",
    "blank lines": "a,b\n\n1,2\n\r\n\n3,4\n",
    "no final newline": "a,b\n1,2",
    "final cr": "a,b\n1,2\r",
    "quoted then cr at end": 'a,b\n1,"2"\r',
    "non ascii": "名前,説明\n東京,「引用」\n",
}


@pytest.mark.parametrize("name", sorted(HAND_WRITTEN))
def test_hand_written_files_match(make_source, name):
    _compare(make_source(HAND_WRITTEN[name]))


@pytest.mark.parametrize("name", sorted(HAND_WRITTEN))
def test_hand_written_files_match_as_tsv_shape(make_source, name):
    text = HAND_WRITTEN[name].replace(",", "\t")
    _compare(make_source(text, "tsv"))


def test_cr_before_delimiter_declines_the_fast_path(make_source):
    # polars drops such a CR; by the dialect rules it is text, so the scan sends the file to the careful path.
    for fmt, text in (("csv", "a,b\nx\r,y\n"), ("tsv", "a\tb\nx\r\ty\n")):
        source = make_source(text, fmt)
        with pytest.raises(FastPathUnavailable):
            read_delimited(source, on_unreadable="set_aside", engine="fast")
        assert read_delimited(source, on_unreadable="set_aside").table.rows() == [(0, "x\r", "y")]


def test_malformed_quoting_declines_the_fast_path(make_source):
    source = make_source('a,b\n1 "x",2\n')
    with pytest.raises(FastPathUnavailable):
        read_delimited(source, on_unreadable="set_aside", engine="fast")
    auto = read_delimited(source, on_unreadable="set_aside", engine="auto")
    assert auto.unreadable["line"].to_list() == [2]


def test_unknown_engine_is_refused(make_source):
    with pytest.raises(ValueError):
        read_delimited(make_source("a\n1\n"), on_unreadable="set_aside", engine="turbo")
