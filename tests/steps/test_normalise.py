"""Tests for the ``normalise`` step: result/expected frames, and checks against outside references.

References used:
- Unicode Standard Annex #15 "Unicode Normalization Forms" (UAX #15) and the Unicode
  normalization charts, for single-character NFKC/NFC examples (quoted from memory of the
  standard's examples; each is also cross-checked with Python's ``unicodedata`` below).
- Python's ``unicodedata.normalize`` (a general-purpose reference implementation of UAX #15)
  over every assigned code point and over random combining sequences.
- Unicode ``PropList.txt`` White_Space property (list written from memory).
- The WHATWG HTML Living Standard's named character references and numeric-reference rules,
  and Python's ``html.unescape`` which implements them.
"""

from __future__ import annotations

import functools
import html
import html.entities
import random
import unicodedata

import polars as pl
import pytest
from polars.testing import assert_frame_equal

from prep.config import ConfigError, build
from prep.errors import DataError
from prep.steps import normalise
from prep.steps.normalise import Config

# Unicode PropList.txt, property White_Space (from memory; stable since Unicode 6.3).
WHITE_SPACE = frozenset(
    chr(c)
    for c in [*range(0x09, 0x0E), 0x20, 0x85, 0xA0, 0x1680, *range(0x2000, 0x200B), 0x2028, 0x2029, 0x202F, 0x205F, 0x3000]
)
ZERO_WIDTH = frozenset("\u200b\u200c\u200d\u2060\ufeff")


def reference_clean(text: str | None, form: str = "NFKC") -> str | None:
    """The documented rules (steps 2-4), written independently with the standard library."""
    if text is None:
        return None
    kept = "".join(
        ch
        for ch in text
        if ch not in ZERO_WIDTH and not (unicodedata.category(ch) == "Cc" and ch not in WHITE_SPACE)
    )
    normal = unicodedata.normalize(form, kept)
    out: list[str] = []
    for ch in normal:
        if ch in WHITE_SPACE:
            if out and out[-1] != " ":
                out.append(" ")
        else:
            out.append(ch)
    return "".join(out).strip(" ")


def run(make_table, make_ctx, rows, config=None, **ctx_overrides):
    table = make_table(rows)
    ctx = make_ctx("normalise", **ctx_overrides)
    result = normalise.apply(table, config or Config(), ctx)
    return table, result, ctx


def body_frame(make_table, values, **extra):
    return make_table([{"title": None, "body": v, "label": "x", **extra} for v in values])


# --- Unicode normalisation -------------------------------------------------------------------

# (input, NFKC, NFC). Source: UAX #15 and the Unicode normalization charts (from memory).
UAX15_EXAMPLES = [
    ("\ufb01", "fi", "\ufb01"),  # LATIN SMALL LIGATURE FI: compatibility decomposition
    ("\u2460", "1", "\u2460"),  # CIRCLED DIGIT ONE
    ("\u212b", "\u00c5", "\u00c5"),  # ANGSTROM SIGN -> LATIN CAPITAL A WITH RING ABOVE (singleton)
    ("\u2126", "\u03a9", "\u03a9"),  # OHM SIGN -> GREEK CAPITAL OMEGA (singleton)
    ("\u00b2", "2", "\u00b2"),  # SUPERSCRIPT TWO
    ("2\u2075", "25", "2\u2075"),  # "2⁵" (UAX #15 figure on compatibility equivalence)
    ("\uff76", "\u30ab", "\uff76"),  # HALFWIDTH KATAKANA KA -> KATAKANA KA
    ("\uff76\uff9e", "\u30ac", "\uff76\uff9e"),  # half-width KA + voiced mark -> GA (composed)
    ("\u1e9b\u0323", "\u1e69", "\u1e9b\u0323"),  # long s with dot above + dot below (UAX #15 example)
    ("A\u030a", "\u00c5", "\u00c5"),  # A + COMBINING RING ABOVE composes
    ("\uff21\uff22", "AB", "\uff21\uff22"),  # FULLWIDTH A B
]


