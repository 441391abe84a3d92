"""Step ``suspect_labels``: training rows whose given label disagrees confidently with a model.

The method is confident learning (Northcutt, Jiang, Chuang, "Confident Learning: Estimating
Uncertainty in Dataset Labels", JAIR 70, 2021). It runs after the split (``PHASE = "splits"``)
wherever it is listed, on the train split:

1. Out-of-sample predicted probabilities ``p[x, j]`` for every labelled training row by
   stratified ``folds``-fold cross-validation (the baseline's features and classifier; see
   :mod:`prep.steps.baseline`), seeded.
2. Per-class thresholds ``t[j]``: the mean self-confidence, i.e. the mean of ``p[x, j]`` over the
   rows whose given label is ``j`` (the paper's eq. 2).
3. The confident joint ``C[i][j]``: the number of rows with given label ``i`` whose most probable
   class *among the classes at or above their threshold* is ``j`` (rows with no class at or above
   its threshold are not counted; the paper's eq. 1). Exact probability ties go to the class
   that sorts first, which practically never happens with real numbers.
4. Suspect rows: those counted off the diagonal (``j != i``), ranked by the margin
   ``p[x, j] - p[x, i]`` (suggested minus given), largest first, ties by ``row_id``.
5. The estimated noise per class pair: the confident joint calibrated so that each row ``i``
   sums to the number of rows labelled ``i`` (the paper's eq. 3), in rows.

Output ``suspect_labels.parquet``: row_id, source, source_row, given_label, suggested_label,
confidence (``p[x, suggested]``), margin. Policy ``report`` (default) changes nothing;
``set_aside`` moves the flagged rows whose confidence is at least ``min_confidence`` to the
ledger (reason ``suspect_label``). Labels are never changed.

Bounded in time like the baseline: at most ``max_rows`` training rows are checked (a per-class
sample by stable key, as in :func:`prep.steps.baseline.sample_per_class`); the card says so.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import polars as pl

from prep.config import ConfigValueError
from prep.steps import baseline
from prep.steps.base import StepContext, ignoring

NAME = "suspect_labels"
PHASE = "splits"

FOLDS = 5
MIN_CONFIDENCE = 0.9      # set-aside policy only; common practice, no source
MAX_ROWS = 20_000
REASON = "suspect_label"
PROBABILITY_DECIMALS = 6  # rounding of the written probabilities, for byte-identical outputs
THRESHOLD_RULE = "per-class mean self-confidence (confident learning, Northcutt et al., JAIR 2021)"


@dataclass(frozen=True)
class Config:
    """``suspect_labels`` settings; see the module docstring."""

    folds: int = FOLDS
    policy: Literal["report", "set_aside"] = "report"
    min_confidence: float = MIN_CONFIDENCE
    max_rows: int = MAX_ROWS
    seed: int | None = None

    def check(self) -> None:
        if self.folds < 2:
            raise ConfigValueError("folds", f"must be at least 2, got {self.folds}")
        if not 0.0 <= self.min_confidence <= 1.0:
            raise ConfigValueError("min_confidence", f"must be between 0 and 1, got {self.min_confidence}")
        if self.max_rows < 2:
            raise ConfigValueError("max_rows", f"must be at least 2, got {self.max_rows}")
        if self.seed is not None and self.seed < 0:
            raise ConfigValueError("seed", "must be >= 0")


@dataclass
class ConfidentLearning:
    """The quantities of confident learning for ``n`` rows and ``k`` classes (class index order)."""

    thresholds: np.ndarray     # (k,) mean self-confidence per class; inf for a class without rows
    joint: np.ndarray          # (k, k) int, confident joint: given label (row) x suggested class (column)
    suggested: np.ndarray      # (n,) int, the confident class of each row, -1 where none reaches its threshold
    calibrated: np.ndarray     # (k, k) float, the joint calibrated to the given-label counts, in rows


preload = baseline.preload  # the same imports (see there)


def confident_learning(given: np.ndarray, probs: np.ndarray) -> ConfidentLearning:
    """Thresholds, confident joint and calibrated joint from given labels and out-of-sample probabilities.

    ``given`` holds class indices ``0..k-1`` (n,), ``probs`` the probabilities (n, k). Pure numpy.
    """
    given = np.asarray(given, dtype=np.int64)
    probs = np.asarray(probs, dtype=np.float64)
    n, k = probs.shape
    counts = np.bincount(given, minlength=k)
    sums = np.bincount(given, weights=probs[np.arange(n), given] if n else np.zeros(0), minlength=k)
    with np.errstate(invalid="ignore", divide="ignore"):
        thresholds = np.where(counts > 0, sums / np.maximum(counts, 1), np.inf)
    above = probs >= thresholds[None, :]
    masked = np.where(above, probs, -np.inf)
    suggested = np.where(above.any(axis=1), masked.argmax(axis=1) if n else np.zeros(0, dtype=np.int64), -1)
    joint = np.zeros((k, k), dtype=np.int64)
    counted = suggested >= 0
    np.add.at(joint, (given[counted], suggested[counted]), 1)
    row_sums = joint.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        calibrated = np.where(row_sums > 0, joint / np.maximum(row_sums, 1) * counts[:, None], 0.0)
    return ConfidentLearning(thresholds=thresholds, joint=joint, suggested=suggested, calibrated=calibrated)


def out_of_sample_probabilities(texts: list[str], given: np.ndarray, k: int, *, folds: int, seed: int) -> np.ndarray:
    """(n, k) probabilities, each row predicted by a model that did not see it (stratified k-fold)."""
    from sklearn.model_selection import StratifiedKFold

    n = len(texts)
    probs = np.zeros((n, k), dtype=np.float64)
    n_splits = max(2, min(folds, n))
    with ignoring(UserWarning):
        # A class with fewer rows than folds is missing from some folds' training data; its
        # probability is 0 there. scikit-learn warns about it; the card reports the folds used.
        splitter = StratifiedKFold(n_splits=n_splits, shuffle=True, random_state=seed)
        pieces = list(splitter.split(np.zeros(n), given))
    counts = baseline.count_features(texts, baseline.WORD_NGRAMS, baseline.CHAR_NGRAMS)
    for train_idx, held_idx in pieces:
        weighting = baseline.make_weighting()
        x_train = weighting.fit_transform(counts[train_idx])
        y_train = given[train_idx]
        if np.unique(y_train).size < 2:
            probs[np.ix_(held_idx, y_train[:1])] = 1.0
            continue
        model = baseline.fit_quietly(baseline.make_classifier(baseline.ALPHA, "balanced", seed, len(train_idx)), x_train, y_train)
        p = model.predict_proba(weighting.transform(counts[held_idx]))
        probs[np.ix_(held_idx, model.classes_.astype(np.int64))] = p
    return probs


def apply_splits(splits: dict[str, pl.DataFrame], config: Config, ctx: StepContext) -> dict[str, pl.DataFrame]:
    """Flag suspect labels in train; report them, and set them aside only under ``policy: set_aside``."""
    seed = ctx.seed if config.seed is None else config.seed
    label = ctx.label
    ctx.report("folds", config.folds)
    ctx.report("threshold_rule", THRESHOLD_RULE)
    ctx.report("policy", config.policy)
    ctx.report("min_confidence", config.min_confidence if config.policy == "set_aside" else None)
    ctx.report("max_rows", config.max_rows)
    ctx.report("seed", seed)

    train = splits["train"]
    labelled = train.filter(pl.col(label).is_not_null()) if label in train.columns else train.clear()
    checked = baseline.sample_per_class(labelled, label, config.max_rows, seed)
    ctx.report("rows_checked", checked.height)
    ctx.report("sampled", checked.height < labelled.height)
    classes = sorted(checked.get_column(label).unique().to_list()) if checked.height else []
    if len(classes) < 2:
        ctx.report("flagged", 0)
        ctx.report("set_aside", 0)
        ctx.report("noise", [])
        ctx.report("skipped", "train holds fewer than two classes with a label, so there is nothing to compare.")
        ctx.add_output("suspect_labels", _suspect_frame(checked.clear(), label, [], np.zeros(0, int), np.zeros(0), np.zeros(0)))
        return splits

    index = {c: i for i, c in enumerate(classes)}
    given = np.array([index[c] for c in checked.get_column(label).to_list()], dtype=np.int64)
    probs = out_of_sample_probabilities(baseline.texts(checked, ctx.text), given, len(classes),
                                        folds=config.folds, seed=seed)
    probs = np.round(probs, PROBABILITY_DECIMALS)
    cl = confident_learning(given, probs)
    off = np.flatnonzero((cl.suggested >= 0) & (cl.suggested != given))
    confidence = probs[off, cl.suggested[off]]
    margin = confidence - probs[off, given[off]]
    suspects = _suspect_frame(checked[off] if off.size else checked.clear(), label, classes,
                              cl.suggested[off], confidence, margin)
    ctx.add_output("suspect_labels", suspects)

    noise = []
    for i, j in zip(*np.nonzero(cl.joint)):
        if i != j:
            noise.append({"given": classes[i], "suggested": classes[j], "rows": int(cl.joint[i, j]),
                          "estimated_rows": round(float(cl.calibrated[i, j]), 2)})
    noise.sort(key=lambda d: (-d["rows"], d["given"], d["suggested"]))
    ctx.report("flagged", int(off.size))
    ctx.report("noise", noise)
    ctx.report("thresholds", {c: round(float(t), 4) for c, t in zip(classes, cl.thresholds)})

    if config.policy != "set_aside" or suspects.height == 0:
        ctx.report("set_aside", 0)
        return splits
    chosen = suspects.filter(pl.col("confidence") >= config.min_confidence)
    ctx.report("set_aside", chosen.height)
    if chosen.height == 0:
        return splits
    ctx.set_aside(
        chosen.select("row_id", "source", "source_row"), REASON,
        detail=f"given label disagrees with the out-of-sample prediction (confidence >= {config.min_confidence:g})",
    )
    ids = chosen.get_column("row_id").implode()
    return {**splits, "train": splits["train"].filter(~pl.col("row_id").is_in(ids))}


def _suspect_frame(rows: pl.DataFrame, label: str, classes: list[str], suggested: np.ndarray,
                   confidence: np.ndarray, margin: np.ndarray) -> pl.DataFrame:
    schema = {"row_id": pl.String, "source": pl.String, "source_row": pl.Int64, "given_label": pl.String,
              "suggested_label": pl.String, "confidence": pl.Float64, "margin": pl.Float64}
    if rows.height == 0:
        return pl.DataFrame(schema=schema)
    frame = rows.select(
        "row_id", "source", "source_row", pl.col(label).cast(pl.String).alias("given_label")
    ).with_columns(
        pl.Series("suggested_label", [classes[j] for j in suggested.tolist()], dtype=pl.String),
        pl.Series("confidence", np.round(confidence, PROBABILITY_DECIMALS), dtype=pl.Float64),
        pl.Series("margin", np.round(margin, PROBABILITY_DECIMALS), dtype=pl.Float64),
    )
    return frame.sort(["margin", "row_id"], descending=[True, False]).cast(schema)
