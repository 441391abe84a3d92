"""Step ``baseline``: a quick linear text classifier, trained on train and scored on validation and test.

It gives the model search a floor to beat, not a model to deploy. It runs after the split
(``PHASE = "splits"``) wherever it is listed, and never changes a split or sets a row aside.

Method:

- Text: the pipeline's text columns joined with a line break (a null counts as empty).
- Features: TF-IDF over word n-grams and character n-grams (``char_wb``: n-grams inside word
  boundaries), each hashed into ``2**HASH_BITS`` columns by :func:`prep.features.hashed_counts`
  (the n-grams of scikit-learn's ``word`` and ``char_wb`` analyzers, hashed by a compiled kernel
  with a fixed hash, so the columns do not depend on the data or on the order of rows), then
  ``TfidfTransformer`` (smoothed idf, sublinear tf, L2 rows) fitted on the training rows only.
- Classifier: logistic regression fitted by stochastic gradient descent (scikit-learn's
  ``SGDClassifier(loss="log_loss")``, one-vs-rest) for a number of epochs fixed by the row
  count (:func:`epochs_for`), seeded; class
  weights "balanced" by default so that small classes count. Chosen over ``LogisticRegression``
  (lbfgs) because that took minutes on a few thousand rows with hashed features here, while
  SGD took seconds at the same scores (measured on the demo, tests/bench/).
- Bounded in time: at most ``max_train_rows`` training rows (default :data:`MAX_TRAIN_ROWS`),
  drawn per class in proportion (each class keeps ``ceil(n_c * max / n)`` rows, so the sample
  may exceed the maximum by less than one row per class); the rows kept are those with the
  smallest BLAKE2b keys of seed and ``row_id`` (:func:`prep.split.stable_keys`), so the sample
  does not depend on row order. Validation and test are scored whole, in blocks of
  :data:`PREDICT_BLOCK` rows so that memory stays bounded.
- Metrics on validation and test: accuracy, balanced accuracy, macro F1 and F1 per class (over
  the classes present in the split's true or predicted labels, as scikit-learn does by default),
  and the confusion matrix. Rows without a label are not scored. Rounded to
  :data:`METRIC_DECIMALS` decimals so that the card is byte-identical across runs.

Outputs: ``baseline_predictions.parquet`` (row_id, source, source_row, split, label, predicted)
for validation and test, and the facts ``model, features, max_train_rows, sampled, seed,
metrics, confusion, note`` (plus ``train_rows``, ``classifier``, ``unscored_rows``).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import polars as pl

from prep.config import ConfigValueError
from prep.split import stable_keys
from prep.steps.base import StepContext, ignoring

NAME = "baseline"
PHASE = "splits"
# Returns the splits it got and sets nothing aside: the runner may run it beside the next steps.
READ_ONLY = True


def preload() -> None:
    """Import what this step and ``suspect_labels`` import when they run. The runner calls it on
    its own thread before running this step beside the next one: scikit-learn's modules import
    each other in cycles, and two threads importing them at once fail with "partially initialized
    module" (seen at 500k rows: baseline's first import met suspect_labels')."""
    import scipy.sparse  # noqa: F401
    import sklearn.exceptions  # noqa: F401
    import sklearn.feature_extraction.text  # noqa: F401
    import sklearn.linear_model  # noqa: F401
    import sklearn.metrics  # noqa: F401
    import sklearn.model_selection  # noqa: F401

    import prep.features  # noqa: F401

# Defaults. Bounded run time: at 20,000 rows, 5 epochs of SGD took about 13 s on one busy core here
# (hashing the n-grams with scikit-learn's analyzers took another 15 s; prep.features does it in
# about one); tests/bench/test_after_split_bench.py measures 100,000 rows. The n-gram ranges are
# common practice for short texts, no source.
MAX_TRAIN_ROWS = 20_000
PREDICT_BLOCK = 50_000    # validation/test rows featurised at once
WORD_NGRAMS = (1, 2)
CHAR_NGRAMS = (3, 4)
HASH_BITS = 18            # 2**18 hashed columns per analyzer; collisions are rare at this size
ALPHA = 1e-5              # L2 penalty of the SGD classifier (common practice for TF-IDF text, no source)
# Passes over the data (no early stop): a bound on time, and deterministic. Small data needs more
# passes to converge, large data fewer: epochs = UPDATES / rows, kept within [MIN_EPOCHS, MAX_EPOCHS]
# (20 below 2,500 rows, 4 at 16,000, 3 at 20,000). Own choice: on 16,000 rows of the 250k demo,
# 3 passes gave the same validation macro F1 as 7 (0.9979; log loss 0.0201 against 0.0194) in half
# the time; below 2,500 rows nothing changed.
UPDATES = 50_000
MIN_EPOCHS = 3
MAX_EPOCHS = 20
METRIC_DECIMALS = 4
SPLITS = ("train", "validation", "test")
SCORED_SPLITS = ("validation", "test")

