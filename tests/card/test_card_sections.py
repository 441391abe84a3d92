"""The card sections filled from later steps' facts (the facts contract), from the runner's extras,
and the per-class statistics: tested with synthetic facts that follow the contract.

References used:
- JSON Schema draft 2020-12 through the ``jsonschema`` library (general-purpose reference).
- Text lengths and missing counts are checked against values counted by hand / in plain Python.
"""

from __future__ import annotations

import polars as pl
import pytest
from jsonschema import Draft202012Validator

from card_facts import SECRET_MARKERS, split_frame
from prep.card import build_card, card_schema, render_markdown
from prep.card import stats
from prep.card.build import STEP_FACT_KEYS, STEP_SECTIONS
from prep.facts import StepFacts

NEAR = {
    "method": "minhash_lsh", "shingles": {"kind": "char", "n": 5}, "threshold": 0.8, "permutations": 128,
    "signing": "one_permutation",
    "bands": 16, "rows": 8, "expected_recall_at_threshold": 0.97, "candidates": 40, "verified_pairs": 12,
    "clusters": 5, "rows_in_clusters": 14, "rows_set_aside": 9, "label_conflicts": 2,
    "cluster_sizes": [{"size": 2, "clusters": 3}, {"size": 4, "clusters": 2}], "action": "set_aside", "keep": "first",
}
REDACT = {
    "kinds": ["email", "phone"], "placeholders": {"email": "<EMAIL>", "phone": "<PHONE>"},
    "counts": {"email": 7, "phone": 3}, "rows_changed": 8, "columns": ["title", "body"],
}
LANGUAGE = {"column": "language", "backend": "langdetect", "min_chars": 20, "counts": {"en": 12, "de": 2, "und": 1},
            "too_short": 1, "keep": None, "rows_set_aside": 0}
BASELINE = {
    "model": "tf-idf + logistic regression", "features": {"analyzer": "word", "ngram_range": [1, 2]},
    "max_train_rows": 50000, "sampled": False, "seed": 7,
    "metrics": {s: {"accuracy": 0.8, "balanced_accuracy": 0.7, "macro_f1": 0.65,
                    "per_class_f1": {"app": 0.5, "billing": 0.9, "unlock": 0.55}} for s in ("validation", "test")},
    "confusion": {s: {"labels": ["app", "billing", "unlock"], "matrix": [[1, 0, 0], [0, 1, 0], [0, 0, 1]]}
                  for s in ("validation", "test")},
    "note": "A reference point, not a tuned model.",
}
SUSPECT = {"folds": 5, "threshold_rule": "per-class mean self-confidence (confident learning)", "flagged": 2,
           "set_aside": 0, "policy": "mark", "noise": [{"given": "app", "suggested": "billing", "rows": 2}]}


def schema_errors(card) -> list[str]:
    return [f"{e.json_path}: {e.message}" for e in Draft202012Validator(card_schema()).iter_errors(card)]


def with_language(facts):
    langs = {"train": ["en"] * 8 + ["de", None], "validation": ["en", "en", "de"], "test": ["en", "en"]}
    return {s: f.with_columns(pl.Series("language", langs[s], dtype=pl.String)) for s, f in facts.splits.items()}


@pytest.fixture
def full_facts(make_facts):
    base = make_facts()
    steps = list(base.steps) + [
        StepFacts("redact", {"kinds": ["email", "phone"]}, 15, 15, {}, REDACT),
        StepFacts("language", {"min_chars": 20}, 15, 15, {}, LANGUAGE),
        StepFacts("near_duplicates", {"threshold": 0.8}, 15, 15, {}, NEAR),
        StepFacts("baseline", {}, 15, 15, {}, BASELINE),
        StepFacts("suspect_labels", {}, 15, 15, {}, SUSPECT),
    ]
    extra = {
        "near_duplicate_audit": {"threshold": 0.8, "method": "minhash_lsh",
                                 "pairs": {"validation~train": 1, "test~train": 0, "test~validation": 0},
                                 "rows": {"validation": 1, "test": 0}},
        "missing_by_source": {"definition": "null or blank", "tokens": ["n/a"],
                              "by_source": [{"source": "desk", "column": "title", "rows": 19, "missing": 2},
                                            {"source": "desk", "column": "body", "rows": 19, "missing": 0}]},
    }
    return make_facts(steps=steps, splits=with_language(base), extra=extra)


