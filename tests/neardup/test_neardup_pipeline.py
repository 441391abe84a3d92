"""The near-duplicate step in the demo pipeline: accounting, duplicates.parquet, clusters kept in
one split, and the leakage audit (0 with the step, the real count without it)."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import polars as pl
import pytest

from prep.pipeline import load_pipeline
from prep.run import run_pipeline, step_phase

DEMO = Path(__file__).resolve().parents[2] / "sample_inputs" / "pipeline.yaml"


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    pipeline = load_pipeline(DEMO)
    assert "near_duplicates" in [s.name for s in pipeline.steps]
    # Only the steps before the split matter here; the after-split steps (a baseline model, label
    # checks) cost most of a demo run and touch neither the clusters nor the audit.
    pipeline = dataclasses.replace(pipeline, steps=tuple(s for s in pipeline.steps if step_phase(s.name) == "table"))
    without = dataclasses.replace(pipeline, steps=tuple(s for s in pipeline.steps if s.name != "near_duplicates"))
    base = tmp_path_factory.mktemp("neardup")
    return {
        "with": (run_pipeline(pipeline, out=base / "with"), base / "with"),
        "without": (run_pipeline(without, out=base / "without"), base / "without"),
    }


def test_audit_is_zero_after_the_step_and_real_without_it(runs):
    card_with = runs["with"][0].card
    card_without = runs["without"][0].card
    audit_with = _audit(card_with)
    audit_without = _audit(card_without)
    assert audit_with["pairs"] == {"validation~train": 0, "test~train": 0, "test~validation": 0}
    assert audit_with["rows"] == {"validation": 0, "test": 0}
    # The demo plants ~3% near copies: left in, some land across splits.
    assert sum(audit_without["pairs"].values()) > 0 and sum(audit_without["rows"].values()) > 0


def _audit(card):
    # The card helper renders RunFacts.extra["near_duplicate_audit"]; find it wherever it sits.
    stack = [card]
    while stack:
        node = stack.pop()
        if isinstance(node, dict):
            if {"pairs", "rows", "threshold", "method"} <= set(node):
                return node
            stack.extend(node.values())
        elif isinstance(node, list):
            stack.extend(node)
    raise AssertionError("no near-duplicate audit in the card")


def test_duplicates_parquet_and_ledger(runs):
    _, out = runs["with"]
    dup = pl.read_parquet(out / "duplicates.parquet")
    assert not (out / "exact_duplicate_clusters.parquet").exists()
    assert set(dup.get_column("kind").unique()) == {"exact", "near"}
    assert dup.get_column("cluster_id").n_unique() == dup.select("cluster_id", "kind").unique().height
    ledger = pl.read_parquet(out / "set_aside.parquet")
    near = ledger.filter(pl.col("reason") == "near_duplicate")
    assert near.height > 0 and near.get_column("kept_row_id").null_count() == 0
    # Every near member set aside as near_duplicate is in duplicates.parquet, not kept.
    members = dup.filter(pl.col("kind") == "near")
    assert set(near.get_column("row_id")) <= set(members.filter(~pl.col("kept")).get_column("row_id"))
    # Accounting: every row read is in exactly one split or the ledger.
    splits = [pl.read_parquet(out / f"{n}.parquet") for n in ("train", "validation", "test")]
    ids = pl.concat([s.get_column("row_id") for s in splits] + [ledger.get_column("row_id")])
    assert ids.len() == ids.n_unique() == runs["with"][0].rows_read
    assert all("_cluster" not in s.columns for s in splits)
