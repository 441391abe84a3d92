"""Tests for the ``rare_classes`` step.

References: class sizes are counted independently with ``collections.Counter``
(Python standard library); the default threshold 7 for 0.8/0.1/0.1 is worked out by
hand with the largest remainder (Hamilton) method that ``prep.split.allocate`` uses:
6 rows -> 4.8/0.6/0.6 -> floors 4/0/0, the two leftover rows go to the largest
remainders 0.8 and 0.6 (train, validation) -> 5/1/0, so test gets none; 7 rows ->
5.6/0.7/0.7 -> 5/0/0, leftovers to 0.7, 0.7 -> 5/1/1.
"""

from __future__ import annotations

from collections import Counter

import polars as pl
import pytest
from polars.testing import assert_frame_equal

from prep.config import ConfigError, build
from prep.ledger import LEDGER_SCHEMA
from prep.steps.rare_classes import NAME, TRAIN_ONLY_COLUMN, Config, apply


def run(table, ctx, **config):
    return apply(table, build(Config, config, "rare_classes"), ctx)


def assert_accounted(table: pl.DataFrame, result: pl.DataFrame, ledger: pl.DataFrame) -> None:
    """Every input row is in the result or in the ledger, exactly once, in input order."""
    ids = table.get_column("row_id").to_list()
    out_ids = result.get_column("row_id").to_list()
    led_ids = ledger.get_column("row_id").to_list()
    assert sorted(out_ids + led_ids) == sorted(ids)
    assert len(set(out_ids + led_ids)) == len(ids)
    assert out_ids == [r for r in ids if r in set(out_ids)]


def labelled(counts: dict[str | None, int], *, extra: bool = True) -> list[dict]:
    """Rows interleaving the classes (so order matters), with a text column and non-ASCII."""
    rows = []
    left = dict(counts)
    i = 0
    while any(left.values()):
        for lab in list(left):
            if left[lab]:
                row = {"title": f"Tícket {i}", "body": "", "label": lab}
                if extra:
                    row["customer"] = None if i % 2 else "someone@example.org"
                rows.append(row)
                left[lab] -= 1
                i += 1
    return rows


COUNTS = {"billing": 9, "Fundsachen": 7, "accès": 6, "damage": 2, None: 3}


def test_default_threshold_sets_aside_classes_below_seven(make_table, make_ctx):
    rows = labelled(COUNTS)
    table = make_table(rows)
    ctx = make_ctx(NAME)
    result = run(table, ctx)

    # Reference: Counter over the raw rows; threshold 7 worked out by hand (module docstring).
    sizes = Counter(r["label"] for r in rows if r["label"] is not None)
    rare = {c for c, n in sizes.items() if n < 7}
    assert rare == {"accès", "damage"}
    assert_frame_equal(result, table.filter(~pl.col("label").is_in(sorted(rare)).fill_null(False)))

    ledger = ctx.ledger.frame()
    aside = [r for r in rows if r["label"] in rare]
    assert ledger.height == len(aside)
    assert set(ledger.get_column("reason").to_list()) == {"rare_class"}
    details = dict(zip(ledger.get_column("row_id").to_list(), ledger.get_column("detail").to_list()))
    for row_id, row in zip(table.get_column("row_id").to_list(), rows):
        if row["label"] in rare:
            assert details[row_id] == f"class has {sizes[row['label']]} rows, fewer than 7"
    assert ctx.facts["min_rows"] == 7
    assert ctx.facts["classes"] == [
        {"class": "accès", "rows": 6, "action": "set_aside"},
        {"class": "damage", "rows": 2, "action": "set_aside"},
    ]
    assert_accounted(table, result, ledger)


def test_null_labels_are_left_alone_and_not_a_class(make_table, make_ctx):
    table = make_table([{"title": "x", "label": None}] * 3 + [{"title": "y", "label": "only"}])
    ctx = make_ctx(NAME)
    result = run(table, ctx)
    assert result.get_column("row_id").to_list() == ["t:0", "t:1", "t:2"]
    expected_ledger = pl.DataFrame(
        {
            "row_id": ["t:3"],
            "source": ["t"],
            "source_row": [3],
            "step": [NAME],
            "reason": ["rare_class"],
            "detail": ["class has 1 rows, fewer than 7"],
            "kept_row_id": [None],
            "similarity": [None],
        },
        schema=LEDGER_SCHEMA,
    )
    assert_frame_equal(ctx.ledger.frame(), expected_ledger)


def test_empty_string_label_is_a_class_like_any_other(make_table, make_ctx):
    # "" is a value, not a missing label: the missing step decides about it, not this one.
    table = make_table([{"label": ""}] * 2 + [{"label": "a"}] * 7)
    ctx = make_ctx(NAME)
    result = run(table, ctx)
    assert result.get_column("label").to_list() == ["a"] * 7
    assert ctx.facts["classes"] == [{"class": "", "rows": 2, "action": "set_aside"}]