def test_every_step_section_reads_not_run_without_its_step(make_facts):
    facts = make_facts()
    card = build_card(make_facts(steps=[s for s in facts.steps if s.name != "exact_duplicates"]))
    for key in STEP_SECTIONS:
        assert card[key] == {"status": "not run"}, key
    assert card["leakage"]["near_duplicate_audit"] == {"status": "not run"}
    assert card["missing_values"] == {"status": "not recorded"}
    assert schema_errors(card) == []
    md = render_markdown(card)
    for line in ("Near duplicates: not run.", "Redaction: not run.", "Language detection: not run.",
                 "Baseline: not run.", "Suspect-label check: not run.", "Near-duplicate leakage audit: not run.",
                 "Exact duplicates: not run."):
        assert line in md


def test_step_sections_carry_the_contract_keys(full_facts):
    card = build_card(full_facts)
    assert schema_errors(card) == []
    near = card["near_duplicates"]
    assert near["status"] == "ran" and near["step"] == "near_duplicates"
    assert {k: near[k] for k in STEP_FACT_KEYS["near_duplicates"]} == NEAR
    assert card["redaction"]["counts"] == {"email": 7, "phone": 3}
    assert "best-effort" in card["redaction"]["best_effort"]
    assert card["baseline"]["metrics"]["test"]["macro_f1"] == 0.65
    assert card["suspect_labels"]["set_aside"] == 0 and card["suspect_labels"]["flagged"] == 2
    assert card["leakage"]["near_duplicate_audit"]["pairs"]["validation~train"] == 1
    assert card["exact_duplicates"]["status"] == "ran" and card["exact_duplicates"]["groups"] == 2
    c = card["cautions"]
    assert c["values_redacted"] == 10 and c["near_duplicate_label_conflicts"] == 2 and c["suspect_labels_flagged"] == 2
    # Languages in the splits: en 12, de 2, und 1 (the null): de and und have fewer than 30 rows.
    assert c["languages_with_few_rows"]["languages"] == ["de", "en", "und"]


def test_missing_contract_keys_are_null_and_the_card_still_renders(make_facts):
    facts = make_facts()
    partial = [*facts.steps, StepFacts("near_duplicates", {}, 15, 15, {}, {"method": "exhaustive"}),
               StepFacts("redact", {}, 15, 15, {}, {}), StepFacts("baseline", {}, 15, 15, {}, {"metrics": {}}),
               StepFacts("language", {}, 15, 15, {}, {}), StepFacts("suspect_labels", {}, 15, 15, {}, {})]
    card = build_card(make_facts(steps=partial))
    assert card["near_duplicates"]["threshold"] is None and card["near_duplicates"]["method"] == "exhaustive"
    assert card["languages"]["mix"] is None
    assert schema_errors(card) == []
    md = render_markdown(card)
    assert "**Jaccard threshold:** not provided" in md


def test_language_mix_per_split_and_class(full_facts):
    mix = build_card(full_facts)["languages"]["mix"]
    assert mix["by_split"] == {"train": {"de": 1, "en": 8, "und": 1}, "validation": {"de": 1, "en": 2}, "test": {"en": 2}}
    # Counted by hand from with_language(): billing rows are train 0-5, validation 0, test 0.
    assert mix["by_class"]["billing"] == {"en": 8}
    assert mix["by_class"]["app"] == {"de": 1, "und": 1}


def test_metric_noise_uses_the_support_of_each_split(make_facts):
    card = build_card(make_facts())
    noise = card["metric_noise"]
    val = {r["class"]: r for r in noise["by_split"]["validation"]}
    test = {r["class"]: r for r in noise["by_split"]["test"]}
    assert val["billing"]["support"] == 1 and test["app"]["support"] == 0
    assert test["app"]["width_at_recall_0_5"] is None
    assert val["billing"]["width_at_recall_0_5"] == pytest.approx(stats.wilson_width(0.5, 1), abs=1e-6)
    assert "Wilson" in noise["source"] and noise["confidence"] == 0.95


