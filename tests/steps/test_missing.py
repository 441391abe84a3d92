"""Tests for the ``missing`` step: result/expected frames, ledger contents, and the accounting invariant.

References used:
- The default missing-value tokens are common practice, no source (spellings seen in
  spreadsheet and database exports).
- Which characters count as blank: Unicode ``PropList.txt`` White_Space (from memory), plus the
  zero-width characters the ``normalise`` step removes.
"""

from __future__ import annotations

import polars as pl
import pytest
from polars.testing import assert_frame_equal

from prep.config import ConfigError, build
from prep.errors import DataError
from prep.ledger import LEDGER_SCHEMA, check_accounting
from prep.steps import missing
from prep.steps.missing import DEFAULT_TOKENS, Config, FillSpec


def assert_accounted(table: pl.DataFrame, result: pl.DataFrame, ledger: pl.DataFrame) -> None:
    """Every input row is in the output or in the ledger, exactly once; the output keeps input order."""
    out_ids = result.get_column("row_id").to_list()
    set_aside_ids = ledger.get_column("row_id").to_list()
    assert sorted(out_ids + set_aside_ids) == sorted(table.get_column("row_id").to_list())
    assert len(set(out_ids + set_aside_ids)) == len(out_ids) + len(set_aside_ids)
    order = {rid: i for i, rid in enumerate(table.get_column("row_id").to_list())}
    assert out_ids == sorted(out_ids, key=order.__getitem__)
    check_accounting(table.height, [result], ledger)  # the project's own check must agree
    assert result.columns == table.columns


def run(make_table, make_ctx, rows, config=None, **ctx_overrides):
    table = make_table(rows)
    ctx = make_ctx("missing", **ctx_overrides)
    result = missing.apply(table, config or Config(), ctx)
    ledger = ctx.ledger.frame()
    assert_accounted(table, result, ledger)
    return table, result, ledger, ctx


def ledger_rows(ledger: pl.DataFrame) -> list[tuple]:
    return list(ledger.select("row_id", "step", "reason", "detail").iter_rows())


# --- What counts as missing -------------------------------------------------------------------

MISSING_SPELLINGS = [
    None, "", " ", "   ", "\t\n", "\u3000", "\u00a0", "\u200b", "\ufeff",  # blank (White_Space, zero-width)
    "N/A", "n/a", " NA ", "Null", "NULL", "None", "nil", "-", "--", "?", "NaN", "nan",
    "(blank)", "(None)", "#N/A", "#n/a", "\ufeffN/A", "\u00a0none\u00a0", "(BLANK)",
]
PRESENT_SPELLINGS = [
    "Nancy", "nada", "none of these", "N/A please", "0", "—", "---", "??", "n/a.", "Grüße", "日本", " x ", "\u200bx",
    "(blank)x", "#n/a #n/a",  # a token plus more: "(blank)x" is one char longer than the longest token
]


def test_default_tokens_are_the_documented_list():
    assert DEFAULT_TOKENS == (
        "n/a", "na", "null", "none", "nil", "-", "--", "?", "nan", "(blank)", "(none)", "#n/a",
    )  # fmt: skip
    assert build(Config, {}, "steps[1].missing") == Config()


@pytest.mark.parametrize("value", MISSING_SPELLINGS)
def test_missing_spellings_become_null(make_table, make_ctx, value):
    rows = [{"title": "t", "body": "b", "label": "x", "customer": value}]
    table, result, _, ctx = run(make_table, make_ctx, rows, Config(columns={"customer": "keep"}))
    assert_frame_equal(result, table.with_columns(pl.Series("customer", [None], dtype=pl.String)))
    assert ctx.facts["columns"]["customer"] == {"missing": 1, "filled": 0, "set_aside": 0}


@pytest.mark.parametrize("value", PRESENT_SPELLINGS)
def test_present_values_are_kept_byte_for_byte(make_table, make_ctx, value):
    rows = [{"title": "t", "body": value, "label": "x", "customer": value}]
    table, result, ledger, ctx = run(make_table, make_ctx, rows, Config(columns={"customer": "set_aside"}))
    assert_frame_equal(result, table)
    assert ledger.height == 0
    assert ctx.facts["columns"]["customer"]["missing"] == 0


