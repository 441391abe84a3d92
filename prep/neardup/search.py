"""The near-duplicate search end to end: normalised texts in, verified pairs and clusters out.

1. Texts that are identical after normalisation are folded into one representative (the first
   one); its copies are linked to it with similarity 1.0. This is exact and keeps templated
   texts from filling LSH buckets.
2. ``minhash_lsh``: representatives are shingled and signed in chunks (only the band keys are
   kept, so memory stays linear and small), candidate pairs come from the LSH buckets, and each
   candidate is verified by its exact similarity (Jaccard: a merge of sorted shingle sets that
   stops once the pair can no longer reach the threshold). ``exhaustive``: every pair, exactly.
3. Clusters are the connected components of the verified pairs.

The inner loops (fingerprints, MinHash, band keys, Jaccard) are compiled kernels
(:mod:`prep.neardup.kernels`) that use both cores; the rest is numpy and polars.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import polars as pl

from prep.neardup import exhaustive, lsh, minhash, verify
from prep.neardup.clusters import components
from prep.neardup.shingles import DEFAULT_N, shingle

Method = Literal["minhash_lsh", "exhaustive"]
Similarity = Literal["jaccard", "edit"]

# Texts are signed in chunks of this many, so that only their band keys outlive the chunk.
SIGN_CHUNK_TEXTS = 65_536
# Candidate pairs of the bands gathered so far are made unique once they exceed this many (8 bytes
# each), so that memory follows the distinct pairs, not 'bands' times them.
DEDUPE_EVERY_PAIRS = 1 << 24


@dataclass(frozen=True)
class Settings:
    threshold: float = 0.8
    shingles: Literal["char", "word"] = "char"
    n: int | None = None
    permutations: int = minhash.DEFAULT_PERMUTATIONS
    bands: int | None = None
    rows: int | None = None
    target_recall: float = lsh.DEFAULT_TARGET_RECALL
    method: Method = "minhash_lsh"
    similarity: Similarity = "jaccard"

    @property
    def shingle_n(self) -> int:
        return self.n if self.n is not None else DEFAULT_N[self.shingles]


@dataclass
class Found:
    """Verified pairs (row indices i < j, similarity >= threshold) and clusters of a search."""

    i: np.ndarray
    j: np.ndarray
    similarity: np.ndarray
    cluster: np.ndarray            # per row: cluster number, -1 when in no pair
    facts: dict[str, Any] = field(default_factory=dict)


def pair_similarity(
    texts: pl.Series, i: np.ndarray, j: np.ndarray, settings: Settings, *, at_least: float = 0.0
) -> np.ndarray:
    """The configured exact similarity of each pair of normalised texts. With ``at_least`` > 0
    (Jaccard only), pairs below it may get -1.0 instead of their value (see :func:`verify.jaccard_pairs`)."""
    if i.size == 0:
        return np.zeros(0, dtype=np.float64)
    if settings.similarity == "edit":
        return verify.edit_similarity_pairs(texts, i, j)
    used = np.zeros(texts.len(), dtype=bool)
    used[i] = True
    used[j] = True
    rows = np.flatnonzero(used)
    local = np.cumsum(used) - 1  # row index -> position among the used rows
    sub = shingle(texts.gather(rows), settings.shingles, settings.shingle_n)
    return verify.jaccard_pairs(sub, local[i], local[j], at_least)


class _KeyMemo:
    """The band keys of the last LSH search, by text: the runner's leakage audit searches the texts
    that the step just searched (minus the rows it set aside), and band keys are a pure function of
    the text and the settings, so the audit looks them up instead of signing every text again.
    A lookup gives exactly what signing would give; only one search is kept (its texts and keys)."""

    def __init__(self) -> None:
        self.params: tuple | None = None
        self.texts: pl.Series | None = None
        self.keys: np.ndarray | None = None
        self.active: np.ndarray | None = None

    def store(self, params: tuple, texts: pl.Series, keys: np.ndarray, active: np.ndarray) -> None:
        self.params, self.texts, self.keys, self.active = params, texts, keys, active

    def clear(self) -> None:
        self.__init__()

    def lookup(self, params: tuple, texts: pl.Series) -> np.ndarray:
        """Position in the stored texts of each of ``texts`` (-1 when not stored)."""
        if self.params != params or self.texts is None:
            return np.full(texts.len(), -1, dtype=np.int64)
        stored = pl.DataFrame({"t": self.texts}).with_row_index("k").unique("t", keep="first", maintain_order=True)
        hit = pl.DataFrame({"t": texts}).join(stored, on="t", how="left", maintain_order="left")
        return hit.get_column("k").fill_null(-1).cast(pl.Int64).to_numpy()


_MEMO = _KeyMemo()


def forget_keys() -> None:
    """Drop the remembered band keys (the audit calls it when done)."""
    _MEMO.clear()


def _band_keys(
    texts: pl.Series, settings: Settings, bands: int, rows: int, *, reuse: bool = False, remember: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """(band keys (texts x bands), has-shingles flag) computed chunk by chunk. ``reuse``: take the
    keys of texts the last remembered search signed from it; ``remember``: keep these for reuse."""
    m = texts.len()
    params = (settings.shingles, settings.shingle_n, settings.permutations, bands, rows)
    keys = np.empty((m, bands), dtype=np.uint64)
    active = np.empty(m, dtype=bool)
    known = _MEMO.lookup(params, texts) if reuse else np.full(m, -1, dtype=np.int64)
    have = known >= 0
    if have.any():
        keys[have] = _MEMO.keys[known[have]]
        active[have] = _MEMO.active[known[have]]
    todo = np.flatnonzero(~have)
    values = texts.gather(todo).to_list() if todo.size < m else texts.to_list()
    for lo in range(0, todo.size, SIGN_CHUNK_TEXTS):  # one iteration per chunk of texts
        chunk = shingle(values[lo:lo + SIGN_CHUNK_TEXTS], settings.shingles, settings.shingle_n)
        sigs = minhash.signatures(chunk, settings.permutations)
        at = todo[lo:lo + sigs.shape[0]]
        keys[at] = lsh.band_keys(sigs, bands, rows)
        active[at] = chunk.counts > 0
    if remember:
        _MEMO.store(params, texts, keys, active)
    return keys, active


def _lsh_candidates(keys: np.ndarray, active: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    ids = np.flatnonzero(active)
    parts, large, pending = [], 0, 0
    for band in range(keys.shape[1]):  # one iteration per band
        p, n_large = lsh._bucket_pairs(ids, keys[ids, band])
        parts.append(p)
        large += n_large
        pending += p.size
        if pending > DEDUPE_EVERY_PAIRS:  # bands repeat most pairs: drop repeats as they come
            parts = [lsh.sorted_unique(np.concatenate(parts))]
            pending = parts[0].size
    pairs = lsh.sorted_unique(np.concatenate(parts)) if parts else np.zeros(0, dtype=np.uint64)
    return (pairs >> np.uint64(32)).astype(np.int64), (pairs & np.uint64(0xFFFFFFFF)).astype(np.int64), large


def find(
    texts: pl.Series,
    settings: Settings,
    *,
    pair_filter: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
    reuse_keys: bool = False,
    remember_keys: bool = False,
) -> Found:
    """Near-duplicate pairs and clusters among normalised ``texts`` (see the module docstring).

    ``pair_filter(i, j)`` (row indices) -> bool mask: LSH candidates it rejects are not verified
    (the audit needs only pairs across splits). ``remember_keys`` keeps this search's band keys
    for a later ``reuse_keys`` search (see :class:`_KeyMemo`); results are the same either way."""
    n_rows = texts.len()
    texts = texts.fill_null("")
    # 1. Identical texts: representative = first row of each distinct non-empty text.
    frame = pl.DataFrame({"t": texts}).with_row_index("pos")
    rep_of = frame.select(pl.col("pos").min().over("t").alias("rep")).get_column("rep").to_numpy().astype(np.int64)
    pos = np.arange(n_rows, dtype=np.int64)
    nonempty = (texts.str.len_bytes() > 0).to_numpy()
    copy = (rep_of != pos) & nonempty
    reps = np.flatnonzero((rep_of == pos) & nonempty)
    rep_texts = texts.gather(reps)

    facts: dict[str, Any] = {
        "method": settings.method,
        "shingles": {"kind": settings.shingles, "n": settings.shingle_n},
        "threshold": settings.threshold,
        "similarity": settings.similarity,
        "distinct_texts": int(reps.size),
    }
    if settings.method == "exhaustive":
        if settings.similarity == "edit":
            ci, cj = _all_index_pairs(reps.size)
            sim = pair_similarity(rep_texts, ci, cj, settings)
        else:
            sh = shingle(rep_texts, settings.shingles, settings.shingle_n)
            ci, cj, sim = exhaustive.all_pairs(sh, settings.threshold)
        facts["candidates"] = int(reps.size * (reps.size - 1) // 2)
    else:
        bands, rows, p_at = lsh.choose_bands(
            settings.threshold, settings.permutations, settings.target_recall, bands=settings.bands, rows=settings.rows
        )
        keys, active = _band_keys(rep_texts, settings, bands, rows, reuse=reuse_keys, remember=remember_keys)
        ci, cj, large = _lsh_candidates(keys, active)
        del keys
        n_candidates = int(ci.size)
        if pair_filter is not None:
            wanted = pair_filter(reps[ci], reps[cj])
            ci, cj = ci[wanted], cj[wanted]
        sim = pair_similarity(rep_texts, ci, cj, settings, at_least=settings.threshold)
        facts.update(
            permutations=settings.permutations, bands=bands, rows=rows,
            expected_recall_at_threshold=round(p_at, 6), candidates=n_candidates, large_buckets=large,
        )
    ok = sim >= settings.threshold
    i = reps[ci[ok]]
    j = reps[cj[ok]]
    s = sim[ok]
    facts["verified_pairs"] = int(i.size)
    # Copies of identical texts: linked to their representative with similarity 1.0.
    copies = np.flatnonzero(copy)
    facts["identical_copies"] = int(copies.size)
    all_i = np.concatenate([i, rep_of[copies]])
    all_j = np.concatenate([j, copies])
    all_s = np.concatenate([s, np.ones(copies.size)])
    order = np.lexsort((all_j, all_i))
    all_i, all_j, all_s = all_i[order], all_j[order], all_s[order]
    cluster = components(n_rows, all_i, all_j)
    return Found(i=all_i, j=all_j, similarity=all_s, cluster=cluster, facts=facts)


def _all_index_pairs(m: int) -> tuple[np.ndarray, np.ndarray]:
    if m > exhaustive.EXHAUSTIVE_MAX_ROWS:
        raise exhaustive.TooLargeForExhaustive(
            f"the exhaustive method accepts at most {exhaustive.EXHAUSTIVE_MAX_ROWS} texts; got {m}"
        )
    i, j = np.triu_indices(m, k=1)
    return i.astype(np.int64), j.astype(np.int64)