@pytest.mark.parametrize(("raw", "nfkc", "nfc"), UAX15_EXAMPLES)
def test_uax15_examples(make_table, make_ctx, raw, nfkc, nfc):
    # Cross-check the example itself against the reference library, so a typo here cannot hide.
    assert unicodedata.normalize("NFKC", raw) == nfkc
    assert unicodedata.normalize("NFC", raw) == nfc
    for form, want in (("NFKC", nfkc), ("NFC", nfc)):
        table, result, _ = run(make_table, make_ctx, [{"title": raw, "body": None, "label": "x"}],
                               Config(unicode_form=form, html=False, labels=False))
        assert result.get_column("title").to_list() == [want]


@functools.cache
def assigned_code_points() -> tuple[int, ...]:
    """Code points assigned in Python's Unicode database (not surrogates, private use or unassigned).

    Restricting to Python's Unicode version keeps the comparison fair if polars ships newer tables.
    Planes 4 to 13 hold no assigned character in any Unicode version so far and planes 15-16 are
    private use (Unicode roadmap, from memory); they are skipped to keep the test fast.
    """
    candidates = [*range(0x40000), *range(0xE0000, 0xF0000)]
    return tuple(
        c for c in candidates
        if not 0xD800 <= c <= 0xDFFF and unicodedata.category(chr(c)) not in ("Cn", "Co", "Cs")
    )


@pytest.mark.parametrize("form", ["NFKC", "NFC"])
def test_every_code_point_matches_unicodedata(make_ctx, form):
    # Reference: Python unicodedata (UAX #15 implementation) through reference_clean.
    chars = [chr(c) for c in assigned_code_points()]
    assert len(chars) > 140_000  # Unicode 14 assigns about 144,000 (from memory): guard against an empty loop
    values = [f"a{ch}b" for ch in chars]  # letters around it, so trimming does not hide a result
    n = len(values)
    # Built directly (not with make_table) because of its size; same shape as make_table's tables.
    table = pl.DataFrame(
        {
            "row_id": [f"t:{i}" for i in range(n)],
            "source": ["t"] * n,
            "source_row": list(range(n)),
            "title": pl.Series([None] * n, dtype=pl.String),
            "body": values,
            "label": ["x"] * n,
        },
        schema_overrides={"source_row": pl.Int64},
    )
    ctx = make_ctx("normalise")
    result = normalise.apply(table, Config(html=False, labels=False, unicode_form=form), ctx)
    got = result.get_column("body").to_list()
    expected = [reference_clean(v, form) for v in values]
    mismatches = [(hex(ord(ch)), g, e) for ch, g, e in zip(chars, got, expected) if g != e]
    assert mismatches == []


def test_random_combining_sequences_match_unicodedata(make_table, make_ctx):
    # Reference: unicodedata; sequences exercise canonical reordering and composition.
    rng = random.Random(15)
    pool = (
        list("aeiouAEIOUnsz ")
        + [chr(c) for c in range(0x0300, 0x0370)]  # combining diacritical marks
        + [chr(c) for c in range(0x1100, 0x1113)] + [chr(c) for c in range(0x1161, 0x1176)]  # Hangul jamo
        + [chr(c) for c in range(0x11A8, 0x11C3)]
        + ["\u00c5", "\u212b", "\ufb01", "\uff76", "\uff9e", "\u1e9b", "\u0323", "\u0345", "\u0f73", "\u00a0"]
    )
    values = ["".join(rng.choice(pool) for _ in range(rng.randint(1, 8))) for _ in range(3000)]
    _, result, _ = run(make_table, make_ctx, [{"title": None, "body": v, "label": "x"} for v in values],
                       Config(html=False, labels=False))
    assert result.get_column("body").to_list() == [reference_clean(v) for v in values]


def test_output_is_normalised_and_free_of_invisibles(make_table, make_ctx):
    # Invariant from the module docstring; reference: unicodedata.is_normalized.
    rng = random.Random(7)
    pool = ["e", "\u0301", "\u200b", "\u00ad", "\x00", "\x1f", "\t", "\n", "\u3000", "\ufb01", "\u2060", "\ufeff", " "]
    values = ["".join(rng.choice(pool) for _ in range(rng.randint(0, 10))) for _ in range(2000)]
    _, result, _ = run(make_table, make_ctx, [{"title": None, "body": v, "label": "x"} for v in values], Config(labels=False))
    for value in result.get_column("body").to_list():
        assert unicodedata.is_normalized("NFKC", value)
        assert not any(ch in ZERO_WIDTH or unicodedata.category(ch) == "Cc" for ch in value)
        assert "  " not in value and value == value.strip(" ")


