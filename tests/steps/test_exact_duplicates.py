"""Tests for the ``exact_duplicates`` step.

The main reference is an exhaustive pairwise comparison written in plain Python
(:func:`reference`): every pair of rows is compared column by column with ``str.lower``,
the groups, kept rows and reasons are derived from the rules in the module docstring,
and the step must agree on many random small tables. Hand cases cover the rest.
"""

from __future__ import annotations

import itertools
import random
from datetime import datetime

import polars as pl
import pytest
from polars.testing import assert_frame_equal

from prep.config import ConfigError, build
from prep.errors import PipelineError
from prep.ledger import LEDGER_SCHEMA
from prep.steps import exact_duplicates as step
from prep.steps.exact_duplicates import CLUSTER_SCHEMA, Config, apply, parse_times


def run(table, ctx, **config):
    return apply(table, build(Config, config, "exact_duplicates"), ctx)


def assert_accounted(table: pl.DataFrame, result: pl.DataFrame, ledger: pl.DataFrame) -> None:
    """Every input row is in the result or in the ledger, exactly once; result keeps input order."""
    out_ids = result.get_column("row_id").to_list()
    led_ids = ledger.get_column("row_id").to_list()
    assert sorted(out_ids + led_ids) == sorted(table.get_column("row_id").to_list())
    assert len(set(out_ids + led_ids)) == table.height
    order = {r: i for i, r in enumerate(table.get_column("row_id").to_list())}
    assert [order[r] for r in out_ids] == sorted(order[r] for r in out_ids)
    # Surviving rows are unchanged, all columns included.
    assert_frame_equal(result, table.filter(pl.col("row_id").is_in(out_ids)))


# ---------------------------------------------------------------------------------------
# Reference: exhaustive pairwise comparison in plain Python
# ---------------------------------------------------------------------------------------

# Times used by the random tables, with the instant each one denotes, worked out by hand
# from ISO 8601 (offsets: "Z" = UTC, "+01:00" = one hour ahead of UTC; from memory) and
# the documented day-first reading of slash dates. Naive times are taken as UTC.
TIMES: dict[str | None, datetime | None] = {
    "2025-03-04T10:22:00Z": datetime(2025, 3, 4, 10, 22),
    "2025-03-04T11:22:00+01:00": datetime(2025, 3, 4, 10, 22),   # the same instant as above
    "2025-03-04 09:00": datetime(2025, 3, 4, 9, 0),
    "04/03/2025 12:30": datetime(2025, 3, 4, 12, 30),            # 4 March, day first
    "03/04/2025 08:00": datetime(2025, 4, 3, 8, 0),              # 3 April, day first
    "2025-03-05": datetime(2025, 3, 5, 0, 0),
    "not a date": None,
    "2025-02-30 10:00": None,                                    # 30 February does not exist
    None: None,
}


def reference(rows, columns, *, case_sensitive, keep, conflicts, label="label", time_column="opened"):
    """(kept row indexes, {index: (reason, kept index or None)}) by pairwise comparison."""
    n = len(rows)

    def norm(v):
        v = "" if v is None else v
        return v if case_sensitive else v.lower()

    def empty(i):
        return all((rows[i].get(c) or "") == "" for c in columns)

    def same(i, j):
        return all(norm(rows[i].get(c)) == norm(rows[j].get(c)) for c in columns)

    # Groups: "same" is an equivalence, so a row's group is its first equal row. Empty rows
    # stay alone. Every pair is compared.
    group_of = list(range(n))
    for i, j in itertools.combinations(range(n), 2):
        if group_of[j] == j and not empty(i) and not empty(j) and same(i, j):
            group_of[j] = group_of[i]
    groups: dict[int, list[int]] = {}
    for i in range(n):
        groups.setdefault(group_of[i], []).append(i)

    def preference(i):
        if keep == "first":
            return (0, 0, i)
        t = TIMES[rows[i].get(time_column)]
        if t is None:
            return (1, 0, i)
        stamp = t.timestamp()
        return (0, stamp if keep == "earliest" else -stamp, i)

    aside: dict[int, tuple[str, int | None]] = {}
    for members in groups.values():
        if len(members) < 2:
            continue
        labels = [rows[i].get(label) for i in members if rows[i].get(label) is not None]
        counts: dict[str, int] = {}
        for lab in labels:
            counts[lab] = counts.get(lab, 0) + 1
        conflict = len(counts) > 1
        top = max(counts.values()) if counts else None
        tied = conflict and sum(1 for c in counts.values() if c == top) > 1
        if (conflicts == "majority" and tied) or (conflicts == "set_aside" and conflict):
            for i in members:
                aside[i] = ("label_conflict", None)
            continue
        if not counts:
            candidates = members
        elif conflicts == "majority":
            candidates = [i for i in members if counts.get(rows[i].get(label)) == top]
        else:
            candidates = [i for i in members if rows[i].get(label) is not None]
        kept = min(candidates, key=preference)
        for i in members:
            if i != kept:
                aside[i] = ("exact_duplicate", kept)
    kept_rows = [i for i in range(n) if i not in aside]
    return kept_rows, aside