def test_text_and_label_cleaned_other_columns_untouched(make_table, make_ctx):
    rows = [
        {"title": "N/A", "body": "Grüße aus Köln", "label": "billing", "customer": "N/A", "opened": ""},
        {"title": "  ", "body": "Не работает", "label": "tech", "customer": None, "opened": "null"},
        {"title": "Refund", "body": "", "label": "billing", "customer": "none", "opened": "2024-01-02"},
    ]
    table, result, ledger, _ = run(make_table, make_ctx, rows)
    expected = table.with_columns(pl.Series("title", [None, None, "Refund"]), pl.Series("body", ["Grüße aus Köln", "Не работает", None]))
    assert_frame_equal(result, expected)  # customer and opened are not named: left as they were
    assert ledger.height == 0


def test_custom_tokens_replace_the_defaults(make_table, make_ctx):
    rows = [
        {"title": "t", "body": "b", "label": "UNKNOWN"},
        {"title": "t", "body": "b", "label": "n/a"},
        {"title": "t", "body": "b", "label": " Unbekannt "},
    ]
    table, result, ledger, _ = run(make_table, make_ctx, rows, Config(tokens=["unknown", "UNBEKANNT"]))
    assert_frame_equal(result, table[1:2])
    assert ledger_rows(ledger) == [
        ("t:0", "missing", "missing_label", "label column `label` is missing"),
        ("t:2", "missing", "missing_label", "label column `label` is missing"),
    ]


def test_non_ascii_tokens_match_case_insensitively(make_table, make_ctx):
    # Lower-casing per the Unicode default mapping (via polars): "KEINE ANGABE" ~ "keine angabe",
    # "Ø" ~ "ø", and "İPTAL" ~ "İptal" (İ lower-cases to two code points, i + U+0307).
    values = ["KEINE ANGABE", "ø", "İPTAL", "keine angaben", "iptal"]
    rows = [{"title": "t", "body": "b", "label": "x", "customer": v} for v in values]
    config = Config(tokens=["Keine Angabe", "Ø", "İptal"], columns={"customer": "keep"})
    table, result, _, _ = run(make_table, make_ctx, rows, config)
    assert_frame_equal(result, table.with_columns(pl.Series("customer", [None, None, None, "keine angaben", "iptal"])))


# --- Fills ------------------------------------------------------------------------------------


def test_fill_and_fill_from(make_table, make_ctx):
    rows = [
        {"title": "Login broken", "body": "N/A", "label": "app", "customer": None},
        {"title": None, "body": "Bremse quietscht", "label": "repair", "customer": "  "},
        {"title": "Café", "body": "", "label": "app", "customer": "Acme"},
        {"title": None, "body": None, "label": "app", "customer": "Globex"},
    ]
    config = Config(columns={"body": FillSpec(fill_from="title"), "customer": FillSpec(fill="(unknown)")})
    table, result, ledger, ctx = run(make_table, make_ctx, rows, config)
    expected = table.with_columns(
        pl.Series("title", ["Login broken", None, "Café", None]),
        pl.Series("body", ["Login broken", "Bremse quietscht", "Café", None]),
        pl.Series("customer", ["(unknown)", "(unknown)", "Acme", "Globex"]),
    ).filter(pl.col("row_id") != "t:3")
    assert_frame_equal(result, expected)
    assert ledger_rows(ledger) == [("t:3", "missing", "empty_text", "all text columns (`title`, `body`) are missing")]
    assert ctx.facts["columns"] == {
        "body": {"missing": 3, "filled": 2, "set_aside": 0},
        "customer": {"missing": 2, "filled": 2, "set_aside": 0},
        "label": {"missing": 0, "filled": 0, "set_aside": 0},
        "title": {"missing": 2, "filled": 0, "set_aside": 0},
    }
    assert ctx.facts["empty_text"] == 1


def test_fill_from_reads_values_before_any_fill(make_table, make_ctx):
    # Two columns filling from each other: each reads the other's original value, whatever the order.
    rows = [
        {"title": "A", "body": None, "label": "x"},
        {"title": "-", "body": "B", "label": "x"},
        {"title": "n/a", "body": "", "label": "x"},
    ]
    for columns in (
        {"title": FillSpec(fill_from="body"), "body": FillSpec(fill_from="title")},
        {"body": FillSpec(fill_from="title"), "title": FillSpec(fill_from="body")},
    ):
        table, result, ledger, _ = run(make_table, make_ctx, rows, Config(columns=columns))
        expected = table.with_columns(pl.Series("title", ["A", "B", None]), pl.Series("body", ["A", "B", None]))[:2]
        assert_frame_equal(result, expected)
        assert ledger_rows(ledger) == [("t:2", "missing", "empty_text", "all text columns (`title`, `body`) are missing")]