# --- Invisible characters and white space -------------------------------------------------------


def test_invisibles_whitespace_nulls_and_empty(make_table, make_ctx):
    rows = [
        {"title": "Pay\u200bment", "body": "line one\nline two\tend", "label": "x"},
        {"title": "\u2060\ufeffStart", "body": "a\x00b\x07c\x7fd\x9fe", "label": "x"},
        {"title": None, "body": "\u3000wide\u00a0space\u2028sep  ", "label": "x"},
        {"title": "", "body": "   ", "label": "x"},
        {"title": "\u200b\u200c", "body": "\r\n", "label": "x"},
        {"title": "Grüße aus Köln", "body": "日本語\u3000テキスト", "label": "x"},
    ]
    table, result, ctx = run(make_table, make_ctx, rows, Config(labels=False))
    expected = table.with_columns(
        pl.Series("title", ["Payment", "Start", None, "", "", "Grüße aus Köln"]),
        pl.Series("body", ["line one line two end", "abcde", "wide space sep", "", "", "日本語 テキスト"]),
    )
    assert_frame_equal(result, expected)
    assert len(ctx.ledger) == 0


def test_zwj_emoji_sequence_is_split_as_documented(make_table, make_ctx):
    family = "\U0001F468\u200d\U0001F469\u200d\U0001F467"  # man ZWJ woman ZWJ girl
    _, result, _ = run(make_table, make_ctx, [{"title": None, "body": f"hi {family}", "label": "x"}], Config(labels=False))
    assert result.get_column("body").to_list() == ["hi \U0001F468\U0001F469\U0001F467"]


# --- HTML ------------------------------------------------------------------------------------


def test_html_tags_and_entities(make_table, make_ctx):
    rows = [
        {"title": None, "body": "Hello<br>World<br/>again<BR />end", "label": "x"},
        {"title": None, "body": "<p>First</p><p>Second</p>", "label": "x"},
        {"title": None, "body": "<div class=\"m\">x<b>bo</b>ld <span style='c'>y</span></div>", "label": "x"},
        {"title": None, "body": "if a < b and c > d", "label": "x"},
        {"title": None, "body": "Write to <EMAIL> at <ADDRESS>, <NAME>", "label": "x"},
        {"title": None, "body": "&lt;b&gt;not a tag&lt;/b&gt; &amp; more", "label": "x"},
        {"title": None, "body": "Caf&eacute; &#233; &#xE9; a&nbsp;b", "label": "x"},
        {"title": None, "body": "<style>p {color: red}</style><script>var a = 1 < 2;</script>text<!-- note -->", "label": "x"},
        {"title": None, "body": "https://example.com/?a=1&copy=2&lt=3 AT&T R&D", "label": "x"},
        {"title": None, "body": "<ul><li>one</li><li>two</li></ul>", "label": "x"},
        {"title": None, "body": "<bx>unknown</bx> <o:p></o:p>kept", "label": "x"},
        {"title": None, "body": "<br>", "label": "x"},
        {"title": None, "body": None, "label": "x"},
        {"title": None, "body": "<SCRIPT>x()</SCRIPT>after <script>unclosed()", "label": "x"},
        {"title": None, "body": "<p>Grüße,&#10;<i>Zoë</i></p>", "label": "x"},
    ]
    table, result, _ = run(make_table, make_ctx, rows, Config(labels=False))
    expected = table.with_columns(
        pl.Series(
            "body",
            [
                "Hello World again end",
                "First Second",
                "xbold y",  # inline tags leave no space
                "if a < b and c > d",
                "Write to <EMAIL> at <ADDRESS>, <NAME>",
                "<b>not a tag</b> & more",
                "Café é é a b",  # &nbsp; is U+00A0, which NFKC maps to U+0020
                "text",
                "https://example.com/?a=1&copy=2&lt=3 AT&T R&D",  # no ';': left as written
                "one two",
                "<bx>unknown</bx> kept",
                "",
                None,
                "after unclosed()",
                "Grüße, Zoë",  # &#10; is a newline, collapsed like any white space
            ],
        )
    )
    assert_frame_equal(result, expected)