def random_rows(rng: random.Random, n: int) -> list[dict]:
    # A tiny alphabet with case pairs, non-ASCII case pairs, empties and nulls, so that
    # duplicates, case-only differences and empty keys are all frequent.
    values = [None, "", "a", "A", "ä", "Ä", "b", "ß", "ab"]
    labels = [None, "x", "y", "é"]
    return [
        {
            "title": rng.choice(values),
            "body": rng.choice(values),
            "label": rng.choice(labels),
            "opened": rng.choice(list(TIMES)),
        }
        for _ in range(n)
    ]


@pytest.mark.parametrize("keep", ["first", "earliest", "latest"])
@pytest.mark.parametrize("conflicts", ["majority", "set_aside", "keep_first"])
@pytest.mark.parametrize("case_sensitive", [False, True])
def test_matches_exhaustive_pairwise_reference(make_table, make_ctx, keep, conflicts, case_sensitive):
    # Reference: exhaustive pairwise comparison (plain Python), see `reference`.
    rng = random.Random(f"{keep}-{conflicts}-{case_sensitive}")
    for trial in range(6):
        rows = random_rows(rng, rng.randint(0, 30))
        table = make_table(rows, columns=["title", "body", "label", "opened"])
        ctx = make_ctx("exact_duplicates")
        config = {"keep": keep, "conflicts": conflicts, "case_sensitive": case_sensitive}
        if keep != "first":
            config["time_column"] = "opened"
        result = run(table, ctx, **config)
        ledger = ctx.ledger.frame()

        kept, aside = reference(
            rows, ["title", "body"], case_sensitive=case_sensitive, keep=keep, conflicts=conflicts
        )
        assert result.get_column("row_id").to_list() == [f"t:{i}" for i in kept], (trial, rows)
        got = {
            r: (reason, k)
            for r, reason, k in ledger.select("row_id", "reason", "kept_row_id").iter_rows()
        }
        want = {f"t:{i}": (reason, None if k is None else f"t:{k}") for i, (reason, k) in aside.items()}
        assert got == want, (trial, rows)
        assert_accounted(table, result, ledger)


# ---------------------------------------------------------------------------------------
# Hand cases
# ---------------------------------------------------------------------------------------

def test_case_folded_non_ascii_nulls_and_empty_strings(make_table, make_ctx):
    table = make_table(
        [
            {"title": "Ärger mit der App", "body": "Straße", "label": "app", "customer": "a@example.com"},
            {"title": "ärger MIT der app", "body": "STRASSE", "label": "app", "customer": None},   # ß≠SS
            {"title": "ÄRGER MIT DER APP", "body": "straße", "label": "app", "customer": "b@example.com"},
            {"title": None, "body": "Only body", "label": "billing", "customer": None},
            {"title": "", "body": "only BODY", "label": "billing", "customer": None},             # null = ""
            {"title": None, "body": None, "label": "billing", "customer": None},                  # empty key
            {"title": "", "body": "", "label": "billing", "customer": None},                      # empty key
        ]
    )
    ctx = make_ctx("exact_duplicates")
    result = run(table, ctx)

    expected = table.filter(pl.col("row_id").is_in(["t:0", "t:1", "t:3", "t:5", "t:6"]))
    assert_frame_equal(result, expected)
    ledger = ctx.ledger.frame()
    expected_ledger = pl.DataFrame(
        {
            "row_id": ["t:2", "t:4"],
            "source": ["t", "t"],
            "source_row": [2, 4],
            "step": ["exact_duplicates"] * 2,
            "reason": ["exact_duplicate"] * 2,
            "detail": ["same title, body as the kept row (ignoring case)"] * 2,
            "kept_row_id": ["t:0", "t:3"],
            "similarity": [1.0, 1.0],
        },
        schema=LEDGER_SCHEMA,
    )
    assert_frame_equal(ledger, expected_ledger)
    assert_accounted(table, result, ledger)