NOTE = (
    "A floor for the model search, not a model to deploy: a linear classifier on hashed TF-IDF word "
    "and character n-grams, trained once with fixed settings and no tuning."
)


@dataclass(frozen=True)
class Config:
    """``baseline`` settings; see the module docstring."""

    max_train_rows: int = MAX_TRAIN_ROWS
    word_ngrams: list[int] | None = None      # [min, max]; default WORD_NGRAMS
    char_ngrams: list[int] | None = None      # [min, max]; default CHAR_NGRAMS; [] switches them off
    alpha: float = ALPHA
    class_weight: Literal["balanced", "none"] = "balanced"
    seed: int | None = None                   # default: the split's seed

    def check(self) -> None:
        if self.max_train_rows < 2:
            raise ConfigValueError("max_train_rows", f"must be at least 2, got {self.max_train_rows}")
        for key in ("word_ngrams", "char_ngrams"):
            value = getattr(self, key)
            if value is None or (key == "char_ngrams" and value == []):
                continue
            if len(value) != 2 or not 1 <= value[0] <= value[1]:
                raise ConfigValueError(key, f"must be [min, max] with 1 <= min <= max, got {value}")
        if not self.alpha > 0:
            raise ConfigValueError("alpha", f"must be greater than 0, got {self.alpha}")
        if self.seed is not None and self.seed < 0:
            raise ConfigValueError("seed", "must be >= 0")


# --- shared with suspect_labels --------------------------------------------------------------------


def texts(frame: pl.DataFrame, columns: tuple[str, ...] | list[str]) -> list[str]:
    """The text columns of ``frame`` joined with a line break, nulls as empty strings."""
    present = [c for c in columns if c in frame.columns]
    if not present or frame.height == 0:
        return [""] * frame.height
    joined = pl.concat_str([pl.col(c).cast(pl.String).fill_null("") for c in present], separator="\n")
    return frame.select(joined.alias("_text")).get_column("_text").to_list()


def word_range(config: Config) -> tuple[int, int]:
    return tuple(config.word_ngrams) if config.word_ngrams else WORD_NGRAMS


def char_range(config: Config) -> tuple[int, int] | None:
    if config.char_ngrams == []:
        return None
    return tuple(config.char_ngrams) if config.char_ngrams else CHAR_NGRAMS


def count_features(texts_: list[str], word: tuple[int, int], char: tuple[int, int] | None):
    """Hashed word (+ character) n-gram counts, a CSR matrix (lower-cased here). Stateless: the same
    text always gives the same row, so the counts can be computed once and reused across folds."""
    from prep.features import hashed_counts, texts_lowercase

    return hashed_counts(texts_lowercase(texts_), word=word, char=char, bits=HASH_BITS)


def make_weighting():
    """TF-IDF weighting of the hashed counts, fitted on training rows only."""
    from sklearn.feature_extraction.text import TfidfTransformer

    return TfidfTransformer(sublinear_tf=True)


