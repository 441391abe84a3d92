"""Tests of the baseline step.

Reference: scikit-learn's metric functions (accuracy_score, balanced_accuracy_score, f1_score,
confusion_matrix), a general-purpose library, recomputed here from the written predictions.
All texts are invented.
"""

from __future__ import annotations

import random
import warnings

import polars as pl
import pytest
from sklearn.metrics import accuracy_score, balanced_accuracy_score, confusion_matrix, f1_score

from prep.steps.baseline import Config, apply_splits, sample_per_class, scores

WORDS = {
    "Billing": "invoice charge refund payment receipt fee price overcharged twice card",
    "Unlock & Docking": "dock unlock station bike scooter stuck lock bay latch handlebar",
    "Lost & Found": "lost left phone wallet keys basket found bag forgot helmet",
}


def _frame(n: int, seed: int, noise: float = 0.3) -> pl.DataFrame:
    """Invented tickets: each class draws mostly from its own words, partly from all words."""
    rng = random.Random(seed)
    every = " ".join(WORDS.values()).split()
    rows = []
    for i in range(n):
        klass = list(WORDS)[(0, 0, 0, 1, 2)[i % 5]]   # imbalanced: macro and weighted averages differ
        own = WORDS[klass].split()
        body = " ".join(rng.choice(every) if rng.random() < noise else rng.choice(own) for _ in range(8))
        rows.append({"row_id": f"w:{seed}-{i}", "source": "w", "source_row": i, "title": "Ticket" if i % 2 else None,
                     "body": body, "label": klass if i % 17 else None})
    return pl.DataFrame(rows, schema={"row_id": pl.String, "source": pl.String, "source_row": pl.Int64,
                                      "title": pl.String, "body": pl.String, "label": pl.String})


@pytest.fixture(scope="module")
def splits():
    return {"train": _frame(300, 1), "validation": _frame(90, 2, noise=0.8), "test": _frame(90, 3, noise=0.8)}


def test_metrics_agree_with_scikit_learn_on_the_written_predictions(make_ctx, splits):
    ctx = make_ctx("baseline")
    out = apply_splits(splits, Config(), ctx)
    assert all(out[s].equals(splits[s]) for s in splits)   # never changes a split
    assert len(ctx.ledger) == 0
    predictions = ctx.outputs["baseline_predictions"]
    assert predictions.columns == ["row_id", "source", "source_row", "split", "label", "predicted"]
    for name in ("validation", "test"):
        part = predictions.filter(pl.col("split") == name)
        y, p = part["label"].to_list(), part["predicted"].to_list()
        # Every labelled row is scored, unlabelled ones are not.
        assert part.height == splits[name]["label"].drop_nulls().len()
        m = ctx.facts["metrics"][name]
        labels = sorted(set(y) | set(p))
        assert m["accuracy"] == pytest.approx(accuracy_score(y, p), abs=5e-5)
        assert m["balanced_accuracy"] == pytest.approx(balanced_accuracy_score(y, p), abs=5e-5)
        assert m["macro_f1"] == pytest.approx(f1_score(y, p, average="macro", zero_division=0), abs=5e-5)
        per_class = f1_score(y, p, labels=labels, average=None, zero_division=0)
        assert m["per_class_f1"] == {c: pytest.approx(f, abs=5e-5) for c, f in zip(labels, per_class)}
        cm = ctx.facts["confusion"][name]
        assert cm["labels"] == labels
        assert cm["matrix"] == confusion_matrix(y, p, labels=labels).tolist()
        # Noisy validation and test: not a perfect score, so the check above can fail.
        assert 0.34 < m["accuracy"] < 1.0
    assert ctx.facts["note"].startswith("A floor for the model search, not a model to deploy")
    assert ctx.facts["sampled"] is False


