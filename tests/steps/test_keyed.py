"""Keyed steps (``KEYED`` in the module; contract in prep.steps.base) cut into partitions equal the
step's ``apply`` on the whole table.

The Dask engine makes each partition's keys with ``compact=True`` (digests instead of texts), runs
``decide`` over the concatenated keys and carries the plan out per partition. This replays that in
one process, with uneven partitions (an empty one and one of a single row), on rows that hit the
corners of the digests: null against "" against a missing column value, rows whose compared
columns are all empty, case variants, texts that differ only in which column holds them. The
reference is ``apply`` on the whole table: the same rows out, in order, the same columns, the same
ledger rows in the same order, the same facts and extra outputs."""

from __future__ import annotations

import random

import numpy as np
import polars as pl
import pytest

from prep.config import build
from prep.ledger import Ledger
from prep.steps import exact_duplicates, near_duplicates, rare_classes

CUTS = [0, 7, 7, 20, 21, 60]  # partition bounds inside the table; the last partition runs to the end

BASE = "my scooter will not unlock at the central station dock and the app shows an error"


def _rows() -> list[dict]:
    rng = random.Random(11)
    rows = []
    for i in range(90):
        kind = i % 9
        title = ["Unlock", "UNLOCK", "unlock", None, "", "Refund", "x", "Re: Unlock", None][kind]
        body = [BASE, BASE, BASE + " thanks", "", None, "money back please for ride " + str(i % 4), "x", BASE, None][kind]
        if i % 13 == 0:  # the same text split between the two columns differently
            title, body = "ab", "c"
        if i % 17 == 0:
            title, body = "a", "bc"
        rows.append({
            "title": title,
            "body": body,
            "label": rng.choice(["Unlock", "Unlock", "Refund", None, "Tiny"]) if i % 11 else "Rare one",
            "opened": rng.choice(["2025-01-03", "03/01/2025 10:00", None, "garbage", "2025-01-02T09:00:00Z"]),
        })
    return rows


def _run_cut(module, table, config, make_ctx):
    """(table out, ledger, facts, outputs) as the Dask engine computes them."""
    bounds = [*CUTS, table.height]
    parts = [table.slice(a, b - a) for a, b in zip(bounds[:-1], bounds[1:])]
    worker = make_ctx(module.NAME)
    keys = pl.concat([module.keys(p, config, worker, compact=True) for p in parts])
    text_columns = [c for c in keys.columns if keys.schema[c] == pl.String and c not in ("row_id", "source", "_label")]
    assert not text_columns, f"compact keys hold text: {text_columns}"
    ledger = Ledger()
    ctx = make_ctx(module.NAME, ledger=ledger)
    if getattr(module, "FETCHES_TEXTS", False):
        fetched = []

        def fetch(rows):
            fetched.append(len(rows))
            whole = near_duplicates.fetch_texts(table, config, worker, np.arange(table.height))
            return whole.gather(rows)

        plan = module.decide(keys, config, ctx, fetch=fetch)
    else:
        plan = module.decide(keys, config, ctx)
    out = pl.concat(
        [plan.part(a, b - a).carry_out(p) for p, a, b in zip(parts, bounds[:-1], bounds[1:])], how="vertical"
    )
    return out, ledger.frame(), ctx.facts, ctx.outputs


def _run_whole(module, table, config, make_ctx):
    ledger = Ledger()
    ctx = make_ctx(module.NAME, ledger=ledger)
    out = module.apply(table, config, ctx)
    return out, ledger.frame(), ctx.facts, ctx.outputs


CASES = [
    (exact_duplicates, {"keep": "first", "conflicts": "majority"}),
    (exact_duplicates, {"keep": "latest", "time_column": "opened", "conflicts": "set_aside"}),
    (exact_duplicates, {"keep": "earliest", "time_column": "opened", "conflicts": "keep_first", "case_sensitive": True}),
    (exact_duplicates, {"columns": ["body"]}),
    (rare_classes, {"policy": "set_aside", "min_rows": 10}),
    (rare_classes, {"policy": "merge", "merge_into": "Unlock", "min_rows": 10}),
    (rare_classes, {"policy": "merge", "merge_into": "Other", "min_rows": 10}),
    (rare_classes, {"policy": "train_only", "min_rows": 10}),
    (near_duplicates, {"threshold": 0.8}),
    (near_duplicates, {"threshold": 0.7, "keep": "longest", "conflicts": "set_aside"}),
    (near_duplicates, {"threshold": 0.8, "keep": "latest", "time_column": "opened", "action": "mark"}),
    (near_duplicates, {"threshold": 0.8, "method": "exhaustive", "similarity": "edit"}),
]


@pytest.mark.parametrize("module, settings", CASES, ids=[f"{m.NAME}-{i}" for i, (m, _) in enumerate(CASES)])
def test_keyed_step_on_partitions_equals_apply(module, settings, make_table, make_ctx):
    table = make_table(_rows())
    if module is rare_classes and settings["policy"] == "train_only":  # an existing mark is OR-ed
        table = table.with_columns((pl.col("source_row") % 5 == 0).alias(rare_classes.TRAIN_ONLY_COLUMN))
    config = build(module.Config, settings, module.NAME)
    whole = _run_whole(module, table, config, make_ctx)
    cut = _run_cut(module, table, config, make_ctx)
    assert cut[0].equals(whole[0]) and cut[0].columns == whole[0].columns
    assert cut[1].equals(whole[1])
    assert cut[2] == whole[2]
    assert sorted(cut[3]) == sorted(whole[3])
    for name in whole[3]:
        assert cut[3][name].equals(whole[3][name]), name
    # The case does test something: rows went to the ledger or a column changed.
    assert whole[1].height or whole[0].columns != table.columns or not whole[0].equals(table)