def test_case_sensitive_compares_exactly(make_table, make_ctx):
    table = make_table(
        [
            {"title": "Refund", "body": "x", "label": "billing"},
            {"title": "refund", "body": "x", "label": "billing"},
            {"title": "Refund", "body": "x", "label": "billing"},
        ]
    )
    ctx = make_ctx("exact_duplicates")
    result = run(table, ctx, case_sensitive=True)
    assert result.get_column("row_id").to_list() == ["t:0", "t:1"]
    assert ctx.ledger.frame().get_column("kept_row_id").to_list() == ["t:0"]


def test_key_cannot_collide_across_column_boundaries(make_table, make_ctx):
    # ("ab", "c") and ("a", "bc") concatenate to the same text; so do values that contain
    # a separator character. None of them are duplicates.
    table = make_table(
        [
            {"title": "ab", "body": "c", "label": "x"},
            {"title": "a", "body": "bc", "label": "x"},
            {"title": "a\x1fb", "body": "c", "label": "x"},
            {"title": "a", "body": "b\x1fc", "label": "x"},
            {"title": "1:a", "body": "", "label": "x"},
            {"title": "", "body": "1:a", "label": "x"},
        ]
    )
    ctx = make_ctx("exact_duplicates")
    result = run(table, ctx)
    assert result.height == table.height
    assert len(ctx.ledger) == 0


def test_columns_option_and_other_columns_untouched(make_table, make_ctx):
    table = make_table(
        [
            {"ticket_id": "T-1", "title": "a", "body": "one", "label": "x", "channel": "mail"},
            {"ticket_id": "t-1", "title": "b", "body": "two", "label": "x", "channel": "chat"},
            {"ticket_id": "T-2", "title": "a", "body": "one", "label": "x", "channel": "mail"},
        ]
    )
    ctx = make_ctx("exact_duplicates")
    result = run(table, ctx, columns=["ticket_id"])
    assert_frame_equal(result, table.filter(pl.col("row_id") != "t:1"))
    assert ctx.ledger.frame().get_column("detail").to_list() == ["same ticket_id as the kept row (ignoring case)"]


@pytest.mark.parametrize(
    ("keep", "kept"),
    [
        ("first", "t:0"),
        # 10:22Z and 11:22+01:00 are the same instant (ISO 8601 offsets, from memory):
        # the tie goes to table order, so t:1 is the earliest; 12:30 on 4 March is the latest.
        ("earliest", "t:1"),
        ("latest", "t:4"),
    ],
)
def test_keep_by_time_in_mixed_formats(make_table, make_ctx, keep, kept):
    table = make_table(
        [
            {"title": "same", "body": "text", "label": "x", "opened": "garbage"},
            {"title": "same", "body": "text", "label": "x", "opened": "2025-03-04T10:22:00Z"},
            {"title": "same", "body": "text", "label": "x", "opened": "2025-03-04T11:22:00+01:00"},
            {"title": "same", "body": "text", "label": "x", "opened": None},
            {"title": "same", "body": "text", "label": "x", "opened": "04/03/2025 12:30"},
        ]
    )
    ctx = make_ctx("exact_duplicates")
    config = {"keep": keep} if keep == "first" else {"keep": keep, "time_column": "opened"}
    result = run(table, ctx, **config)
    assert result.get_column("row_id").to_list() == [kept]
    assert set(ctx.ledger.frame().get_column("kept_row_id").to_list()) == {kept}
    if keep != "first":
        assert ctx.facts["unparsed_times"] == 2


def test_unparseable_times_sort_last_for_both_directions(make_table, make_ctx):
    rows = [
        {"title": "t", "body": "b", "label": "x", "opened": "soon"},
        {"title": "t", "body": "b", "label": "x", "opened": "2024-01-01"},
    ]
    for keep in ("earliest", "latest"):
        ctx = make_ctx("exact_duplicates")
        result = run(make_table(rows), ctx, keep=keep, time_column="opened")
        assert result.get_column("row_id").to_list() == ["t:1"]


