"""The near-duplicate search end to end: normalised texts in, verified pairs and clusters out.

1. Texts that are identical after normalisation are folded into one representative (the first
   one); its copies are linked to it with similarity 1.0. This is exact and keeps templated
   texts from filling LSH buckets.
2. ``minhash_lsh``: representatives are shingled and signed in chunks; of each text only its
   band keys, its shingle-set size and a 128-byte sketch of the set are kept (memory linear and
   small). Every LSH candidate pair (all pairs of every bucket, large buckets included) is
   examined once, in the first band where it collides, against two exact upper bounds of its
   Jaccard similarity (set sizes, and the sketch: see :func:`prep.neardup.kernels.filtered_pairs`);
   a pair that cannot reach the threshold is dropped there, and the remaining ones are verified by
   their exact similarity (Jaccard: a merge of sorted shingle sets that stops once the pair can no
   longer reach the threshold). The bounds never drop a pair at or above the threshold, so the
   verified pairs are those of verifying every candidate. ``exhaustive``: every pair, exactly.
3. Clusters are the connected components of the verified pairs.

The inner loops (fingerprints, MinHash, band keys, sketches, candidate bounds, Jaccard) are
compiled kernels (:mod:`prep.neardup.kernels`) that use both cores; the rest is numpy and polars.
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

# Texts are signed in chunks of this many, so that only their band keys and sketches outlive the chunk.
SIGN_CHUNK_TEXTS = 65_536


@dataclass(frozen=True)
class Settings:
    threshold: float = 0.8
    shingles: Literal["char", "word"] = "char"
    n: int | None = None
    permutations: int = minhash.DEFAULT_PERMUTATIONS
    signing: minhash.Signing = minhash.DEFAULT_SIGNING
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


def text_digests(texts: pl.Series) -> pl.DataFrame:
    """The digests (``_d0``, ``_d1``; :func:`prep.text.digest_exprs`) that identify each normalised
    text (null as ""): identical texts, remembered keys."""
    from prep.text import digest_exprs

    return pl.DataFrame({"_t": texts.fill_null("")}).select(digest_exprs(["_t"], "_d"))


class Texts:
    """Normalised texts as the search needs them: their digests and which are non-empty for all
    of them, the texts themselves only for the rows it asks for (:meth:`gather`). Built from a
    series (:meth:`of`: the local engine, tests) or from digests and a function that fetches the
    texts of given rows from where they are (the Dask engine's workers), so that the search
    moves texts only for rows in pairs that it must verify exactly."""

    def __init__(self, digests: pl.DataFrame, nonempty: np.ndarray, fetch: Callable[[np.ndarray], pl.Series]) -> None:
        self.digests = digests
        self.nonempty = nonempty
        self._fetch = fetch

    @classmethod
    def of(cls, texts: pl.Series) -> Texts:
        texts = texts.fill_null("")
        return cls(text_digests(texts), (texts.str.len_bytes() > 0).to_numpy(), texts.gather)

    def len(self) -> int:
        return self.digests.height

    def gather(self, rows: np.ndarray) -> pl.Series:
        """The texts of ``rows`` (positions), in that order."""
        return self._fetch(np.asarray(rows, dtype=np.int64))

    def take(self, rows: np.ndarray) -> Texts:
        """The texts of ``rows`` as a :class:`Texts` of their own (nothing fetched)."""
        rows = np.asarray(rows, dtype=np.int64)
        return Texts(self.digests[rows], self.nonempty[rows], lambda at: self._fetch(rows[at]))


def _as_texts(texts: pl.Series | Texts) -> Texts:
    return texts if isinstance(texts, Texts) else Texts.of(texts)


def pair_similarity(
    texts: pl.Series | Texts, i: np.ndarray, j: np.ndarray, settings: Settings, *, at_least: float = 0.0
) -> np.ndarray:
    """The configured exact similarity of each pair of normalised texts. With ``at_least`` > 0
    (Jaccard only), pairs below it may get -1.0 instead of their value (see :func:`verify.jaccard_pairs`)."""
    if i.size == 0:
        return np.zeros(0, dtype=np.float64)
    used = np.zeros(texts.len(), dtype=bool)
    used[i] = True
    used[j] = True
    rows = np.flatnonzero(used)
    local = np.cumsum(used) - 1  # row index -> position among the used rows
    subset = texts.gather(rows).fill_null("")  # only the texts of rows in a pair
    if settings.similarity == "edit":
        return verify.edit_similarity_pairs(subset, local[i], local[j])
    sub = shingle(subset, settings.shingles, settings.shingle_n)
    return verify.jaccard_pairs(sub, local[i], local[j], at_least)


def similarity_of(found: Found, texts: pl.Series | Texts, i: np.ndarray, j: np.ndarray, settings: Settings) -> np.ndarray:
    """The configured exact similarity of each pair (i[p], j[p]) of rows of ``found``'s search of
    ``texts``: a pair that the search verified (or linked as identical texts) takes the value it
    found, the others are computed (:func:`pair_similarity`). The same values as computing all: the
    search keeps the exact value of every verified pair, and identical texts have similarity 1.0.
    (The near-duplicate step asks this for every cluster member and its kept row; on 1M demo
    tickets 40% of those pairs were verified pairs, and computing only the rest took 3.7 s instead
    of 9.4 s.)"""
    out = np.full(i.size, np.nan, dtype=np.float64)
    if i.size == 0:
        return out
    a, b = np.minimum(i, j), np.maximum(i, j)
    if found.i.size:
        edges = pl.DataFrame({"a": found.i, "b": found.j, "s": found.similarity})
        hit = pl.DataFrame({"a": a, "b": b}).join(edges, on=["a", "b"], how="left", maintain_order="left")
        out = hit.get_column("s").to_numpy().astype(np.float64, copy=True)
    todo = np.flatnonzero(np.isnan(out))
    if todo.size:
        out[todo] = pair_similarity(texts, a[todo], b[todo], settings)
    return out


class _KeyMemo:
    """The band keys, set sketches and verified pairs of the last LSH search, by text digest (see
    :func:`text_digests`): the runner's
    leakage audit searches the texts that the step just searched (minus the rows it set aside), and
    all three are a pure function of the texts and the settings, so the audit looks them up instead
    of signing and verifying every text again. A lookup gives exactly what the search would give:
    keys and sketches are per text; two texts are a candidate pair exactly when they share a band
    key (every pair of every bucket is examined, whatever else is in it), the bounds and the exact
    similarity depend on the pair alone, so the verified pairs among a subset of the stored texts
    are the stored verified pairs between members of that subset. Only one search is kept."""

    def __init__(self) -> None:
        self.params: tuple | None = None
        self.digests: pl.DataFrame | None = None
        self.signed: _Signed | None = None
        self.pair_params: tuple | None = None
        self.pairs: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    def store(self, params: tuple, digests: pl.DataFrame, signed: _Signed) -> None:
        self.params, self.digests, self.signed = params, digests, signed
        self.pair_params = self.pairs = None

    def store_pairs(self, pair_params: tuple, i: np.ndarray, j: np.ndarray, similarity: np.ndarray) -> None:
        """The verified pairs (positions in the stored texts) of a search of all the stored texts."""
        self.pair_params, self.pairs = pair_params, (i, j, similarity)

    def clear(self) -> None:
        self.__init__()

    def lookup(self, params: tuple, digests: pl.DataFrame) -> np.ndarray:
        """Position in the stored texts of each text of ``digests`` (-1 when not stored)."""
        if self.params != params or self.digests is None:
            return np.full(digests.height, -1, dtype=np.int64)
        on = list(digests.columns)
        stored = self.digests.with_row_index("k").unique(on, keep="first", maintain_order=True)
        hit = digests.join(stored, on=on, how="left", maintain_order="left")
        return hit.get_column("k").fill_null(-1).cast(pl.Int64).to_numpy()

    def pairs_among(self, pair_params: tuple, digests: pl.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
        """(i, j, similarity), i < j positions in ``digests`` (distinct texts), sorted: the stored
        verified pairs between two of these texts; None unless every text is stored with these settings."""
        if self.pairs is None or self.pair_params != pair_params:
            return None
        at = self.lookup(pair_params[0], digests)
        if at.size and at.min() < 0:
            return None
        where = np.full(self.digests.height, -1, dtype=np.int64)
        where[at] = np.arange(at.size, dtype=np.int64)
        si, sj, ss = self.pairs
        a, b = where[si], where[sj]
        both = (a >= 0) & (b >= 0)
        a, b, ss = a[both], b[both], ss[both]
        i, j = np.minimum(a, b), np.maximum(a, b)
        order = np.lexsort((j, i))
        return i[order], j[order], ss[order]


@dataclass
class _Signed:
    """What the LSH search keeps of each text once it is signed: band keys (texts x bands), whether
    it has shingles, and for the exact bounds of :func:`kernels.filtered_pairs` its set size, sketch
    and sketch excess."""

    keys: np.ndarray
    active: np.ndarray
    sizes: np.ndarray
    sketch: np.ndarray
    excess: np.ndarray

    @classmethod
    def empty(cls, m: int, bands: int) -> _Signed:
        from prep.neardup.kernels import SKETCH_WORDS

        return cls(
            keys=np.empty((m, bands), dtype=np.uint64), active=np.empty(m, dtype=bool),
            sizes=np.empty(m, dtype=np.int64), sketch=np.empty((m, SKETCH_WORDS), dtype=np.uint64),
            excess=np.empty(m, dtype=np.int64),
        )

    def put(self, at: np.ndarray, other: _Signed, rows: np.ndarray | slice = slice(None)) -> None:
        for name in ("keys", "active", "sizes", "sketch", "excess"):
            getattr(self, name)[at] = getattr(other, name)[rows]


_MEMO = _KeyMemo()


def forget_keys() -> None:
    """Drop the remembered band keys (the audit calls it when done)."""
    _MEMO.clear()


def _band_keys(
    texts: Texts, settings: Settings, bands: int, rows: int, *, reuse: bool = False, remember: bool = False
) -> _Signed:
    """Band keys, shingle flags, set sizes and sketches of ``texts``, computed chunk by chunk (the
    shingles of a chunk are dropped once it is signed). ``reuse``: take what the last remembered
    search computed for the same texts; ``remember``: keep these for reuse."""
    from prep.neardup import kernels

    m = texts.len()
    params = _key_params(settings, bands, rows)
    signed = _Signed.empty(m, bands)
    known = _MEMO.lookup(params, texts.digests) if reuse else np.full(m, -1, dtype=np.int64)
    have = known >= 0
    if have.any():
        signed.put(have, _MEMO.signed, known[have])
    todo = np.flatnonzero(~have)
    values = texts.gather(todo) if todo.size else pl.Series([], dtype=pl.String)
    for lo in range(0, todo.size, SIGN_CHUNK_TEXTS):  # one iteration per chunk of texts
        # Python strings for one chunk at a time (all of a million texts at once: ~0.6-0.9 GiB of
        # objects, slower per text than chunks that stay in cache).
        chunk = shingle(values.slice(lo, SIGN_CHUNK_TEXTS), settings.shingles, settings.shingle_n)
        sigs = minhash.signatures_by(chunk, settings.permutations, settings.signing)
        at = todo[lo:lo + sigs.shape[0]]
        sizes, sketch, excess = kernels.set_sketches(chunk.hashes, chunk.offsets)
        signed.put(at, _Signed(lsh.band_keys(sigs, bands, rows), chunk.counts > 0, sizes, sketch, excess))
    if remember:
        _MEMO.store(params, texts.digests, signed)
    return signed


def _bands(settings: Settings) -> tuple[int, int, float]:
    """(bands, rows, candidate probability at the threshold) of ``settings``."""
    return lsh.choose_bands(
        settings.threshold, settings.permutations, settings.target_recall, bands=settings.bands, rows=settings.rows
    )


def _key_params(settings: Settings, bands: int, rows: int) -> tuple:
    """What band keys and sketches depend on, besides the text."""
    return (settings.shingles, settings.shingle_n, settings.permutations, settings.signing, bands, rows)


def _pair_params(settings: Settings, bands: int, rows: int) -> tuple:
    """What the verified pairs depend on, besides the texts (key parameters first)."""
    return (_key_params(settings, bands, rows), settings.threshold, settings.similarity)


def sign(texts: pl.Series, settings: Settings) -> tuple[tuple, pl.DataFrame, _Signed]:
    """(key parameters, digests of the distinct non-empty texts, their band keys and sketches) of
    normalised ``texts``: what an LSH search with ``settings`` computes for them. The Dask engine
    runs this on each partition on the workers and hands the results to :func:`remember_signed`
    on the client, so the search there looks the keys up instead of signing (the shingling and
    MinHash work is row-local; only digests, band keys, sizes and sketches travel, never a text)."""
    bands, rows, _ = _bands(settings)
    distinct = texts.fill_null("").unique(maintain_order=True)
    distinct = Texts.of(distinct.filter(distinct.str.len_bytes() > 0))
    return _key_params(settings, bands, rows), distinct.digests, _band_keys(distinct, settings, bands, rows)


def remember_signed(parts: list[tuple[tuple, pl.DataFrame, _Signed]]) -> None:
    """Remember the results of :func:`sign` (all with the same settings) for the next search with
    ``reuse_keys``; texts signed in several parts are looked up in the first."""
    if not parts or any(p[0] != parts[0][0] for p in parts):
        return
    digests = pl.concat([p[1] for p in parts]) if len(parts) > 1 else parts[0][1]
    bands = parts[0][2].keys.shape[1]
    signed = _Signed.empty(digests.height, bands)
    at = 0
    for _, part_digests, part_signed in parts:
        signed.put(slice(at, at + part_digests.height), part_signed)
        at += part_digests.height
    _MEMO.store(parts[0][0], digests, signed)


def _threads() -> int:
    import numba

    return max(1, int(numba.get_num_threads()))


def _lsh_candidates(signed: _Signed, threshold: float) -> tuple[np.ndarray, np.ndarray, int, int]:
    """(i, j, candidates, large buckets): the LSH candidate pairs (i < j, sorted) that pass the exact
    bounds of :func:`kernels.filtered_pairs`, the number of distinct candidate pairs, and the number
    of buckets with more than :data:`lsh.MAX_BUCKET_ALL_PAIRS` members (all their pairs are examined).

    Buckets come from one sort of the keys per band; the pairs of all buckets are then examined by
    the compiled kernel on every core, in work items of about equal pair counts (threads; the kernel
    releases the GIL). The result does not depend on the number of threads or items."""
    from prep.neardup import kernels

    ids = np.flatnonzero(signed.active)

    def buckets(band: int) -> tuple[np.ndarray, np.ndarray] | None:
        """(members, bucket starts) of the band's buckets of two or more texts, by key."""
        k = signed.keys[ids, band]
        order = np.argsort(k)
        k = k[order]
        dup = k[1:] == k[:-1]
        if not dup.any():
            return None
        in_bucket = np.zeros(k.size, dtype=bool)
        in_bucket[1:] = dup
        in_bucket[:-1] |= dup
        k = k[in_bucket]
        new = np.ones(k.size, dtype=bool)
        new[1:] = k[1:] != k[:-1]
        return ids[order[in_bucket]], np.flatnonzero(new)

    n_bands = signed.keys.shape[1]
    if _threads() > 1 and ids.size >= 50_000:  # numpy's sort releases the GIL: bands on threads
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=_threads()) as pool:
            per_band = list(pool.map(buckets, range(n_bands)))
    else:
        per_band = [buckets(band) for band in range(n_bands)]
    member_parts, start_parts, size_parts, band_parts = [], [], [], []
    offset = 0
    for band, found in enumerate(per_band):  # one iteration per band
        if found is None:
            continue
        members, starts = found
        member_parts.append(members)
        start_parts.append(starts + offset)
        size_parts.append(np.diff(np.append(starts, members.size)))
        band_parts.append(np.full(starts.size, band, dtype=np.int64))
        offset += members.size
    del per_band
    if not member_parts:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, 0, 0
    members = np.concatenate(member_parts)
    starts = np.concatenate(start_parts)
    sizes = np.concatenate(size_parts)
    bands = np.concatenate(band_parts)
    large = int(np.sum(sizes > lsh.MAX_BUCKET_ALL_PAIRS))
    # Work items: ranges of buckets holding about equal numbers of pairs.
    work = np.cumsum(sizes * (sizes - 1) // 2)
    n_items = 4 * _threads()
    cuts = np.searchsorted(work, np.linspace(0, work[-1], n_items + 1)[1:-1], side="right")
    bounds = np.unique(np.concatenate([[0], cuts, [sizes.size]]))
    keys = np.ascontiguousarray(signed.keys)
    key_bytes = kernels.key_bytes(keys)

    def run(item: int):
        return kernels.filtered_pairs(
            members, starts, sizes, bands, keys, key_bytes, signed.sizes, signed.sketch, signed.excess,
            float(threshold), int(bounds[item]), int(bounds[item + 1]),
        )

    if bounds.size > 2 and _threads() > 1:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=_threads()) as pool:
            results = list(pool.map(run, range(bounds.size - 1)))
    else:
        results = [run(item) for item in range(bounds.size - 1)]
    n_candidates = sum(r[2] for r in results)
    i = np.concatenate([r[0] for r in results])
    j = np.concatenate([r[1] for r in results])
    packed = np.sort((i.astype(np.uint64) << np.uint64(32)) | j.astype(np.uint64))
    return (packed >> np.uint64(32)).astype(np.int64), (packed & np.uint64(0xFFFFFFFF)).astype(np.int64), n_candidates, large