def test_near_duplicates_fetches_only_texts_of_rows_it_verifies(make_table, make_ctx):
    # 200 distinct unrelated texts and one near pair, signed ahead (as the Dask engine's workers
    # do): the search fetches the texts of that pair only, to verify it, not those of every row.
    from prep.neardup import search

    rng = random.Random(3)
    words = ["alpha", "brake", "cable", "dock", "ebike", "fare", "gear", "helmet", "invoice", "journey"]
    rows = [{"title": None, "body": " ".join(rng.choice(words) + str(rng.randrange(10**6)) for _ in range(8)), "label": "A"}
            for _ in range(200)]
    rows.append({"title": None, "body": BASE, "label": "A"})
    rows.append({"title": "Re:", "body": BASE, "label": "A"})
    table = make_table(rows)
    config = build(near_duplicates.Config, {"threshold": 0.8}, near_duplicates.NAME)
    worker = make_ctx(near_duplicates.NAME)
    keys = near_duplicates.keys(table, config, worker, compact=True)
    fetched = []

    def fetch(at):
        fetched.extend(np.asarray(at).tolist())
        return near_duplicates.fetch_texts(table, config, worker, np.asarray(at))

    ctx = make_ctx(near_duplicates.NAME)
    search.remember_signed([near_duplicates.sign_ahead(table.slice(a, 70), config, ["title", "body"]) for a in (0, 70, 140)])
    try:
        plan = near_duplicates.decide(keys, config, ctx, fetch=fetch)
    finally:
        search.forget_keys()
    assert plan.rows_out(table.height) == table.height - 1
    assert set(fetched) == {200, 201}
    # Without keys signed ahead the search must sign every text, so it fetches them all.
    fetched.clear()
    near_duplicates.decide(keys, config, make_ctx(near_duplicates.NAME), fetch=fetch)
    search.forget_keys()
    assert set(fetched) == set(range(table.height))


def _schema_file(folder, *, frame_unique=None, missing_column=False):
    """A pandera schema written as the step reads it: element-wise checks, a unique column, and
    optionally a uniqueness constraint over two columns or a required column the table lacks."""
    import pandera.polars as pa

    from prep.steps.schema import dump_schema

    columns = {
        "row_id": pa.Column(str, unique=True),
        "title": pa.Column(str, nullable=True, unique=True, checks=[pa.Check.str_length(0, 12)]),
        "body": pa.Column(str, nullable=True, checks=[pa.Check.str_length(1, 70)]),
        "label": pa.Column(str, nullable=True, checks=[pa.Check.isin(["Unlock", "Refund", "Tiny", "Rare one"])]),
    }
    if missing_column:
        columns["channel"] = pa.Column(str)
    schema = pa.DataFrameSchema(columns, unique=frame_unique, name="t")
    (folder / "schema.yaml").write_text(dump_schema(schema), encoding="utf-8")
    return "schema.yaml"


@pytest.mark.parametrize("frame_unique", [None, ["title", "body"]])
def test_schema_from_keys_on_partitions_equals_apply(frame_unique, make_table, make_ctx, tmp_path):
    # Reference: the step's apply, i.e. pandera over the whole table. The keys carry pandera's
    # one-row failures per partition and digests for the uniqueness constraints, which pandera's
    # polars backend reports for every occurrence of a repeated value, equal nulls included.
    from prep.steps import schema

    table = make_table(_rows())
    config = build(schema.Config, {"file": _schema_file(tmp_path, frame_unique=frame_unique), "max_failure_share": 1.0}, schema.NAME)
    assert schema.can_key(config, make_ctx(schema.NAME))
    whole = _run_whole(schema, table, config, make_ctx)
    cut = _run_cut(schema, table, config, make_ctx)
    assert whole[1].height > 10 and "field_uniqueness" in " ".join(whole[1]["detail"].to_list())
    assert cut[0].equals(whole[0]) and cut[1].equals(whole[1]) and cut[2] == whole[2]
    assert cut[3]["schema_failures"].equals(whole[3]["schema_failures"])


def test_schema_from_keys_fails_like_apply_when_the_table_fails(make_table, make_ctx, tmp_path):
    from prep.errors import DataError
    from prep.steps import schema

    table = make_table(_rows())
    config = build(schema.Config, {"file": _schema_file(tmp_path, missing_column=True)}, schema.NAME)
    messages = []
    for run in (_run_whole, _run_cut):
        with pytest.raises(DataError) as info:
            run(schema, table, config, make_ctx)
        messages.append(str(info.value))
    assert messages[0] == messages[1] and "column `channel` is missing" in messages[0]


def test_schema_with_coerced_unique_column_is_not_keyed(make_ctx, tmp_path):
    # Digests are of the values as they are; pandera compares coerced values: no keys then.
    import pandera.polars as pa

    from prep.steps import schema
    from prep.steps.schema import dump_schema

    (tmp_path / "s.yaml").write_text(dump_schema(pa.DataFrameSchema({"source_row": pa.Column(int, unique=True, coerce=True)})), encoding="utf-8")
    assert not schema.can_key(build(schema.Config, {"file": "s.yaml"}, schema.NAME), make_ctx(schema.NAME))
