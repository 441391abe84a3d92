"""Tests for the ``near_duplicates`` step: accounting, keep/conflict policies, action mark, the
splitter's cluster links, determinism, config errors, and the leakage audit.

References: the exhaustive all-pairs method (prep.neardup.exhaustive) as the oracle for the
clusters, and plain-Python counting for the audit."""

from __future__ import annotations

import random

import polars as pl
import pytest

from prep.config import ConfigError, build
from prep.errors import DataError
from prep.ledger import Reason
from prep.neardup import Settings
from prep.neardup.audit import leakage_audit
from prep.split import assign_splits, split_tables
from prep.steps.near_duplicates import CLUSTER_COLUMN, CLUSTER_SCHEMA, Config, apply

BASE = "my scooter will not unlock at the central station dock and the app shows an error"


def run(table, ctx, **config):
    return apply(table, build(Config, config, "near_duplicates"), ctx)


def assert_accounted(table, result, ledger):
    out_ids = result.get_column("row_id").to_list()
    led_ids = ledger.get_column("row_id").to_list()
    assert sorted(out_ids + led_ids) == sorted(table.get_column("row_id").to_list())
    assert len(set(out_ids + led_ids)) == table.height
    order = {r: i for i, r in enumerate(table.get_column("row_id").to_list())}
    assert [order[r] for r in out_ids] == sorted(order[r] for r in out_ids)


def rows():
    return [
        {"title": "Scooter locked", "body": BASE, "label": "Unlock", "opened": "2025-01-03"},
        {"title": "Refund", "body": "please refund the double charge on my card from tuesday", "label": "Billing", "opened": "2025-01-01"},
        {"title": "Re: Scooter locked", "body": BASE + " sent from my phone", "label": "Unlock", "opened": "2025-01-02"},
        {"title": None, "body": None, "label": "Unlock", "opened": None},
        {"title": "Scooter locked!", "body": BASE.replace("central", "céntral"), "label": "Unlock", "opened": "2025-01-05"},
        {"title": "Helmet", "body": "i left my helmet on the bike near the river, was it found", "label": "Lost", "opened": "2025-01-04"},
    ]


def test_set_aside_keeps_first_and_accounts_every_row(make_table, make_ctx):
    table = make_table(rows())
    ctx = make_ctx("near_duplicates")
    result = run(table, ctx)
    ledger = ctx.ledger.frame()
    assert_accounted(table, result, ledger)
    assert result.get_column("row_id").to_list() == ["t:0", "t:1", "t:3", "t:5"]
    assert ledger.get_column("reason").unique().to_list() == [Reason.NEAR_DUPLICATE.value]
    assert ledger.get_column("kept_row_id").to_list() == ["t:0", "t:0"]
    sims = ledger.get_column("similarity").to_list()
    assert all(0.8 <= s < 1.0 for s in sims)
    assert result.get_column(CLUSTER_COLUMN).to_list() == ["near:0", None, None, None]
    clusters = ctx.outputs["near_duplicate_clusters"]
    assert clusters.schema == pl.Schema(CLUSTER_SCHEMA)
    assert clusters.get_column("row_id").to_list() == ["t:0", "t:2", "t:4"]
    assert clusters.get_column("kept").to_list() == [True, False, False]
    f = ctx.facts
    assert (f["clusters"], f["rows_in_clusters"], f["rows_set_aside"], f["label_conflicts"]) == (1, 3, 2, 0)
    assert (f["bands"], f["rows"]) == (21, 6)
    assert f["expected_recall_at_threshold"] >= 0.99
    assert f["cluster_sizes"] == [{"size": 3, "clusters": 1}]
    # No text values in the facts or the ledger details (personal data rule).
    assert "scooter" not in str(f).lower() and "scooter" not in str(ledger.get_column("detail").to_list()).lower()


@pytest.mark.parametrize("keep, time_column, kept", [
    ("earliest", "opened", "t:2"), ("latest", "opened", "t:4"), ("longest", None, "t:2"), ("first", None, "t:0"),
])
def test_keep_policies(make_table, make_ctx, keep, time_column, kept):
    ctx = make_ctx("near_duplicates")
    config = {"keep": keep} | ({"time_column": time_column} if time_column else {})
    result = run(make_table(rows()), ctx, **config)
    assert kept in result.get_column("row_id").to_list()
    assert set(ctx.ledger.frame().get_column("kept_row_id").to_list()) == {kept}


def test_action_mark_keeps_every_row_and_splitter_keeps_clusters_together(make_table, make_ctx):
    rng = random.Random(2)
    data = []
    for c in range(40):  # 40 clusters of 3 near copies, plus 80 singletons, 4 classes
        words = " ".join(rng.choice("abcdefghij") * rng.randint(2, 6) for _ in range(15))
        for v in range(3):
            data.append({"title": f"c{c}", "body": words + (" x" * v), "label": f"k{c % 4}"})
    for s in range(80):
        data.append({"title": f"s{s}", "body": " ".join(rng.choice("klmnopqrst") * 5 for _ in range(10)) + f" {s}", "label": f"k{s % 4}"})
    table = make_table(data)
    ctx = make_ctx("near_duplicates")
    result = run(table, ctx, action="mark", columns=["body"])
    assert result.height == table.height and ctx.ledger.frame().height == 0
    assert ctx.facts["clusters"] >= 40
    for group in (None, "title"):
        split = assign_splits(result, fractions={"train": 0.6, "validation": 0.2, "test": 0.2}, seed=1,
                              stratify="label", group=group, links=(CLUSTER_COLUMN,))
        tagged = result.with_columns(split.assignment)
        spans = tagged.filter(pl.col(CLUSTER_COLUMN).is_not_null()).group_by(CLUSTER_COLUMN).agg(pl.col("split").n_unique())
        assert spans.get_column("split").max() == 1
        assert set(split.assignment.unique().to_list()) == {"train", "validation", "test"}
        # Every row in exactly one split.
        parts = split_tables(result, split)
        assert sum(p.height for p in parts.values()) == result.height


