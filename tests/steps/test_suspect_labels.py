"""Tests of the suspect_labels step (confident learning).

References: the definitions of Northcutt, Jiang, Chuang, "Confident Learning: Estimating
Uncertainty in Dataset Labels", JAIR 70 (2021): per-class threshold = mean self-confidence (eq. 2),
confident joint (eq. 1), calibration to the given-label counts (eq. 3); from the paper, worked by
hand below. All texts are invented.
"""

from __future__ import annotations

import random

import numpy as np
import polars as pl
import pytest

from prep.steps import suspect_labels
from prep.steps.suspect_labels import Config, apply_splits, confident_learning


def test_confident_joint_by_hand():
    # Three classes, six rows. Given labels and out-of-sample probabilities:
    given = np.array([0, 0, 0, 1, 1, 2])
    probs = np.array([
        [0.9, 0.1, 0.0],   # row 0
        [0.7, 0.2, 0.1],   # row 1
        [0.2, 0.8, 0.0],   # row 2: given 0, looks like 1
        [0.1, 0.8, 0.1],   # row 3
        [0.3, 0.6, 0.1],   # row 4
        [0.1, 0.2, 0.7],   # row 5
    ])
    # Thresholds (eq. 2): t0 = (0.9 + 0.7 + 0.2) / 3 = 0.6, t1 = (0.8 + 0.6) / 2 = 0.7, t2 = 0.7.
    # Classes at or above threshold, then the most probable of them (eq. 1):
    #   row 0: {0} -> 0; row 1: {0} -> 0; row 2: {1} -> 1; row 3: {1} -> 1;
    #   row 4: {} (0.3 < 0.6, 0.6 < 0.7, 0.1 < 0.7) -> not counted; row 5: {2} -> 2.
    cl = confident_learning(given, probs)
    assert cl.thresholds == pytest.approx([0.6, 0.7, 0.7])
    assert cl.joint.tolist() == [[2, 1, 0], [0, 1, 0], [0, 0, 1]]
    assert cl.suggested.tolist() == [0, 0, 1, 1, -1, 2]
    # Calibration (eq. 3): each row of the joint scaled to the number of rows given that label:
    # row 0 sums to 3 -> unchanged; row 1 sums to 1 but 2 rows are labelled 1 -> [0, 2, 0].
    np.testing.assert_allclose(cl.calibrated, [[2, 1, 0], [0, 2, 0], [0, 0, 1]])


def test_a_class_without_rows_never_becomes_a_suggestion():
    given = np.array([0, 0, 1])
    probs = np.array([[0.5, 0.1, 0.4], [0.6, 0.1, 0.3], [0.1, 0.8, 0.1]])
    cl = confident_learning(given, probs)
    assert np.isinf(cl.thresholds[2])
    assert (cl.suggested != 2).all()


VOCABULARY = {
    "Billing": "invoice charge refund payment receipt card fee price overcharged euro",
    "Unlock & Docking": "dock unlock station bike scooter stuck lock bay handlebar latch",
    "App & Login": "password login app crash screen account email code verify update",
}


def _tickets(per_class: int, seed: int) -> tuple[pl.DataFrame, set[str]]:
    """Well-separated invented tickets (each class its own words); 2 labels per class flipped."""
    rng = random.Random(seed)
    rows, flipped = [], set()
    classes = list(VOCABULARY)
    for c, klass in enumerate(classes):
        words = VOCABULARY[klass].split()
        for i in range(per_class):
            body = " ".join(rng.choice(words) for _ in range(12))
            row_id = f"t:{c * per_class + i}"
            label = klass
            if i < 2:
                label = classes[(c + 1) % len(classes)]
                flipped.add(row_id)
            rows.append({"row_id": row_id, "source": "t", "source_row": c * per_class + i,
                         "title": None, "body": body, "label": label})
    frame = pl.DataFrame(rows, schema={"row_id": pl.String, "source": pl.String, "source_row": pl.Int64,
                                       "title": pl.String, "body": pl.String, "label": pl.String})
    return frame, flipped


