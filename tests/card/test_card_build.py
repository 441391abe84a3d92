"""Tests for ``prep.card.build_card`` and the published schema.

References used:
- JSON Schema draft 2020-12 through the ``jsonschema`` library's Draft202012Validator
  (general-purpose reference implementation).
- scikit-learn ``compute_class_weight("balanced")`` for the class weights in the card.
- RFC 8259 (JSON): the card must serialise with NaN/Infinity refused (``allow_nan=False``),
  since those are not JSON.
"""

from __future__ import annotations

import json

import numpy as np
import polars as pl
import pytest
from jsonschema import Draft202012Validator
from sklearn.utils.class_weight import compute_class_weight

from card_facts import SECRET_MARKERS, ledger_frame, split_frame
from prep.card import CARD_VERSION, SECTION_ORDER, CardSchemaError, build_card, card_schema, render_markdown, validate_card
from prep.errors import PrepError
from prep.facts import SourceFacts


def dumps(card) -> str:
    return json.dumps(card, sort_keys=True, ensure_ascii=False, allow_nan=False)


def schema_errors(card) -> list[str]:
    validator = Draft202012Validator(card_schema())
    return [f"{e.json_path}: {e.message}" for e in validator.iter_errors(card)]


# --- schema ----------------------------------------------------------------------------------


def test_schema_is_a_valid_draft_2020_12_schema():
    schema = card_schema()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    Draft202012Validator.check_schema(schema)
    assert schema["properties"]["card_version"] == {"const": CARD_VERSION} == {"const": "1.3"}
    # The schema and the builder agree on the sections.
    assert set(schema["required"]) == set(schema["properties"]) == set(SECTION_ORDER)


def test_card_validates_against_schema(make_facts):
    card = build_card(make_facts())
    assert schema_errors(card) == []
    validate_card(card)  # the packaged helper agrees


@pytest.mark.parametrize(
    "breakage",
    [
        lambda c: c.pop("leakage"),
        lambda c: c.update(card_version="0.9"),
        lambda c: c.update(unexpected_section={}),
        lambda c: c["accounting"].update(balanced="yes"),
        lambda c: c["imbalance"]["overall"].update(pielou_evenness=1.2),
        lambda c: c["sources"]["items"][0].update(sha256="not-a-hash"),
    ],
    ids=["missing-section", "wrong-version", "extra-section", "wrong-type", "evenness-above-1", "bad-sha"],
)
def test_schema_rejects_broken_cards(make_facts, breakage):
    card = build_card(make_facts())
    breakage(card)
    assert schema_errors(card)
    with pytest.raises(CardSchemaError, match="breaks its schema"):
        validate_card(card)


# --- structure and determinism ---------------------------------------------------------------


def test_top_level_keys_in_order(make_facts):
    card = build_card(make_facts())
    assert list(card) == list(SECTION_ORDER)
    assert card["card_version"] == "1.3"
    assert card["task"] == {"kind": "single-label classification", "label_column": "label", "text_columns": ["title", "body"]}


def test_two_builds_are_identical(make_facts):
    first, second = build_card(make_facts()), build_card(make_facts())
    assert dumps(first) == dumps(second)
    assert render_markdown(first) == render_markdown(second)


def test_card_does_not_depend_on_row_order_within_a_split(make_facts):
    facts = make_facts()
    shuffled = make_facts(splits={n: f.reverse() for n, f in facts.splits.items()})
    assert dumps(build_card(facts)) == dumps(build_card(shuffled))


def test_card_is_plain_json(make_facts):
    card = build_card(make_facts())
    assert json.loads(dumps(card)) == card


# --- no data in the card ---------------------------------------------------------------------


def test_no_row_values_reach_the_card(make_facts):
    facts = make_facts()
    card = build_card(facts)
    text = dumps(card) + render_markdown(card)
    for marker in SECRET_MARKERS:
        assert marker in facts.splits["train"].write_csv()  # the marker is really in the rows
        assert marker not in text