def test_parse_times_against_iso_8601_worked_examples():
    # Expected instants worked out by hand from ISO 8601 (UTC designator "Z", offsets
    # "+hh:mm" east of UTC; from memory) and the documented day-first slash dates.
    cases = {
        "2025-03-04T10:22:00Z": datetime(2025, 3, 4, 10, 22),
        "2025-03-04T10:22:00.5Z": datetime(2025, 3, 4, 10, 22, 0, 500000),
        "2025-03-04T10:22:00-05:00": datetime(2025, 3, 4, 15, 22),
        "2025-03-04T00:30+01:00": datetime(2025, 3, 3, 23, 30),   # crosses midnight backwards
        "2025-03-04 10:22:00.000000+00:00": datetime(2025, 3, 4, 10, 22),
        "2025-03-04T10:22:00": datetime(2025, 3, 4, 10, 22),
        "2025-03-04 10:22": datetime(2025, 3, 4, 10, 22),
        "2025-03-04": datetime(2025, 3, 4),
        "04/03/2025 10:22": datetime(2025, 3, 4, 10, 22),
        "31/12/2024": datetime(2024, 12, 31),
        "04.03.2025 10:22": datetime(2025, 3, 4, 10, 22),
        "  2025-03-04 10:22  ": datetime(2025, 3, 4, 10, 22),
        "12/31/2024": None,            # month first: not supported, there is no 31st month
        "2025-02-29": None,            # 2025 is not a leap year
        "yesterday": None,
        "": None,
        None: None,
    }
    got = parse_times(pl.Series("t", list(cases), dtype=pl.String))
    assert got.dtype == pl.Datetime("us")
    assert got.to_list() == list(cases.values())


@pytest.mark.parametrize(
    ("conflicts", "kept_ids", "reasons"),
    [
        # x appears twice, y once: the first x row is kept under majority.
        ("majority", ["t:1"], {"t:0": ("exact_duplicate", "t:1"), "t:2": ("exact_duplicate", "t:1"),
                               "t:3": ("exact_duplicate", "t:1")}),
        ("set_aside", [], {f"t:{i}": ("label_conflict", None) for i in range(4)}),
        ("keep_first", ["t:0"], {"t:1": ("exact_duplicate", "t:0"), "t:2": ("exact_duplicate", "t:0"),
                                 "t:3": ("exact_duplicate", "t:0")}),
    ],
)
def test_conflict_policies(make_table, make_ctx, conflicts, kept_ids, reasons):
    table = make_table(
        [
            {"title": "Rückerstattung", "body": "bitte", "label": "y"},
            {"title": "rückerstattung", "body": "Bitte", "label": "x"},
            {"title": "RÜCKERSTATTUNG", "body": "BITTE", "label": None},
            {"title": "Rückerstattung", "body": "bitte", "label": "x"},
        ]
    )
    ctx = make_ctx("exact_duplicates")
    result = run(table, ctx, conflicts=conflicts)
    assert result.get_column("row_id").to_list() == kept_ids
    ledger = ctx.ledger.frame()
    assert {r: (why, k) for r, why, k in ledger.select("row_id", "reason", "kept_row_id").iter_rows()} == reasons
    assert ctx.facts["label_conflicts"] == 1
    assert_accounted(table, result, ledger)


def test_majority_with_tied_labels_sets_the_group_aside(make_table, make_ctx):
    table = make_table(
        [
            {"title": "a", "body": "b", "label": "x"},
            {"title": "a", "body": "b", "label": "y"},
            {"title": "a", "body": "b", "label": None},
            {"title": "other", "body": "b", "label": "x"},
        ]
    )
    ctx = make_ctx("exact_duplicates")
    result = run(table, ctx)
    assert result.get_column("row_id").to_list() == ["t:3"]
    ledger = ctx.ledger.frame()
    assert ledger.get_column("reason").to_list() == ["label_conflict"] * 3
    assert ledger.get_column("kept_row_id").to_list() == [None] * 3
    assert ledger.get_column("similarity").to_list() == [None] * 3
    assert all("tied labels" in d for d in ledger.get_column("detail").to_list())
    assert ctx.facts["label_conflict_rows"] == 3
    assert ctx.facts["rows_removed"] == 3