def test_html_off_keeps_markup(make_table, make_ctx):
    rows = [{"title": None, "body": "<b>x</b> &amp;", "label": "x"}]
    _, result, _ = run(make_table, make_ctx, rows, Config(html=False, labels=False))
    assert result.get_column("body").to_list() == ["<b>x</b> &amp;"]


# Values from the WHATWG HTML Living Standard, "named character references" table and the
# numeric character reference end state (from memory).
WHATWG_REFERENCES = [
    ("&amp;", "&"),
    ("&lt;", "<"),
    ("&eacute;", "\u00e9"),
    ("&Eacute;", "\u00c9"),
    ("&euro;", "\u20ac"),
    ("&#x1F600;", "\U0001F600"),
    ("&#128;", "\u20ac"),  # 0x80 is remapped to the Windows-1252 character EURO SIGN
    ("&#150;", "\u2013"),  # 0x96 -> EN DASH, same table
    ("&#0;", "\ufffd"),  # null reference -> REPLACEMENT CHARACTER
    ("&#xD800;", "\ufffd"),  # surrogate -> REPLACEMENT CHARACTER
    ("&#x110000;", "\ufffd"),  # beyond Unicode -> REPLACEMENT CHARACTER
    ("&unknownname;", "&unknownname;"),  # not a known name: left as text
]


@pytest.mark.parametrize(("ref", "char"), WHATWG_REFERENCES)
def test_whatwg_reference_values(make_table, make_ctx, ref, char):
    assert html.unescape(ref) == char  # the reference library agrees with the standard's value
    _, result, _ = run(make_table, make_ctx, [{"title": None, "body": f"x{ref}y", "label": "x"}], Config(labels=False))
    assert result.get_column("body").to_list() == [reference_clean(f"x{char}y")]


def test_every_named_reference_matches_html_unescape(make_table, make_ctx):
    # Reference: html.entities.html5 (the WHATWG table) and html.unescape; names with ';' only.
    names = sorted(n for n in html.entities.html5 if n.endswith(";"))
    assert len(names) > 2000  # the table has 2125 such names (from memory): guard against an empty loop
    values = [f"x&{n}y" for n in names]
    _, result, _ = run(make_table, make_ctx, [{"title": None, "body": v, "label": "x"} for v in values], Config(labels=False))
    expected = [reference_clean(html.unescape(v)) for v in values]
    got = result.get_column("body").to_list()
    assert [(v, g, e) for v, g, e in zip(values, got, expected) if g != e] == []


def test_numeric_references_match_html_unescape(make_table, make_ctx):
    # Reference: html.unescape over decimal and hex references across the whole code space.
    code_points = list(range(0, 0x3000)) + list(range(0xD7F0, 0xE010)) + [0xFFFE, 0xFFFF, 0x10FFFF, 0x110000, 0x7FFFFFFF]
    values = [f"[&#{c};|&#x{c:X};]" for c in code_points]
    _, result, _ = run(make_table, make_ctx, [{"title": None, "body": v, "label": "x"} for v in values], Config(labels=False))
    expected = [reference_clean(html.unescape(v)) for v in values]
    got = result.get_column("body").to_list()
    assert [(v, g, e) for v, g, e in zip(values, got, expected) if g != e] == []


# --- Labels -----------------------------------------------------------------------------------


def test_label_spellings_merge_to_most_frequent(make_table, make_ctx):
    labels = ["Billing", "billing", " Billing ", "BILLING", "ｂｉｌｌｉｎｇ", "Tech  Support", "tech support",
              "Tech Support", "Ärger", "ärger", None, "", "Other"]
    rows = [{"title": "t", "body": "b", "label": lab} for lab in labels]
    table, result, ctx = run(make_table, make_ctx, rows)
    # Billing: "Billing" x2 (" Billing " trims to it), "billing" x2 (fullwidth NFKC-folds to it),
    # "BILLING" x1: tie 2-2 goes to the code-point-smaller "Billing" ('B' < 'b').
    # Tech Support: "Tech Support" x2 (whitespace collapsed) beats "tech support" x1.
    # Ärger: tie 1-1, "Ärger" (U+00C4) < "ärger" (U+00E4).
    expected = table.with_columns(
        pl.Series(
            "label",
            ["Billing"] * 5 + ["Tech Support"] * 3 + ["Ärger", "Ärger", None, "", "Other"],
        )
    )
    assert_frame_equal(result, expected)
    assert ctx.facts["label_merges"] == [
        {"class": "Billing", "spellings": {"BILLING": 1, "Billing": 2, "billing": 2}},
        {"class": "Tech Support", "spellings": {"Tech Support": 2, "tech support": 1}},
        {"class": "Ärger", "spellings": {"Ärger": 1, "ärger": 1}},
    ]
    assert ctx.facts["changed_cells"]["label"] == 7


