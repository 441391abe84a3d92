"""Locality-sensitive hashing by banding, and the choice of bands and rows.

A signature of k values is cut into b bands of r rows; two texts become a candidate pair when
they agree on every row of at least one band. For a pair of Jaccard similarity s this happens
with probability 1 - (1 - s**r)**b (Leskovec, Rajaraman, Ullman, Mining of Massive Datasets,
3rd ed., section 3.4.2). prep does not trade recall for fewer candidates: :func:`choose_bands`
picks the largest r (fewest false candidates) whose curve still reaches the target recall at the
threshold itself, and every candidate is then verified exactly.
"""

from __future__ import annotations

import numpy as np

from prep.neardup.shingles import splitmix64

DEFAULT_TARGET_RECALL = 0.99
# Buckets with more members than this are counted and reported (fact ``large_buckets``): their
# pairs grow with the square of their size. All their pairs are still candidates (an earlier
# version linked them as a star, which could miss pairs); the search examines them with exact
# bounds before verifying (:func:`prep.neardup.kernels.filtered_pairs`). Common practice, no source.
MAX_BUCKET_ALL_PAIRS = 256


def candidate_probability(s: float | np.ndarray, bands: int, rows: int) -> float | np.ndarray:
    """1 - (1 - s**r)**b: the chance that a pair of Jaccard similarity s becomes a candidate."""
    return 1.0 - (1.0 - np.asarray(s, dtype=float) ** rows) ** bands


def choose_bands(
    threshold: float,
    permutations: int,
    target_recall: float = DEFAULT_TARGET_RECALL,
    *,
    bands: int | None = None,
    rows: int | None = None,
) -> tuple[int, int, float]:
    """(b, r, candidate probability at the threshold) for ``permutations`` MinHash values.

    Pinned ``bands`` and ``rows`` are returned as they are (b * r must not exceed the
    permutations). Otherwise r is the largest value with b = permutations // r bands reaching
    ``target_recall`` at the threshold; r = 1 (b = permutations) when none does, which gives the
    highest recall the permutations allow.
    """
    if not 0.0 < threshold <= 1.0:
        raise ValueError("threshold must be in (0, 1]")
    if (bands is None) != (rows is None):
        raise ValueError("pin both bands and rows, or neither")
    if bands is not None and rows is not None:
        if bands < 1 or rows < 1 or bands * rows > permutations:
            raise ValueError(f"bands x rows must be between 1 and the permutations ({permutations})")
        return bands, rows, float(candidate_probability(threshold, bands, rows))
    best = (permutations, 1)
    for r in range(1, permutations + 1):  # at most k iterations of scalar arithmetic
        b = permutations // r
        if candidate_probability(threshold, b, r) >= target_recall:
            best = (b, r)
    b, r = best
    return b, r, float(candidate_probability(threshold, b, r))


def band_keys(sigs: np.ndarray, bands: int, rows: int) -> np.ndarray:
    """uint64 array (texts x bands): a fingerprint of each band's r values (SplitMix64 chain; the
    compiled form of :func:`band_keys_numpy`)."""
    from prep.neardup import kernels

    return kernels.band_keys(np.ascontiguousarray(sigs), bands, rows)


def band_keys_numpy(sigs: np.ndarray, bands: int, rows: int) -> np.ndarray:
    """:func:`band_keys` in numpy: key = band + 1, then key = splitmix64(key ^ ((sig << 16) + j))
    for each row j of the band (the reference)."""
    m = sigs.shape[0]
    keys = np.empty((m, bands), dtype=np.uint64)
    with np.errstate(over="ignore"):
        for band in range(bands):  # b x r vector operations, independent of the number of texts
            key = np.full(m, np.uint64(band + 1), dtype=np.uint64)
            for j in range(rows):
                key = splitmix64(key ^ (sigs[:, band * rows + j].astype(np.uint64) << np.uint64(16)) + np.uint64(j))
            keys[:, band] = key
    return keys


def _bucket_pairs(ids: np.ndarray, keys: np.ndarray) -> tuple[np.ndarray, int]:
    """Candidate pairs (as i << 32 | j with i < j) from one band: every pair of rows sharing a key,
    and the count of buckets above :data:`MAX_BUCKET_ALL_PAIRS` members. The numpy definition of
    the candidates; the search enumerates them in a compiled kernel instead (same pairs)."""
    if keys.size < 2:
        return np.zeros(0, dtype=np.uint64), 0
    order = np.argsort(keys)
    k = keys[order]
    dup = k[1:] == k[:-1]
    if not dup.any():
        return np.zeros(0, dtype=np.uint64), 0
    # Only rows in buckets of two or more matter; keep those (usually a small share).
    in_bucket = np.zeros(k.size, dtype=bool)
    in_bucket[1:] = dup
    in_bucket[:-1] |= dup
    k = k[in_bucket]
    members = ids[order[in_bucket]]
    new = np.ones(k.size, dtype=bool)
    new[1:] = k[1:] != k[:-1]
    start_pos = np.flatnonzero(new)
    sizes = np.diff(np.append(start_pos, k.size))
    size_of = np.repeat(sizes, sizes)
    start_of = np.repeat(start_pos, sizes)
    pos = np.arange(k.size)
    # All pairs: position p pairs with p+1 .. end-1 of its bucket.
    partners = start_of + size_of - 1 - pos
    left = np.repeat(pos, partners)
    first = np.cumsum(partners) - partners
    right = left + 1 + (np.arange(left.size) - np.repeat(first, partners))
    i, j = members[left].astype(np.uint64), members[right].astype(np.uint64)
    lo, hi = np.minimum(i, j), np.maximum(i, j)
    return (lo << np.uint64(32)) | hi, int(np.sum(sizes > MAX_BUCKET_ALL_PAIRS))


def sorted_unique(values: np.ndarray) -> np.ndarray:
    """np.unique of a 1-D array by a plain sort (numpy's SIMD sort; np.unique hashes first)."""
    if values.size == 0:
        return values
    values = np.sort(values)
    keep = np.ones(values.size, dtype=bool)
    np.not_equal(values[1:], values[:-1], out=keep[1:])
    return values[keep]


def candidate_pairs(sigs: np.ndarray, bands: int, rows: int, active: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, int]:
    """(i, j, large buckets): unique candidate pairs i < j (int64 row indices, sorted) over all bands.

    ``active`` (bool per row) limits the search to those rows (e.g. rows with shingles).
    """
    ids = np.arange(sigs.shape[0], dtype=np.int64) if active is None else np.flatnonzero(active)
    keys = band_keys(sigs[ids], bands, rows)
    parts, large = [], 0
    for band in range(bands):  # one iteration per band
        p, n_large = _bucket_pairs(ids, keys[:, band])
        parts.append(p)
        large += n_large
    pairs = sorted_unique(np.concatenate(parts)) if parts else np.zeros(0, dtype=np.uint64)
    return (pairs >> np.uint64(32)).astype(np.int64), (pairs & np.uint64(0xFFFFFFFF)).astype(np.int64), large