def test_fill_from_does_not_chain_through_another_fill(make_table, make_ctx):
    rows = [{"title": None, "body": None, "label": "x"}, {"title": "Hi", "body": None, "label": "x"}]
    config = Config(columns={"title": FillSpec(fill="(no title)"), "body": FillSpec(fill_from="title")})
    table, result, ledger, ctx = run(make_table, make_ctx, rows, config)
    expected = table.with_columns(pl.Series("title", ["(no title)", "Hi"]), pl.Series("body", [None, "Hi"]))
    assert_frame_equal(result, expected)  # body read title before its fill: row 0 keeps a null body
    assert ledger.height == 0  # the filled title counts as text
    assert ctx.facts["columns"]["body"] == {"missing": 2, "filled": 1, "set_aside": 0}


def test_fill_from_a_column_outside_the_cleaned_set_ignores_its_tokens(make_table, make_ctx):
    rows = [
        {"title": "t", "body": "b", "label": None, "queue": "Billing"},
        {"title": "t", "body": "b", "label": None, "queue": "N/A"},
    ]
    table, result, ledger, _ = run(make_table, make_ctx, rows, Config(columns={"label": FillSpec(fill_from="queue")}))
    assert_frame_equal(result, table.with_columns(pl.Series("label", ["Billing", None])))  # queue itself unchanged
    assert ledger.height == 0  # the label's policy is now the fill, not set_aside


def test_label_fill_value(make_table, make_ctx):
    rows = [{"title": "t", "body": "b", "label": "N/A"}, {"title": "t", "body": "b", "label": "billing"}]
    table, result, _, ctx = run(make_table, make_ctx, rows, Config(columns={"label": FillSpec(fill="other")}))
    assert_frame_equal(result, table.with_columns(pl.Series("label", ["other", "billing"])))
    assert ctx.facts["columns"]["label"] == {"missing": 1, "filled": 1, "set_aside": 0}


# --- Setting rows aside -----------------------------------------------------------------------


def test_reason_order_each_row_once(make_table, make_ctx):
    rows = [
        {"title": "ok", "body": "fine", "label": "a", "customer": "Ann"},  # kept
        {"title": None, "body": " ", "label": None, "customer": None},  # all three apply: empty_text
        {"title": "x", "body": None, "label": "", "customer": None},  # label and customer: missing_label
        {"title": "y", "body": "z", "label": "b", "customer": "N/A"},  # missing_value (customer)
        {"title": "Grüße", "body": "日本語", "label": "c", "customer": "Zoë"},  # kept
        {"title": "", "body": "", "label": "d", "customer": "Bo"},  # empty_text
        {"title": "w", "body": "v", "label": "?", "customer": "Cy"},  # missing_label
    ]
    config = Config(columns={"customer": "set_aside"})
    table, result, ledger, ctx = run(make_table, make_ctx, rows, config)
    assert_frame_equal(result, table.filter(pl.col("row_id").is_in(["t:0", "t:4"])))
    assert ledger.schema == pl.Schema(LEDGER_SCHEMA)
    assert ledger_rows(ledger) == [
        ("t:1", "missing", "empty_text", "all text columns (`title`, `body`) are missing"),
        ("t:5", "missing", "empty_text", "all text columns (`title`, `body`) are missing"),
        ("t:2", "missing", "missing_label", "label column `label` is missing"),
        ("t:6", "missing", "missing_label", "label column `label` is missing"),
        ("t:3", "missing", "missing_value", "column `customer` is missing"),
    ]
    assert ledger.select("source", "source_row").rows() == [("t", 1), ("t", 5), ("t", 2), ("t", 6), ("t", 3)]
    assert ctx.facts["columns"]["label"] == {"missing": 3, "filled": 0, "set_aside": 2}
    assert ctx.facts["columns"]["customer"] == {"missing": 3, "filled": 0, "set_aside": 1}
    assert ctx.facts["empty_text"] == 2
    assert ctx.ledger.counts("missing") == {"empty_text": 2, "missing_label": 2, "missing_value": 1}


def test_keep_policies(make_table, make_ctx):
    rows = [
        {"title": None, "body": "", "label": None, "customer": "-"},
        {"title": "t", "body": "b", "label": "a", "customer": "Ann"},
    ]
    config = Config(columns={"label": "keep", "customer": "keep"}, empty_text="keep")
    table, result, ledger, ctx = run(make_table, make_ctx, rows, config)
    expected = table.with_columns(
        pl.Series("body", [None, "b"]), pl.Series("customer", [None, "Ann"])
    )
    assert_frame_equal(result, expected)
    assert ledger.height == 0
    assert ctx.facts["empty_text"] == 0