def find(
    texts: pl.Series | Texts,
    settings: Settings,
    *,
    pair_filter: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
    reuse_keys: bool = False,
    reuse_pairs: bool = False,
    remember_keys: bool = False,
) -> Found:
    """Near-duplicate pairs and clusters among normalised ``texts`` (see the module docstring).

    ``pair_filter(i, j)`` (row indices) -> bool mask: LSH candidates it rejects are not verified
    (the audit needs only pairs across splits). ``remember_keys`` keeps this search's band keys
    and verified pairs for a later search: ``reuse_keys`` looks up the keys of texts remembered
    (by this or by :func:`remember_signed`), ``reuse_pairs`` takes the verified pairs when every
    text was in the remembered search (see :class:`_KeyMemo`); results are the same either way."""
    texts = _as_texts(texts)
    n_rows = texts.len()
    # 1. Identical texts (same digests): representative = first row of each distinct non-empty text.
    on = list(texts.digests.columns)
    rep_of = (
        texts.digests.with_row_index("pos")
        .select(pl.col("pos").min().over(on).alias("rep"))
        .get_column("rep").to_numpy().astype(np.int64)
    )
    pos = np.arange(n_rows, dtype=np.int64)
    nonempty = texts.nonempty
    copy = (rep_of != pos) & nonempty
    reps = np.flatnonzero((rep_of == pos) & nonempty)
    rep_texts = texts.take(reps)

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
            sh = shingle(rep_texts.gather(np.arange(reps.size)), settings.shingles, settings.shingle_n)
            ci, cj, sim = exhaustive.all_pairs(sh, settings.threshold)
        facts["candidates"] = int(reps.size * (reps.size - 1) // 2)
    else:
        bands, rows, p_at = _bands(settings)
        facts.update(
            permutations=settings.permutations, signing=settings.signing, bands=bands, rows=rows, expected_recall_at_threshold=round(p_at, 6)
        )
        pair_params = _pair_params(settings, bands, rows)
        known = _MEMO.pairs_among(pair_params, rep_texts.digests) if reuse_pairs else None
        if known is not None:  # every text was in the remembered search: its verified pairs
            ci, cj, sim = known
            if pair_filter is not None:
                wanted = pair_filter(reps[ci], reps[cj])
                ci, cj, sim = ci[wanted], cj[wanted], sim[wanted]
            facts["pairs_from_remembered_search"] = True
        else:
            signed = _band_keys(rep_texts, settings, bands, rows, reuse=reuse_keys, remember=remember_keys)
            # Candidates whose exact bounds already rule them out are not verified (same result).
            bound = settings.threshold if settings.similarity == "jaccard" else 0.0
            ci, cj, n_candidates, large = _lsh_candidates(signed, bound)
            del signed
            if pair_filter is not None:
                wanted = pair_filter(reps[ci], reps[cj])
                ci, cj = ci[wanted], cj[wanted]
            sim = pair_similarity(rep_texts, ci, cj, settings, at_least=settings.threshold)
            facts.update(
                candidates=n_candidates, large_buckets=large,
                exactly_verified=int(ci.size),  # candidates left by the bounds (and the pair filter)
            )
            if remember_keys and pair_filter is None:
                kept = sim >= settings.threshold
                _MEMO.store_pairs(pair_params, ci[kept], cj[kept], sim[kept])
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