def test_absolute_source_path_is_reduced_to_its_file_name(make_facts, tmp_path):
    facts = make_facts()
    absolute = str(tmp_path / "exports" / "desk.csv")
    windows = "C:\\exports\\web.jsonl"  # a drive-letter path, as written on Windows
    facts.sources[0] = SourceFacts("desk", absolute, "csv", None, "utf-8", 19, 0, facts.sources[0].sha256, 10)
    facts.sources[1] = SourceFacts("web", windows, "jsonl", None, "utf-8", 1, 1, facts.sources[1].sha256, 10)
    card = build_card(facts)
    assert [s["path"] for s in card["sources"]["items"]] == ["desk.csv", "web.jsonl"]
    text = dumps(card) + render_markdown(card)
    assert str(tmp_path) not in text and "C:" not in text


def test_unserialisable_step_fact_is_a_clear_error_without_the_value(make_facts):
    facts = make_facts()
    facts.steps[2].facts["ratio"] = float("nan")
    with pytest.raises(PrepError, match=r"step 2 \(`exact_duplicates`\)") as info:
        build_card(facts)
    assert "nan" not in str(info.value).lower()


# --- sections --------------------------------------------------------------------------------


def test_classes_and_counts_per_split(make_facts):
    card = build_card(make_facts())
    assert card["classes"]["names"] == ["app", "billing", "unlock"]
    assert card["classes"]["counts"] == [
        {"class": "app", "train": 1, "validation": 1, "test": 0, "total": 2},
        {"class": "billing", "train": 6, "validation": 1, "test": 1, "total": 8},
        {"class": "unlock", "train": 3, "validation": 1, "test": 1, "total": 5},
    ]
    assert card["classes"]["absent_from"] == {"app": ["test"]}


def test_imbalance_and_class_weights(make_facts):
    facts = make_facts()
    card = build_card(facts)
    train = card["imbalance"]["by_split"]["train"]
    assert train["imbalance_ratio"] == 6.0
    assert (train["largest_class"], train["smallest_class"]) == ("billing", "app")
    assert card["imbalance"]["by_split"]["test"]["imbalance_ratio"] is None  # app has 0 rows in test
    assert card["imbalance"]["by_split"]["validation"]["pielou_evenness"] == 1.0
    # Reference: scikit-learn compute_class_weight("balanced") on the train labels.
    y = np.array(facts.splits["train"].get_column("label").to_list())
    classes = np.unique(y)
    expected = dict(zip(classes.tolist(), compute_class_weight("balanced", classes=classes, y=y).tolist()))
    assert card["class_weights"]["weights"] == pytest.approx(expected, abs=1e-6)


def test_recommended_averaging(make_facts):
    imbalanced = build_card(make_facts())
    assert imbalanced["recommended_averaging"]["average"] == "macro"
    assert "common practice, no source" in imbalanced["recommended_averaging"]["threshold_source"]
    facts = make_facts()
    balanced_splits = dict(facts.splits, train=split_frame("train", ["app", "billing", "unlock"] * 3))
    balanced = build_card(make_facts(splits=balanced_splits))
    assert balanced["recommended_averaging"]["average"] == "micro"


def test_set_aside_totals_follow_run_order(make_facts):
    card = build_card(make_facts())
    aside = card["set_aside"]
    assert aside["total"] == 5
    assert [e["step"] for e in aside["by_step"]] == ["read", "missing", "exact_duplicates"]
    assert aside["by_step"][2] == {"step": "exact_duplicates", "rows": 3, "by_reason": {"exact_duplicate": 2, "label_conflict": 1}}
    assert aside["by_reason"] == {"exact_duplicate": 2, "label_conflict": 1, "missing_label": 1, "unreadable": 1}
    assert card["cautions"]["label_conflict_rows"] == 1


