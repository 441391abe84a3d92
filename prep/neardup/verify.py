"""Exact similarity of given pairs: Jaccard of shingle sets, or an edit similarity (rapidfuzz)."""

from __future__ import annotations

import numpy as np
import polars as pl

from prep.neardup.shingles import Shingled


def jaccard_pairs(shingled: Shingled, i: np.ndarray, j: np.ndarray, threshold: float = 0.0) -> np.ndarray:
    """Exact Jaccard similarity |A∩B| / |A∪B| of the shingle sets of each pair (i[p], j[p]).

    With a ``threshold`` > 0 only pairs reaching it are sure to get their value; the others may get
    -1.0 (their merge stops early), so use the result only as ``similarity >= threshold``.

    Each text's fingerprints are sorted and made distinct once; each pair is then a merge of two
    sorted runs (compiled, :func:`prep.neardup.kernels.jaccard`): time linear in the pairs' set
    sizes, memory linear in the shingles."""
    from prep.neardup import kernels

    if i.size == 0:
        return np.zeros(0, dtype=np.float64)
    values, offsets = kernels.sorted_sets(shingled.hashes, shingled.offsets)
    i = np.ascontiguousarray(i, dtype=np.int64)
    j = np.ascontiguousarray(j, dtype=np.int64)
    return kernels.jaccard(values, offsets, i, j, float(threshold))


def edit_similarity_pairs(texts: pl.Series, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Normalised Indel similarity (rapidfuzz ``fuzz.ratio`` / 100) of each pair of texts."""
    from rapidfuzz import fuzz, process

    if i.size == 0:
        return np.zeros(0, dtype=np.float64)
    left = texts.gather(i).to_list()
    right = texts.gather(j).to_list()
    scores = process.cpdist(left, right, scorer=fuzz.ratio, workers=-1, dtype=np.float64)
    return np.asarray(scores, dtype=np.float64) / 100.0