def test_lowercase_is_not_full_case_folding(make_table, make_ctx):
    # Documented choice: str.to_lowercase, so "STRASSE" and "straße" stay apart
    # (Unicode full case folding, CaseFolding.txt, would map ß to "ss").
    rows = [{"title": "t", "body": "b", "label": lab} for lab in ["STRASSE", "straße", "Strasse"]]
    _, result, ctx = run(make_table, make_ctx, rows)
    assert result.get_column("label").to_list() == ["STRASSE", "straße", "STRASSE"]
    assert ctx.facts["label_merges"] == [{"class": "STRASSE", "spellings": {"STRASSE": 1, "Strasse": 1}}]


def test_labels_off_keeps_labels(make_table, make_ctx):
    rows = [{"title": "t", "body": "b", "label": lab} for lab in [" Billing", "billing"]]
    table, result, ctx = run(make_table, make_ctx, rows, Config(labels=False))
    assert_frame_equal(result, table)
    assert "label_merges" not in ctx.facts


# --- Contract ---------------------------------------------------------------------------------


def test_keeps_rows_columns_order_and_reports(make_table, make_ctx):
    rows = [
        {"ticket_id": " T-1 ", "title": " A ", "body": "b", "label": "x", "customer": "  Ann  "},
        {"ticket_id": "T-2", "title": "B", "body": "c\u00a0d", "label": "x", "customer": None},
        {"ticket_id": "T-3", "title": None, "body": "e", "label": "x", "customer": "Bo"},
    ]
    table, result, ctx = run(make_table, make_ctx, rows)
    expected = table.with_columns(pl.Series("title", ["A", "B", None]), pl.Series("body", ["b", "c d", "e"]))
    assert_frame_equal(result, expected)  # ticket_id and customer untouched
    assert ctx.facts["columns"] == ["title", "body"]
    assert ctx.facts["changed_cells"] == {"body": 1, "label": 0, "title": 1}
    assert ctx.facts["label_merges"] == []
    assert len(ctx.ledger) == 0


def test_explicit_columns(make_table, make_ctx):
    rows = [{"title": " A ", "body": " b ", "label": "x", "customer": "Ｂｏ\u200b"}]
    table, result, ctx = run(make_table, make_ctx, rows, Config(columns=["customer"], labels=False))
    assert_frame_equal(result, table.with_columns(pl.Series("customer", ["Bo"])))
    assert ctx.facts["columns"] == ["customer"]


def test_deterministic(make_table, make_ctx):
    rows = [{"title": f"<p>T{i}&amp;</p>", "body": "x\u200by", "label": ["a", "A", "b"][i % 3]} for i in range(50)]
    table = make_table(rows)
    first = normalise.apply(table, Config(), make_ctx("normalise"))
    second = normalise.apply(table, Config(), make_ctx("normalise"))
    assert_frame_equal(first, second)


def test_unknown_column_is_a_data_error_naming_step_and_column(make_table, make_ctx):
    table = make_table([{"title": "secret text", "body": "b", "label": "x"}])
    with pytest.raises(DataError) as info:
        normalise.apply(table, Config(columns=["subject"]), make_ctx("normalise"))
    assert "`normalise`" in str(info.value) and "`subject`" in str(info.value)
    assert "secret" not in str(info.value)


def test_config_built_from_yaml_values():
    assert build(Config, {}, "steps[0].normalise") == Config(columns=None, html=True, labels=True, unicode_form="NFKC")
    assert build(Config, {"columns": ["body"], "unicode_form": "NFC"}, "s").columns == ["body"]
    with pytest.raises(ConfigError) as info:
        build(Config, {"unicode_form": "NFD"}, "steps[0].normalise")
    assert info.value.path == "steps[0].normalise.unicode_form"
    with pytest.raises(ConfigError):
        build(Config, {"strip_html": True}, "steps[0].normalise")