@pytest.mark.parametrize("seed", range(6))
def test_scores_equal_scikit_learn_on_the_label_strings(seed):
    # Reference: scikit-learn's metric functions on the string labels themselves (scores() hands
    # them integer codes). Labels whose code-point order differs from a case-blind order, non-ASCII
    # labels, and predicted classes absent from the true labels (and the reverse) are included.
    rng = random.Random(seed)
    names = ["Billing", "billing", "Zone", "Émile", "Ünlock", "_other", "Lost & Found"]
    true_names, pred_names = rng.sample(names, rng.randint(1, 5)), rng.sample(names, rng.randint(1, 5))
    y = [rng.choice(true_names) for _ in range(rng.randint(1, 300))]
    p = [t if rng.random() < 0.6 and t in pred_names else rng.choice(pred_names) for t in y]
    metrics, confusion = scores(y, p)
    labels = sorted(set(y) | set(p))
    assert confusion["labels"] == labels
    assert confusion["matrix"] == confusion_matrix(y, p, labels=labels).tolist()
    assert metrics["rows"] == len(y)
    assert metrics["accuracy"] == round(float(accuracy_score(y, p)), 4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        assert metrics["balanced_accuracy"] == round(float(balanced_accuracy_score(y, p)), 4)
    assert metrics["macro_f1"] == round(float(f1_score(y, p, labels=labels, average="macro", zero_division=0)), 4)
    per_class = f1_score(y, p, labels=labels, average=None, zero_division=0)
    assert metrics["per_class_f1"] == {c: round(float(f), 4) for c, f in zip(labels, per_class)}


def test_deterministic(make_ctx, splits):
    a, b = make_ctx("baseline"), make_ctx("baseline")
    apply_splits(splits, Config(), a)
    apply_splits(splits, Config(), b)
    assert a.facts == b.facts
    assert a.outputs["baseline_predictions"].equals(b.outputs["baseline_predictions"])


def test_training_is_sampled_to_the_maximum(make_ctx, splits):
    ctx = make_ctx("baseline")
    apply_splits(splits, Config(max_train_rows=60), ctx)
    assert ctx.facts["sampled"] is True
    labelled = splits["train"]["label"].drop_nulls().len()
    assert 60 <= ctx.facts["train_rows"] <= 60 + 3 < labelled    # at most one more row per class


def test_sample_per_class_is_proportional_and_order_free():
    frame = _frame(300, 4).filter(pl.col("label").is_not_null())
    sample = sample_per_class(frame, "label", 50, seed=7)
    counts = dict(sample.group_by("label").len().iter_rows())
    sizes = dict(frame.group_by("label").len().iter_rows())
    assert counts == {k: -(-n * 50 // frame.height) for k, n in sizes.items()}   # ceil(n_c * max / n)
    shuffled = sample_per_class(frame.sample(fraction=1.0, shuffle=True, seed=1), "label", 50, seed=7)
    assert set(shuffled["row_id"]) == set(sample["row_id"])


def test_one_class_in_train_is_skipped(make_ctx, splits):
    one = {**splits, "train": splits["train"].with_columns(pl.lit("Billing").alias("label"))}
    ctx = make_ctx("baseline")
    apply_splits(one, Config(), ctx)
    assert ctx.facts["metrics"] == {"validation": None, "test": None}
    assert "skipped" in ctx.facts


def test_sample_keys_are_reused_only_for_the_same_ids_and_seed():
    # Reference: prep.split.stable_keys (checked against hashlib's BLAKE2b in tests/test_split.py);
    # the cache must give exactly its keys whatever the order of calls.
    from prep.split import stable_keys
    from prep.steps.baseline import _sample_keys

    ids = pl.Series("row_id", [f"w:{i}" for i in range(1000)])
    changed = ids.clone().scatter(500, "w:x")  # same length, one id differs
    for values, seed in [(ids, 7), (ids, 7), (ids.clone(), 7), (changed, 7), (ids, 8), (ids.head(999), 8), (ids, 7)]:
        assert _sample_keys(values, seed).to_list() == stable_keys(values, seed=seed).to_list()


def test_fitting_the_classifier_emits_no_convergence_warning(splits):
    # The SGD classifier runs a fixed number of epochs (tol=None); scikit-learn's convergence check
    # needs a tol, so no ConvergenceWarning may come, and fit_quietly sets no warning filter (a
    # filter held during a fit would race with the other after-split step's thread).
    from sklearn.exceptions import ConvergenceWarning

    from prep.steps.baseline import ALPHA, count_features, fit_quietly, make_classifier, make_weighting, texts

    train = splits["train"].filter(pl.col("label").is_not_null())
    x = make_weighting().fit_transform(count_features(texts(train, ["title", "body"]), (1, 2), (2, 4)))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fit_quietly(make_classifier(ALPHA, "balanced", 7, train.height), x, train.get_column("label").to_list())
    assert not [w for w in caught if issubclass(w.category, ConvergenceWarning)]


def test_warning_blocks_of_two_threads_never_interleave():
    # prep.steps.base.ignoring serialises catch_warnings blocks: two threads using it at once must
    # leave the process's filter list as it was, and each block must ignore its own category.
    import threading
    import time

    from prep.steps.base import ignoring

    before = list(warnings.filters)
    barrier = threading.Barrier(2, timeout=5)
    leaked = []

    def block(category):
        try:
            barrier.wait()
        except threading.BrokenBarrierError:
            pass
        for _ in range(50):
            with ignoring(category), warnings.catch_warnings(record=True) as seen:
                time.sleep(0.0005)  # hand the GIL to the other thread inside the block (without the
                warnings.warn("inside", category)  # lock, 10 runs of 10 broke the filters or leaked)
                leaked.extend(seen)

    threads = [threading.Thread(target=block, args=(c,)) for c in (UserWarning, RuntimeWarning)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert warnings.filters == before and not leaked