def test_labelled_copy_is_kept_over_unlabelled_one(make_table, make_ctx):
    table = make_table(
        [
            {"title": "a", "body": "b", "label": None},
            {"title": "a", "body": "b", "label": "x"},
            {"title": "c", "body": "d", "label": None},
            {"title": "c", "body": "d", "label": None},
        ]
    )
    for conflicts in ("majority", "set_aside", "keep_first"):
        ctx = make_ctx("exact_duplicates")
        result = run(table, ctx, conflicts=conflicts)
        assert result.get_column("row_id").to_list() == ["t:1", "t:2"]


def test_cluster_output_and_report(make_table, make_ctx):
    table = make_table(
        [
            {"title": "one", "body": "x", "label": "a"},     # cluster 0 (kept)
            {"title": "two", "body": "x", "label": "a"},     # cluster 1 (tied -> all aside)
            {"title": "ONE", "body": "X", "label": "a"},     # cluster 0
            {"title": "two", "body": "x", "label": "b"},     # cluster 1
            {"title": "solo", "body": "x", "label": "a"},    # no cluster
            {"title": "One", "body": "x", "label": None},    # cluster 0
        ]
    )
    ctx = make_ctx("exact_duplicates")
    run(table, ctx)
    expected = pl.DataFrame(
        {
            "cluster_id": [0, 1, 0, 1, 0],
            "row_id": ["t:0", "t:1", "t:2", "t:3", "t:5"],
            "source": ["t"] * 5,
            "source_row": [0, 1, 2, 3, 5],
            "kept": [True, False, False, False, False],
            "label": ["a", "a", "a", "b", None],
        },
        schema=CLUSTER_SCHEMA,
    )
    assert_frame_equal(ctx.outputs["exact_duplicate_clusters"], expected)
    assert ctx.facts["groups"] == 2
    assert ctx.facts["exact_duplicate_rows"] == 2
    assert ctx.facts["label_conflicts"] == 1
    assert ctx.facts["label_conflict_rows"] == 2
    assert ctx.facts["rows_removed"] == 4
    assert ctx.facts["clusters"] == [{"size": 2, "clusters": 1}, {"size": 3, "clusters": 1}]


def test_empty_table(make_table, make_ctx):
    table = make_table([], columns=["title", "body", "label"])
    ctx = make_ctx("exact_duplicates")
    result = run(table, ctx)
    assert_frame_equal(result, table)
    assert ctx.outputs["exact_duplicate_clusters"].schema == pl.Schema(CLUSTER_SCHEMA)
    assert ctx.facts["groups"] == 0 and ctx.facts["clusters"] == []


def test_deterministic(make_table, make_ctx):
    rows = random_rows(random.Random(3), 200)
    table = make_table(rows)
    outs = []
    for _ in range(2):
        ctx = make_ctx("exact_duplicates")
        result = run(table, ctx, keep="latest", time_column="opened")
        outs.append((result, ctx.ledger.frame(), ctx.outputs["exact_duplicate_clusters"], ctx.facts))
    assert_frame_equal(outs[0][0], outs[1][0])
    assert_frame_equal(outs[0][1], outs[1][1])
    assert_frame_equal(outs[0][2], outs[1][2])
    assert outs[0][3] == outs[1][3]


def test_config_checks():
    assert build(Config, {}, "x") == Config()
    with pytest.raises(ConfigError) as err:
        build(Config, {"keep": "earliest"}, "steps[3].exact_duplicates")
    assert err.value.path == "steps[3].exact_duplicates.time_column"
    with pytest.raises(ConfigError):
        build(Config, {"keep": "first", "time_column": "opened"}, "x")
    with pytest.raises(ConfigError):
        build(Config, {"columns": []}, "x")
    with pytest.raises(ConfigError):
        build(Config, {"conflicts": "vote"}, "x")


def test_unknown_column_is_a_pipeline_error(make_table, make_ctx):
    table = make_table([{"title": "a", "body": "b", "label": "x"}])
    with pytest.raises(PipelineError, match="`subject`"):
        run(table, make_ctx("exact_duplicates"), columns=["subject"])


def test_module_contract():
    assert step.NAME == "exact_duplicates"