def test_links_combine_with_user_groups(make_table):
    # Rows 0-1 share a group, rows 1-2 share a cluster: all three must land together.
    table = make_table([{"g": "a", "_cluster": None}, {"g": "a", "_cluster": "near:0"}, {"g": None, "_cluster": "near:0"}]
                       + [{"g": None, "_cluster": None} for _ in range(30)])
    for seed in range(20):
        split = assign_splits(table, fractions={"train": 0.5, "validation": 0.25, "test": 0.25}, seed=seed,
                              stratify=None, group="g", links=("_cluster",))
        assert split.assignment[:3].n_unique() == 1


def test_conflicts_follow_the_exact_duplicate_policies(make_table, make_ctx):
    data = rows()
    data[2]["label"] = "Billing"  # cluster {0: Unlock, 2: Billing, 4: Unlock}
    ctx = make_ctx("near_duplicates")
    run(make_table(data), ctx, conflicts="majority")
    assert ctx.facts["label_conflicts"] == 1
    assert ctx.ledger.frame().get_column("kept_row_id").to_list() == ["t:0", "t:0"]
    ctx = make_ctx("near_duplicates")
    run(make_table(data), ctx, conflicts="set_aside")
    assert ctx.ledger.frame().get_column("reason").to_list() == ["label_conflict"] * 3
    data[4]["label"] = "Lost"  # three labels, tied counts: majority sets the whole cluster aside
    ctx = make_ctx("near_duplicates")
    run(make_table(data), ctx, conflicts="majority")
    assert ctx.ledger.frame().get_column("reason").to_list() == ["label_conflict"] * 3


def test_exhaustive_method_agrees_and_reruns_are_identical(make_table, make_ctx):
    outs = []
    for method in ("minhash_lsh", "exhaustive", "minhash_lsh"):
        ctx = make_ctx("near_duplicates")
        result = run(make_table(rows()), ctx, method=method)
        outs.append((result, ctx.ledger.frame(), ctx.outputs["near_duplicate_clusters"]))
    for a, b in zip(outs[0], outs[1]):
        assert a.equals(b)
    for a, b in zip(outs[0], outs[2]):
        assert a.equals(b)


def test_exhaustive_refuses_large_tables(make_table, make_ctx, monkeypatch):
    import prep.steps.near_duplicates as step

    monkeypatch.setattr(step, "EXHAUSTIVE_MAX_ROWS", 3)
    with pytest.raises(DataError, match="at most 3 rows"):
        run(make_table(rows()), make_ctx("near_duplicates"), method="exhaustive")


@pytest.mark.parametrize("config, key", [
    ({"threshold": 0}, "threshold"), ({"threshold": 1.5}, "threshold"), ({"bands": 4}, "rows"),
    ({"bands": 40, "rows": 5}, "bands"), ({"keep": "latest"}, "time_column"), ({"n": 0}, "n"),
    ({"shingles": "token"}, "shingles"), ({"columns": []}, "columns"),
])
def test_config_errors_name_the_key(config, key):
    with pytest.raises(ConfigError) as info:
        build(Config, config, "near_duplicates")
    assert info.value.path.endswith(key)


def _reference_audit(splits, threshold=0.8, n=5):
    """Plain Python: every row pair across splits, Jaccard of character 5-gram sets."""
    import re

    def grams(text):
        text = re.sub(r"\s+", " ", re.sub(r"[^\w\s]", " ", text.lower())).strip()
        return {text[i:i + n] for i in range(len(text) - n + 1)} if len(text) >= n else ({text} if text else set())

    sets = {k: [grams(" ".join(r)) for r in f.iter_rows()] for k, f in splits.items()}

    def near(a, b):
        return bool(a | b) and len(a & b) / len(a | b) >= threshold

    def pairs(x, y):
        return sum(near(a, b) for a in sets[x] for b in sets[y])

    rows_v = sum(any(near(a, b) for b in sets["train"]) for a in sets["validation"])
    rows_t = sum(any(near(a, b) for b in sets["train"] + sets["validation"]) for a in sets["test"])
    return {"validation~train": pairs("validation", "train"), "test~train": pairs("test", "train"),
            "test~validation": pairs("test", "validation")}, {"validation": rows_v, "test": rows_t}


def test_leakage_audit_counts_cross_split_pairs():
    near = BASE + " sent from my phone"
    splits = {
        "train": pl.DataFrame({"title": ["a", "b", "q"], "body": [BASE, BASE, near]}),
        "validation": pl.DataFrame({"title": ["a", "r"], "body": [BASE, "nothing alike at all here"]}),
        "test": pl.DataFrame({"title": ["a", "zz", "a"], "body": [near, "unrelated words about a refund", BASE]}),
    }
    audit = leakage_audit(splits, ["title", "body"], Settings())
    pairs, rows = _reference_audit(splits)
    assert audit["pairs"] == pairs and audit["rows"] == rows
    assert pairs["test~train"] >= 2 and rows["test"] == 2
    clean = {"train": splits["train"], "validation": splits["validation"][1:], "test": splits["test"][1:2]}
    assert leakage_audit(clean, ["title", "body"], Settings())["pairs"] == {"validation~train": 0, "test~train": 0, "test~validation": 0}