def epochs_for(rows: int) -> int:
    """Number of SGD passes for ``rows`` training rows (see UPDATES)."""
    return int(min(MAX_EPOCHS, max(MIN_EPOCHS, -(-UPDATES // max(rows, 1)))))


def make_classifier(alpha: float, class_weight: str, seed: int, rows: int):
    """Logistic regression by SGD: fixed epochs, seeded shuffling, so the same data gives the same model."""
    from sklearn.linear_model import SGDClassifier

    # n_jobs: the one-vs-rest problems are fitted on threads (scikit-learn's SGD releases the GIL);
    # each problem's seed is drawn before they start, so the model does not depend on the threads.
    return SGDClassifier(
        loss="log_loss", alpha=alpha, max_iter=epochs_for(rows), tol=None, random_state=seed, n_jobs=os.cpu_count(),
        class_weight=None if class_weight == "none" else "balanced",
    )


def fit_quietly(model, x, y):
    """Fit the classifier of :func:`make_classifier`. Its fixed epochs (``tol=None``) are deliberate,
    and with ``tol=None`` scikit-learn's SGD emits no convergence warning (its check needs a
    ``tol``; tests/steps/test_baseline.py checks that none comes), so no warning filter is set here:
    a filter held during the fit would have to be held against the other after-split steps' threads
    (see :func:`prep.steps.base.ignoring`)."""
    return model.fit(x, y)


# The row ids, seed and keys of the last sample: baseline and suspect_labels both sample the
# labelled train rows with the split's seed, and the keys (a Python loop over BLAKE2b, about 1.2 s per
# million rows) are then computed once. The cache is used only for an equal row_id column and seed.
_last_keys: list[tuple[int, pl.Series, pl.Series]] = []


def _sample_keys(row_ids: pl.Series, seed: int) -> pl.Series:
    """:func:`prep.split.stable_keys` of ``row_ids``, reused from the previous call when it had the
    same seed and an equal row_id column (compared in full, so the keys are always those of the ids)."""
    if _last_keys:
        last_seed, last_ids, last_keys = _last_keys[0]
        if last_seed == seed and last_ids.len() == row_ids.len() and last_ids.equals(row_ids):
            return last_keys.alias(row_ids.name)
    keys = stable_keys(row_ids, seed=seed)
    _last_keys[:] = [(seed, row_ids, keys)]
    return keys


def sample_per_class(frame: pl.DataFrame, label: str, max_rows: int, seed: int) -> pl.DataFrame:
    """At most about ``max_rows`` rows, each class in proportion (``ceil(n_c * max / n)`` rows).

    Keeps the rows with the smallest stable keys of ``row_id`` within each class, in the frame's
    row order. Returns ``frame`` itself when it is small enough.
    """
    if frame.height <= max_rows:
        return frame
    keyed = frame.with_columns(_sample_keys(frame.get_column("row_id"), seed).alias("_sample_key"))
    n = frame.height
    quota = (pl.len().over(label).cast(pl.Float64) * max_rows / n).ceil()
    rank = pl.col("_sample_key").rank("ordinal").over(label)
    return keyed.filter(rank <= quota).drop("_sample_key")


# --- the step --------------------------------------------------------------------------------------


def _round(x: float) -> float:
    return round(float(x), METRIC_DECIMALS)


def scores(y_true: list[str], y_pred: list[str]) -> tuple[dict[str, Any], dict[str, Any]]:
    """(metrics, confusion) of one split, computed with scikit-learn's metric functions."""
    from sklearn.metrics import accuracy_score, balanced_accuracy_score, confusion_matrix, f1_score

    labels = sorted(set(y_true) | set(y_pred))
    # The metrics get integer class codes (the position in `labels`), not the strings: scikit-learn
    # label-encodes object arrays by sorting Python strings, which took most of the scoring time
    # (measured on one 63k-row split of the 1M demo: 3.4-4.6 s with strings, 0.2-0.5 s with codes).
    # The codes keep the order of `labels`, so every number, the per-class order and the matrix are
    # the ones the strings give (tests/steps/test_baseline.py compares both).
    codes = {c: i for i, c in enumerate(labels)}
    true, pred = _encode(y_true, codes), _encode(y_pred, codes)
    ids = list(range(len(labels)))
    with ignoring(UserWarning):
        # balanced accuracy warns when a predicted class is absent from y_true; that is expected.
        balanced = balanced_accuracy_score(true, pred)
    per_class = f1_score(true, pred, labels=ids, average=None, zero_division=0)
    metrics = {
        "rows": len(y_true),
        "accuracy": _round(accuracy_score(true, pred)),
        "balanced_accuracy": _round(balanced),
        "macro_f1": _round(f1_score(true, pred, labels=ids, average="macro", zero_division=0)),
        "per_class_f1": {c: _round(f) for c, f in zip(labels, per_class)},
    }
    matrix = confusion_matrix(true, pred, labels=ids)
    return metrics, {"labels": labels, "matrix": [[int(v) for v in row] for row in matrix]}


def _encode(values: list[str], codes: dict[str, int]) -> np.ndarray:
    """``values`` as their codes (every value is a key of ``codes``), by polars, not a Python loop."""
    return pl.Series(values, dtype=pl.String).replace_strict(codes, return_dtype=pl.Int64).to_numpy()


def apply_splits(splits: dict[str, pl.DataFrame], config: Config, ctx: StepContext) -> dict[str, pl.DataFrame]:
    """Train on train, score validation and test, report the facts; the splits are returned unchanged."""
    seed = ctx.seed if config.seed is None else config.seed
    word, char = word_range(config), char_range(config)
    features_fact = {
        "text_columns": list(ctx.text),
        "word_ngrams": list(word),
        "char_ngrams": list(char) if char else None,
        "char_analyzer": "char_wb" if char else None,
        "hashed_columns_per_analyzer": 2**HASH_BITS,
        "weighting": "tf-idf (smoothed idf, sublinear tf, L2-normalised rows)",
    }
    ctx.report("model", "logistic_regression_sgd")
    ctx.report("features", features_fact)
    ctx.report("classifier", {"loss": "log_loss", "alpha": config.alpha, "class_weight": config.class_weight,
                              "epochs": f"{UPDATES} / training rows, within [{MIN_EPOCHS}, {MAX_EPOCHS}]",
                              "solver": "sgd"})
    ctx.report("max_train_rows", config.max_train_rows)
    ctx.report("seed", seed)
    ctx.report("note", NOTE)

    label = ctx.label
    train = splits["train"]
    train = train.filter(pl.col(label).is_not_null()) if label in train.columns else train.clear()
    sample = sample_per_class(train, label, config.max_train_rows, seed)
    ctx.report("sampled", sample.height < train.height)
    ctx.report("train_rows", sample.height)
    classes = sample.get_column(label).unique().to_list() if sample.height else []
    empty_metrics = {name: None for name in SCORED_SPLITS}
    if len(classes) < 2:
        ctx.report("metrics", empty_metrics)
        ctx.report("confusion", empty_metrics)
        ctx.report("skipped", "train holds fewer than two classes with a label, so there is nothing to learn.")
        ctx.add_output("baseline_predictions", _predictions_frame([]))
        return splits

    weighting = make_weighting()
    x_train = weighting.fit_transform(count_features(texts(sample, ctx.text), word, char))
    model = fit_quietly(make_classifier(config.alpha, config.class_weight, seed, sample.height), x_train, sample.get_column(label).to_list())

    metrics, confusion, parts, unscored = {}, {}, [], {}
    for name in SCORED_SPLITS:
        frame = splits[name]
        labelled = frame.filter(pl.col(label).is_not_null()) if label in frame.columns else frame.clear()
        unscored[name] = frame.height - labelled.height
        if labelled.height == 0:
            metrics[name], confusion[name] = None, None
            continue
        predicted = []
        for block in labelled.iter_slices(PREDICT_BLOCK):
            x = weighting.transform(count_features(texts(block, ctx.text), word, char))
            predicted += model.predict(x).tolist()
        y_true = labelled.get_column(label).to_list()
        metrics[name], confusion[name] = scores(y_true, predicted)
        parts.append(
            labelled.select(
                "row_id", "source", "source_row", pl.lit(name).alias("split"), pl.col(label).cast(pl.String).alias("label")
            ).with_columns(pl.Series("predicted", predicted, dtype=pl.String))
        )
    ctx.report("metrics", metrics)
    ctx.report("confusion", confusion)
    ctx.report("unscored_rows", unscored)
    ctx.add_output("baseline_predictions", _predictions_frame(parts))
    return splits


def _predictions_frame(parts: list[pl.DataFrame]) -> pl.DataFrame:
    schema = {"row_id": pl.String, "source": pl.String, "source_row": pl.Int64, "split": pl.String,
              "label": pl.String, "predicted": pl.String}
    if not parts:
        return pl.DataFrame(schema=schema)
    return pl.concat(parts, how="vertical").cast(schema)


__all__ = ["NAME", "PHASE", "Config", "apply_splits", "texts", "count_features", "make_weighting", "make_classifier",
           "sample_per_class",
           "scores"]