def test_steps_sources_splits_and_provenance(make_facts):
    facts = make_facts()
    card = build_card(facts)
    assert [s["name"] for s in card["steps"]] == ["normalise", "missing", "exact_duplicates"]
    assert card["steps"][1] == {"name": "missing", "params": {"label": "set_aside"}, "rows_in": 19, "rows_out": 18,
                                "set_aside": {"missing_label": 1}, "facts": {}}
    assert card["sources"]["totals"] == {"sources": 2, "rows_read": 20, "rows_unreadable": 1, "bytes": 2147}
    assert card["sources"]["items"][1]["compression"] == "gzip"
    train = card["splits"]["files"]["train"]
    assert train["rows"] == 10 and train["file"] == "train.parquet"
    assert train["columns"][0] == {"name": "row_id", "type": "String"}
    assert card["splits"]["notes"] == facts.split_notes
    assert card["provenance"] == {
        "pipeline_sha256": facts.pipeline_sha256, "tool": "prep", "tool_version": "0.1.0", "seed": 7,
        "inputs": [
            {"name": "desk", "path": "exports/desk.csv", "sha256": facts.sources[0].sha256, "bytes": 2048},
            {"name": "web", "path": "exports/web.jsonl.gz", "sha256": facts.sources[1].sha256, "bytes": 99},
        ],
    }


def test_label_merges_from_normalise(make_facts):
    card = build_card(make_facts())
    assert card["label_merges"] == {
        "status": "reported", "merges": [{"class": "billing", "spellings": {"Billing": 1, "billing": 6}}], "omitted": [],
    }
    facts = make_facts()
    without = build_card(make_facts(steps=facts.steps[1:]))
    assert without["label_merges"] == {"status": "not run"}


def test_accounting_balances_and_detects_a_gap(make_facts):
    card = build_card(make_facts())
    assert card["accounting"] == {
        "rows_read": 20, "rows_per_split": {"train": 10, "validation": 3, "test": 2},
        "rows_in_splits": 15, "rows_set_aside": 5, "balanced": True,
    }
    assert build_card(make_facts(rows_read=21))["accounting"]["balanced"] is False


def test_leakage_is_reported_not_enforced(make_facts):
    facts = make_facts()
    assert build_card(facts)["leakage"]["clean"] is True
    leaky_test = facts.splits["test"].with_columns(
        pl.when(pl.col("row_id") == pl.col("row_id").first()).then(pl.lit("QUOKKAFINCH-7731   TRAIN 0")).otherwise(pl.col("title")).alias("title"),
        pl.when(pl.col("row_id") == pl.col("row_id").first())
        .then(pl.lit("wanda quillfeather wrote from rider.unique@example.com about case train 0"))
        .otherwise(pl.col("body"))
        .alias("body"),
    )
    card = build_card(make_facts(splits=dict(facts.splits, test=leaky_test)))
    leak = card["leakage"]
    assert leak["clean"] is False and leak["total"] == 2 and leak["texts"] == 1
    assert leak["pairs"][1] == {"splits": ["train", "test"], "rows_a": 1, "rows_b": 1, "texts": 1}
    assert schema_errors(card) == []


def test_later_sections_and_notice(make_facts):
    card = build_card(make_facts())
    for key in ("near_duplicates", "redaction", "languages"):
        assert card[key] == {"status": "not run"}
    assert "no replacement" in card["personal_data_notice"]
    assert card["cautions"]["redaction_ran"] is False


def test_rare_classes(make_facts):
    card = build_card(make_facts())
    # app is absent from test; with fractions 0.8/0.1/0.1 a class needs 7 rows to reach every split
    # (prep.split.min_rows_for_all_splits), so unlock (5) and app (2) are rare, billing (8) is not.
    assert card["cautions"]["rare_classes"]["min_rows_for_all_splits"] == 7
    assert card["cautions"]["rare_classes"]["classes"] == ["app", "unlock"]


def test_empty_run_still_builds_a_valid_card(make_facts):
    empty = split_frame("train", [])
    facts = make_facts(
        splits={"train": empty, "validation": empty, "test": empty},
        ledger=ledger_frame([]),
        rows_read=0,
        steps=[],
        sources=[],
    )
    card = build_card(facts)
    assert schema_errors(card) == []
    assert card["classes"]["names"] == []
    assert card["imbalance"]["overall"]["imbalance_ratio"] is None
    assert card["recommended_averaging"]["average"] == "macro"
    assert card["accounting"]["balanced"] is True
    assert render_markdown(card).endswith("\n")