def _splits(train: pl.DataFrame) -> dict[str, pl.DataFrame]:
    return {"train": train, "validation": train.clear(), "test": train.clear()}


@pytest.mark.parametrize("seed", [0, 1])
def test_exactly_the_flipped_rows_are_flagged(make_ctx, seed):
    train, flipped = _tickets(40, seed)
    ctx = make_ctx("suspect_labels", seed=seed)
    out = apply_splits(_splits(train), Config(), ctx)
    suspects = ctx.outputs["suspect_labels"]
    assert set(suspects.get_column("row_id").to_list()) == flipped
    assert ctx.facts["flagged"] == len(flipped)
    # The suggestion is the class whose words the text uses.
    truth = {r: k for r, k in zip(train["row_id"], [list(VOCABULARY)[i // 40] for i in range(train.height)])}
    assert all(truth[r] == s for r, s in zip(suspects["row_id"], suspects["suggested_label"]))
    # Ranked by margin, and report-only changes nothing.
    margins = suspects.get_column("margin").to_list()
    assert margins == sorted(margins, reverse=True)
    assert out["train"].equals(train)
    assert len(ctx.ledger) == 0
    assert suspects.columns == ["row_id", "source", "source_row", "given_label", "suggested_label", "confidence", "margin"]
    assert sum(n["rows"] for n in ctx.facts["noise"]) == len(flipped)


def test_set_aside_policy_moves_confident_suspects_to_the_ledger(make_ctx):
    train, flipped = _tickets(40, 3)
    ctx = make_ctx("suspect_labels")
    out = apply_splits(_splits(train), Config(policy="set_aside", min_confidence=0.0), ctx)
    ledger = ctx.ledger.frame()
    assert set(ledger.get_column("row_id").to_list()) == flipped
    assert set(ledger.get_column("reason").to_list()) == {"suspect_label"}
    # Every row exactly once: in train or in the ledger; labels of kept rows untouched.
    kept = set(out["train"].get_column("row_id").to_list())
    assert kept | flipped == set(train.get_column("row_id").to_list()) and not kept & flipped
    assert out["train"].equals(train.filter(~pl.col("row_id").is_in(list(flipped))))
    # No text in the ledger.
    assert not any(w in (ledger.get_column("detail")[0] or "") for w in VOCABULARY["Billing"].split())


def test_set_aside_above_an_unreachable_confidence_keeps_every_row(make_ctx):
    train, _ = _tickets(30, 4)
    ctx = make_ctx("suspect_labels")
    out = apply_splits(_splits(train), Config(policy="set_aside", min_confidence=1.0), ctx)
    assert out["train"].height + len(ctx.ledger) == train.height


def test_same_input_same_output(make_ctx):
    train, _ = _tickets(30, 5)
    a, b = make_ctx("suspect_labels"), make_ctx("suspect_labels")
    apply_splits(_splits(train), Config(), a)
    apply_splits(_splits(train), Config(), b)
    assert a.outputs["suspect_labels"].equals(b.outputs["suspect_labels"])
    assert a.facts == b.facts


def test_one_class_is_skipped(make_ctx):
    train, _ = _tickets(10, 6)
    train = train.with_columns(pl.lit("Billing").alias("label"))
    ctx = make_ctx("suspect_labels")
    out = apply_splits(_splits(train), Config(), ctx)
    assert out["train"].equals(train) and ctx.facts["flagged"] == 0 and "skipped" in ctx.facts


def test_config_checks():
    from prep.config import ConfigValueError

    with pytest.raises(ConfigValueError):
        Config(folds=1).check()
    with pytest.raises(ConfigValueError):
        Config(min_confidence=1.5).check()
    assert suspect_labels.PHASE == "splits"
