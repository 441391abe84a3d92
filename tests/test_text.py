"""The shared text helpers equal the plain polars expressions they stand in for."""

from __future__ import annotations

import random

import polars as pl

from prep.text import OTHER_WHITE_SPACE, collapse_whitespace, rewrite_where


def test_other_white_space_is_the_regex_class_s_minus_the_space():
    # Reference: the regex engine's own \s (Unicode White_Space, PropList.txt), over every code
    # point except the surrogates, which a str cannot hold.
    chars = pl.Series([chr(c) for c in range(0x110000) if not 0xD800 <= c <= 0xDFFF])
    regex_s = chars.str.contains(r"^\s$")
    ours = chars.str.contains(f"^{OTHER_WHITE_SPACE}$") | (chars == " ")
    assert regex_s.sum() == 25  # White_Space has 25 code points (PropList.txt; from memory)
    assert (regex_s == ours).all()


def _plain(series: pl.Series) -> pl.Series:
    return series.str.replace_all(r"\s+", " ").str.strip_chars(" ")


def test_collapse_whitespace_equals_the_plain_expression():
    rng = random.Random(5)
    alphabet = ["a", "é", " ", "  ", "\t", "\n", "\r\n", "\u00a0", "\u2003", "\u3000", "\u200b", "x", "🚲"]
    values = ["".join(rng.choice(alphabet) for _ in range(rng.randrange(0, 12))) for _ in range(3000)]
    values += [None, "", " ", "plain text", " lead", "trail ", "two  spaces"]
    series = pl.Series("t", values, dtype=pl.String)
    got = collapse_whitespace(series)
    assert got.name == "t"
    assert got.to_list() == _plain(series).to_list()


def test_collapse_whitespace_equals_the_plain_expression_on_every_short_string():
    # Exhaustive comparison with the plain expression: every string of up to 6 characters over a
    # letter, the space and two other white-space characters (runs of every shape and position).
    import itertools

    alphabet = ["a", " ", "\t", "\u3000"]
    values = ["".join(p) for n in range(7) for p in itertools.product(alphabet, repeat=n)]
    series = pl.Series("t", values, dtype=pl.String)
    assert collapse_whitespace(series).to_list() == _plain(series).to_list()


def test_rewrite_where_touches_only_matching_rows():
    series = pl.Series("t", ["abc", None, "xyz", "aXc"])
    got = rewrite_where(series, "X", lambda s: s.str.to_lowercase())
    assert got.to_list() == ["abc", None, "xyz", "axc"]


def test_normalize_unicode_equals_polars_own_normalisation():
    # Reference: polars' str.normalize (the Rust unicode-normalization crate), an implementation of
    # UAX #15 independent of Python's unicodedata, which prep.text uses.
    from prep.text import normalize_unicode

    rng = random.Random(3)
    alphabet = ["a", "e\u0301", "\u00e9", "\ufb01", "\u2460", "\uff21", "\u3000", "x", "\u1e9b\u0323", "한", "\u1100\u1161"]
    values = ["".join(rng.choice(alphabet) for _ in range(rng.randrange(0, 8))) for _ in range(2000)] + [None, "", "ascii"]
    series = pl.Series("t", values, dtype=pl.String)
    for form in ("NFC", "NFKC"):
        assert normalize_unicode(series, form).to_list() == series.str.normalize(form).to_list()


def test_by_slices_equals_one_piece(monkeypatch):
    import prep.text as text

    monkeypatch.setattr(text, "PARALLEL_FROM_ROWS", 10)
    monkeypatch.setattr(text, "usable_cores", lambda: 3)
    series = pl.Series("t", [f"  row {i}\t" if i % 7 else None for i in range(1001)])
    got = text.by_slices(series, collapse_whitespace)
    assert got.name == "t"
    assert got.to_list() == collapse_whitespace(series).to_list()
