"""Decoding: UTF-8 with and without BOM, fallbacks, explicit codecs, and errors that name the line."""

from __future__ import annotations

import pytest

from prep.errors import InputError
from prep.read import read_columns, read_source


def all_strings(result) -> list[str]:
    return [v for row in result.table.rows() for v in row[1:] if v is not None]


def test_utf8_without_bom(make_source):
    result = read_source(make_source("name\nZoë\n"))
    assert result.encoding == "utf-8"
    assert all_strings(result) == ["Zoë"]


def test_latin1_fallback(make_source):
    # "é" is 0xE9 in ISO 8859-1 (ISO/IEC 8859-1 code table); alone it is not valid
    # UTF-8 (RFC 3629 section 4: 0xE9 starts a 3-byte sequence).
    source = make_source(b"name\ncaf\xe9\n", encoding_fallback="latin-1")
    result = read_source(source)
    assert result.encoding == "latin-1"
    assert all_strings(result) == ["café"]


def test_cp1252_explicit(make_source):
    # 0x80 is EURO SIGN U+20AC in Windows-1252 (Unicode's mapping table cp1252.txt; from memory,
    # and Python's codec agrees).
    result = read_source(make_source(b"price\n5 \x80\n", encoding="cp1252"))
    assert all_strings(result) == ["5 €"]
    assert result.encoding == "cp1252"


def test_invalid_utf8_without_fallback_names_the_line(make_source):
    source = make_source(b"name\nok\nalso ok\nbad \xff byte\n")
    with pytest.raises(InputError) as info:
        read_source(source)
    error = info.value
    assert error.line == 4
    assert "encoding_fallback" in str(error)
    assert "bad" not in str(error)  # no data in the message
    assert isinstance(error.__cause__, UnicodeDecodeError)


def test_invalid_utf8_in_gzip_names_the_line_of_the_decompressed_text(make_source):
    source = make_source(b"name\nx\n\xc3\n", gz=True)
    with pytest.raises(InputError) as info:
        read_source(source)
    assert info.value.line == 3


def test_explicit_codec_is_strict_and_names_the_line(make_source):
    # 0x81 is undefined in Windows-1252 (cp1252.txt maps it to nothing; from memory);
    # Python's codec agrees.
    source = make_source(b"a\nfine\n\x81\n", encoding="cp1252")
    with pytest.raises(InputError) as info:
        read_source(source)
    assert info.value.line == 3
    assert "encoding" in str(info.value)


def test_fallback_that_also_fails_names_the_line(make_source):
    source = make_source(b"a\n\xe9\n\x81\n", encoding_fallback="cp1252")
    with pytest.raises(InputError) as info:
        read_source(source)
    assert info.value.line == 3


def test_utf16_explicit_and_auto_hint(make_source):
    data = "id,text\r\n1,Grüße\r\n".encode("utf-16")  # with BOM
    result = read_source(make_source(data, encoding="utf-16"))
    assert result.table.columns == ["source_row", "id", "text"]
    assert all_strings(result) == ["1", "Grüße"]
    with pytest.raises(InputError, match="utf-16"):
        read_source(make_source(data))


def test_bom_with_explicit_utf8_is_not_part_of_the_header(make_source):
    result = read_source(make_source(b"\xef\xbb\xbfid\n1\n", encoding="utf-8"))
    assert result.table.columns == ["source_row", "id"]


def test_unknown_codec_is_an_error(make_source):
    with pytest.raises(InputError, match="not a known text encoding"):
        read_source(make_source("a\n1\n", encoding="klingon-8"))


def test_no_replacement_character_is_ever_produced(make_source):
    # Invalid bytes either decode through an explicit fallback or raise; U+FFFD never appears.
    ok = read_source(make_source(b"a\n\xe9\xff\n", encoding_fallback="latin-1"))
    assert "\ufffd" not in "".join(all_strings(ok))
    with pytest.raises(InputError):
        read_source(make_source(b"a\n\xe9\xff\n"))


def test_read_columns_decodes_a_prefix_cut_inside_a_character(make_source):
    # The 64 KiB prefix boundary falls inside the 2-byte "é": the header must still decode.
    name = "x" * (65536 - 2) + "é"
    source = make_source(f'"{name}\n",b\n1,2\n')
    assert read_columns(source) == [name + "\n", "b"]


def test_jsonl_with_bom_and_latin1_fallback(make_source):
    assert read_source(make_source(b'\xef\xbb\xbf{"a": "x"}\n', "jsonl")).encoding == "utf-8-sig"
    result = read_source(make_source(b'{"a": "caf\xe9"}\n', "jsonl", encoding_fallback="latin-1"))
    assert result.table.rows() == [(0, "café")]