def test_text_column_set_aside_policy(make_table, make_ctx):
    rows = [{"title": "Only a title", "body": "N/A", "label": "a"}, {"title": None, "body": "b", "label": "a"}]
    table, result, ledger, _ = run(make_table, make_ctx, rows, Config(columns={"body": "set_aside"}))
    assert_frame_equal(result, table[1:])
    assert ledger_rows(ledger) == [("t:0", "missing", "missing_value", "column `body` is missing")]


def test_single_text_column_and_empty_table(make_table, make_ctx):
    rows = [{"body": "", "label": "a"}, {"body": "text", "label": "a"}]
    table, result, ledger, _ = run(make_table, make_ctx, rows, text=("body",))
    assert_frame_equal(result, table[1:])
    assert ledger_rows(ledger) == [("t:0", "missing", "empty_text", "all text columns (`body`) are missing")]
    empty = make_table([], columns=["title", "body", "label"])
    ctx = make_ctx("missing")
    assert_frame_equal(missing.apply(empty, Config(), ctx), empty)
    assert len(ctx.ledger) == 0


def test_ledger_and_errors_hold_no_data_values(make_table, make_ctx):
    rows = [{"title": None, "body": None, "label": "secret-label", "customer": "Pat Example"}]
    _, _, ledger, ctx = run(make_table, make_ctx, rows)
    assert "Pat" not in str(ledger.rows()) and "secret" not in str(ledger.rows())
    assert "Pat" not in str(ctx.facts) and "secret" not in str(ctx.facts)


# --- Config and errors ------------------------------------------------------------------------


def test_config_from_yaml_values():
    cfg = build(
        Config,
        {"columns": {"label": "set_aside", "body": {"fill_from": "title"}, "customer": {"fill": "unknown"}}, "empty_text": "keep"},
        "steps[1].missing",
    )
    assert cfg.columns == {"label": "set_aside", "body": FillSpec(fill_from="title"), "customer": FillSpec(fill="unknown")}
    assert cfg.empty_text == "keep"
    assert cfg.tokens == list(DEFAULT_TOKENS)


@pytest.mark.parametrize(
    ("value", "path"),
    [
        ({"columns": {"body": {"fill_from": "body"}}}, "steps[1].missing.columns"),
        ({"columns": {"body": {"fill": "x", "fill_from": "title"}}}, "steps[1].missing.columns.body"),
        ({"columns": {"body": {}}}, "steps[1].missing.columns.body"),
        ({"columns": {"body": "drop"}}, "steps[1].missing.columns.body"),
        ({"columns": {"body": {"fill_with": "x"}}}, "steps[1].missing.columns.body.fill_with"),
        ({"empty_text": "drop"}, "steps[1].missing.empty_text"),
    ],
)
def test_config_errors(value, path):
    with pytest.raises(ConfigError) as info:
        build(Config, value, "steps[1].missing")
    assert info.value.path == path


def test_self_fill_message_names_the_column():
    with pytest.raises(ConfigError) as info:
        build(Config, {"columns": {"body": {"fill_from": "body"}}}, "steps[1].missing")
    assert "`body`" in info.value.message


@pytest.mark.parametrize(
    "config",
    [Config(columns={"subject": "keep"}), Config(columns={"body": FillSpec(fill_from="subject")})],
)
def test_unknown_column_is_a_data_error(make_table, make_ctx, config):
    table = make_table([{"title": "private words", "body": "b", "label": "a"}])
    with pytest.raises(DataError) as info:
        missing.apply(table, config, make_ctx("missing"))
    message = str(info.value)
    assert "`missing`" in message and "`subject`" in message and "private" not in message


def test_no_tokens_only_blanks_are_missing(make_table, make_ctx):
    rows = [{"title": "N/A", "body": " ", "label": "none"}, {"title": "", "body": "\t", "label": "a"}]
    table, result, ledger, _ = run(make_table, make_ctx, rows, Config(tokens=[]))
    assert_frame_equal(result, table[:1].with_columns(pl.Series("body", [None], dtype=pl.String)))
    assert ledger_rows(ledger) == [("t:1", "missing", "empty_text", "all text columns (`title`, `body`) are missing")]