@pytest.mark.parametrize(
    ("fractions", "threshold"),
    [
        ({"train": 0.8, "validation": 0.1, "test": 0.1}, 7),   # by hand, see module docstring
        # 0.7/0.15/0.15: n=3 -> 2.1/0.45/0.45 -> 2/0/0 + one leftover to validation -> 2/1/0;
        # n=4 -> 2.8/0.6/0.6 -> 2/0/0 + two leftovers: train (0.8), validation (0.6) -> 3/1/0;
        # n=5 -> 3.5/0.75/0.75 -> 3/0/0 + two leftovers to validation, test -> 3/1/1.
        ({"train": 0.7, "validation": 0.15, "test": 0.15}, 5),
        # 0.9/0.1/0 (no test split): validation first gets a row at n=6 -> 5.4/0.6 -> 5/0 + the
        # leftover to the larger remainder 0.6 -> 5/1; at n=5 the remainders tie at 0.5 and
        # the tie goes to train (position) -> 5/0; below that train's remainder is larger.
        ({"train": 0.9, "validation": 0.1, "test": 0.0}, 6),
    ],
)
def test_min_rows_follows_split_fractions(make_table, make_ctx, fractions, threshold):
    ctx = make_ctx(NAME, split_fractions=fractions)
    run(make_table([{"label": "a"}]), ctx)
    assert ctx.facts["min_rows"] == threshold


def test_explicit_min_rows_boundary(make_table, make_ctx):
    table = make_table([{"label": "a"}] * 3 + [{"label": "b"}] * 2)
    ctx = make_ctx(NAME)
    result = run(table, ctx, min_rows=3)
    # 3 rows is not fewer than 3: kept; 2 is.
    assert result.get_column("label").to_list() == ["a"] * 3
    assert ctx.facts["min_rows"] == 3


def test_merge_relabels_and_reports(make_table, make_ctx):
    rows = labelled(COUNTS)
    table = make_table(rows)
    ctx = make_ctx(NAME)
    result = run(table, ctx, policy="merge", merge_into="other")

    expected = table.with_columns(
        pl.when(pl.col("label").is_in(["accès", "damage"]))
        .then(pl.lit("other"))
        .otherwise(pl.col("label"))
        .alias("label")
    )
    assert_frame_equal(result, expected)
    assert len(ctx.ledger) == 0
    # 6 + 2 = 8 rows of "other", not below 7.
    assert ctx.facts["merge"] == {
        "into": "other", "from": ["accès", "damage"], "rows_moved": 8, "rows_after": 8, "below_min_rows": False
    }
    assert [c["action"] for c in ctx.facts["classes"]] == ["merged", "merged"]
    assert_accounted(table, result, ctx.ledger.frame())


def test_merge_still_below_minimum_is_reported_not_repeated(make_table, make_ctx):
    table = make_table([{"label": "a"}] * 2 + [{"label": "b"}] * 3 + [{"label": "big"}] * 7)
    ctx = make_ctx(NAME)
    result = run(table, ctx, policy="merge", merge_into="b")
    # "b" is rare itself: it takes a's 2 rows and has 5 < 7; nothing else happens.
    assert Counter(result.get_column("label").to_list()) == Counter({"b": 5, "big": 7})
    assert ctx.facts["merge"]["below_min_rows"] is True
    assert ctx.facts["merge"]["rows_after"] == 5
    assert ctx.facts["classes"] == [
        {"class": "a", "rows": 2, "action": "merged"},
        {"class": "b", "rows": 3, "action": "merge_target"},
    ]


def test_train_only_marks_rows(make_table, make_ctx):
    rows = labelled(COUNTS)
    table = make_table(rows)
    ctx = make_ctx(NAME)
    result = run(table, ctx, policy="train_only")
    expected = table.with_columns(
        pl.Series(TRAIN_ONLY_COLUMN, [r["label"] in {"accès", "damage"} for r in rows], dtype=pl.Boolean)
    )
    assert_frame_equal(result, expected)
    assert len(ctx.ledger) == 0


def test_train_only_keeps_existing_marks(make_table, make_ctx):
    table = make_table([{"label": "a"}, {"label": "b"}] + [{"label": "b"}] * 7).with_columns(
        pl.Series(TRAIN_ONLY_COLUMN, [False, True] + [False] * 6 + [None], dtype=pl.Boolean)
    )
    result = run(table, make_ctx(NAME), policy="train_only")
    assert result.get_column(TRAIN_ONLY_COLUMN).to_list() == [True, True] + [False] * 7


def test_nothing_rare_changes_nothing(make_table, make_ctx):
    table = make_table([{"label": "a"}] * 7)
    for policy, extra in (("set_aside", {}), ("merge", {"merge_into": "z"})):
        ctx = make_ctx(NAME)
        result = run(table, ctx, policy=policy, **extra)
        assert_frame_equal(result, table)
        assert ctx.facts["classes"] == []


def test_empty_table(make_table, make_ctx):
    table = make_table([], columns=["label"])
    ctx = make_ctx(NAME)
    assert_frame_equal(run(table, ctx), table)


def test_config_checks():
    assert build(Config, None, "x") == Config()
    with pytest.raises(ConfigError) as err:
        build(Config, {"policy": "merge"}, "steps[4].rare_classes")
    assert err.value.path == "steps[4].rare_classes.merge_into"
    with pytest.raises(ConfigError):
        build(Config, {"merge_into": "other"}, "x")
    with pytest.raises(ConfigError):
        build(Config, {"min_rows": 0}, "x")
    with pytest.raises(ConfigError):
        build(Config, {"policy": "drop"}, "x")