def test_imbalance_degree_in_every_balance_block(make_facts):
    card = build_card(make_facts())
    assert card["imbalance"]["imbalance_degree_distance"] == "hellinger"
    # train counts app 1, billing 6, unlock 3 (n = 10, K = 3): app and unlock are below 10/3, m = 2.
    value = card["imbalance"]["by_split"]["train"]["imbalance_degree"]
    assert value == pytest.approx(stats.imbalance_degree({"a": 1, "b": 6, "u": 3}), abs=1e-6)
    assert 1.0 < value <= 2.0
    assert card["imbalance"]["by_split"]["validation"]["imbalance_degree"] == 0.0


def test_label_merges_keep_only_classes_in_the_splits(make_facts):
    facts = make_facts()
    facts.steps[0].facts["label_merges"] = [
        {"class": "billing", "spellings": {"Billing": 1, "billing": 6}},
        {"class": "n/a", "spellings": {"N/A": 2, "n/a": 5}},
    ]
    merges = build_card(facts)["label_merges"]
    assert [m["class"] for m in merges["merges"]] == ["billing"]
    assert merges["omitted"] == ["n/a"]


def test_text_length_by_class_counted_by_hand():
    frame = pl.DataFrame({"label": ["a", "a", "a", "b", None], "title": ["xx", None, "é", "abcd", "zzz"],
                          "body": ["y", "1234", "", None, "q"]})
    rows = stats.text_length_by_class([frame], "label", ["title", "body"])
    # a: lengths 3, 4, 1 (code points: "é" is one) -> sorted 1, 3, 4; b: 4. Null label skipped.
    assert rows[0] == {"class": "a", "rows": 3, "min": 1, "p10": 1, "p25": 1, "median": 3, "p75": 4, "p90": 4,
                       "max": 4, "mean": 2.7}
    assert rows[1]["class"] == "b" and rows[1]["median"] == 4


def test_missing_by_source_counted_by_hand():
    table = pl.DataFrame({"source": ["s1", "s1", "s2", "s2", "s2"],
                          "body": ["ok", "  N/A ", None, "\u200b ", "fine"], "label": ["x", "-", "y", "", "z"]})
    got = stats.missing_by_source(table, ["body", "label"], ["n/a", "-"], " \u200b")
    assert got == [
        {"source": "s1", "column": "body", "rows": 2, "missing": 1},
        {"source": "s1", "column": "label", "rows": 2, "missing": 1},
        {"source": "s2", "column": "body", "rows": 3, "missing": 2},
        {"source": "s2", "column": "label", "rows": 3, "missing": 1},
    ]


def test_no_row_values_in_the_full_card(full_facts):
    card = build_card(full_facts)
    text = str(card) + render_markdown(card)
    for marker in SECRET_MARKERS:
        assert marker not in text


def test_pipeline_without_any_optional_step_validates(make_facts):
    facts = make_facts()
    only_split = make_facts(steps=[], splits={s: split_frame(s, f.get_column("label").to_list()) for s, f in facts.splits.items()})
    card = build_card(only_split)
    assert schema_errors(card) == []
    assert card["label_merges"] == {"status": "not run"}


def test_cluster_sizes_grouped_into_ranges_keep_every_cluster():
    # Many distinct sizes: 2..5 one by one, then 1-2-5 ranges; every cluster counted exactly once.
    from prep.card.document import MAX_SINGLE_SIZES, cluster_size_groups

    exact = [{"size": s, "clusters": s % 7 + 1} for s in range(2, 40)]
    near = [{"size": s, "clusters": 1} for s in (2, 3, 11, 20, 21, 999, 1000, 1001, 6965)]
    card = {"exact_duplicates": {"cluster_sizes": exact}, "near_duplicates": {"cluster_sizes": near}}
    groups = cluster_size_groups(card)
    assert [g[0] for g in groups] == ["2", "3", "4", "5", "6-10", "11-20", "21-50", "501-1,000", "1,001-2,000", "5,001-10,000"]
    assert sum(g[3] for g in groups) == sum(e["clusters"] for e in exact)
    assert sum(g[4] for g in groups) == sum(e["clusters"] for e in near)
    assert (groups[0][1], groups[-1][2]) == (2, 6965)
    # Few sizes: one row per size, as before.
    few = {"exact_duplicates": {"cluster_sizes": exact[:MAX_SINGLE_SIZES]}}
    assert [g[0] for g in cluster_size_groups(few)] == [str(s) for s in range(2, 2 + MAX_SINGLE_SIZES)]
