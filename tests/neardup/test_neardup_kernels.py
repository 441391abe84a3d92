"""The compiled kernels of prep.neardup against their definitions: the numpy forms kept beside them
(shingle fingerprints, MinHash, band keys), plain-Python set arithmetic (exact Jaccard), brute-force
enumeration (LSH bucket pairs), and the leakage audit with and without the step's remembered keys.

These are exhaustive comparisons on random input, not outside references: the outside checks
(the S-curve, Broder's standard error, the exhaustive oracle) are in test_neardup_core.py and run
through the same kernels."""

from __future__ import annotations

import random

import numpy as np
import polars as pl
import pytest

from prep.neardup import Settings, find, lsh, minhash, search, shingles, verify
from prep.neardup.audit import leakage_audit
from prep.neardup.shingles import Shingled, shingle

ALPHABET = "abcde fghij  éü€😀"


def _texts(seed: int, m: int, max_len: int = 60) -> list[str]:
    rng = random.Random(seed)
    out = ["".join(rng.choice(ALPHABET) for _ in range(rng.randint(0, max_len))) for _ in range(m)]
    # Normalised texts have single inner spaces and no outer ones (word shingles rely on it).
    return [" ".join(t.split()) for t in out] + ["", "a", "abcd", "abcde", "ab cd"]


@pytest.mark.parametrize("kind, n", [("char", 1), ("char", 2), ("char", 5), ("char", 9), ("word", 1), ("word", 3)])
def test_shingle_kernel_equals_the_numpy_definition(kind, n):
    texts = _texts(n, 300)
    counts, hashes = shingles._chunk_hashes(texts, kind, n)
    ref_counts, ref_hashes = shingles._chunk_hashes_numpy(texts, kind, n)
    assert np.array_equal(counts, ref_counts)
    assert np.array_equal(hashes, ref_hashes)


def test_substring_kernel_equals_horner_in_python():
    # Reference: the polynomial hash written out in Python integers modulo 2**64.
    from prep.neardup import kernels

    base, salt, mask = int(shingles._BASE), int(shingles._LENGTH_SALT), 2**64 - 1
    text = "scooter ünlock 😀 dock"
    cps = np.frombuffer(text.encode("utf-32-le"), dtype=np.uint32)
    starts = np.array([0, 3, 8, 0, 20], dtype=np.int64)
    ends = np.array([5, 4, 17, 21, 21], dtype=np.int64)
    got = kernels.substring_hashes(cps, starts, ends, shingles._BASE, shingles._LENGTH_SALT)
    for s, e, h in zip(starts, ends, got):
        x = 0
        for c in cps[s:e]:
            x = (x * base + int(c) + 1) & mask
        x ^= ((int(e) - int(s)) * salt) & mask
        assert int(h) == int(shingles.splitmix64(np.array([x], dtype=np.uint64))[0])


@pytest.mark.parametrize("k", [1, 7, 128])
def test_minhash_kernel_equals_the_numpy_definition(k):
    sh = shingle(_texts(k, 400, 200))
    assert (sh.counts == 0).any()  # empty texts included
    assert np.array_equal(minhash.signatures(sh, k), minhash.signatures_numpy(sh, k))


@pytest.mark.parametrize("bands, rows", [(21, 6), (1, 1), (3, 5)])
def test_band_key_kernel_equals_the_numpy_definition(bands, rows):
    rng = np.random.default_rng(bands)
    sigs = rng.integers(0, 2**32, size=(500, bands * rows), dtype=np.uint32)
    sigs[::7, :] = 0xFFFFFFFF
    assert np.array_equal(lsh.band_keys(sigs, bands, rows), lsh.band_keys_numpy(sigs, bands, rows))


def test_jaccard_kernel_equals_python_sets():
    # Reference: |A & B| / |A | B| of Python sets; with a threshold, the decision and the values
    # of pairs at or above it must not change.
    rng = np.random.default_rng(4)
    pool = rng.integers(0, 2**64, size=60, dtype=np.uint64)
    sets = [rng.choice(pool, size=int(rng.integers(0, 40))) for _ in range(200)]  # repeats included
    sh = Shingled(offsets=np.concatenate([[0], np.cumsum([s.size for s in sets])]).astype(np.int64),
                  hashes=np.concatenate(sets).astype(np.uint64))
    i = rng.integers(0, 200, size=3000)
    j = rng.integers(0, 200, size=3000)
    exact = verify.jaccard_pairs(sh, i, j)
    for p in range(i.size):
        a, b = set(sets[i[p]].tolist()), set(sets[j[p]].tolist())
        assert exact[p] == (len(a & b) / len(a | b) if a | b else 0.0)
    for threshold in (0.3, 0.5, 0.8, 1.0):
        cut = verify.jaccard_pairs(sh, i, j, threshold)
        assert np.array_equal(cut >= threshold, exact >= threshold)
        assert np.array_equal(cut[exact >= threshold], exact[exact >= threshold])
    assert (verify.jaccard_pairs(sh, i, j, 0.5) < 0).any()  # the early stop did happen


def test_bucket_pairs_equal_brute_force():
    # Reference: every pair of rows sharing a key (small buckets), and for a bucket above
    # MAX_BUCKET_ALL_PAIRS each member paired with the bucket's smallest row index.
    rng = np.random.default_rng(9)
    ids = np.sort(rng.choice(10_000, size=2000, replace=False)).astype(np.int64)
    keys = rng.integers(0, 600, size=ids.size).astype(np.uint64)
    keys[rng.choice(ids.size, size=lsh.MAX_BUCKET_ALL_PAIRS + 40, replace=False)] = np.uint64(10**6)
    got, large = lsh._bucket_pairs(ids, keys)
    want = set()
    for key in np.unique(keys):
        members = sorted(ids[keys == key].tolist())
        if len(members) > lsh.MAX_BUCKET_ALL_PAIRS:
            want |= {(members[0], m) for m in members[1:]}
        else:
            want |= {(a, b) for x, a in enumerate(members) for b in members[x + 1:]}
    pairs = lsh.sorted_unique(got)
    assert pairs.size == got.size  # one band gives no pair twice
    assert set(zip((pairs >> np.uint64(32)).tolist(), (pairs & np.uint64(0xFFFFFFFF)).tolist())) == want
    assert large == 1


def test_audit_gives_the_same_counts_with_and_without_the_remembered_keys():
    rng = random.Random(2)
    words = "scooter bike dock unlock refund charge app map battery brake station ride helmet".split()
    base = [" ".join(rng.choice(words) for _ in range(12)) for _ in range(300)]
    texts = base + [t + " thanks" for t in base[:120]]
    rng.shuffle(texts)
    frame = pl.DataFrame({"title": texts})
    splits = {"train": frame[:250], "validation": frame[250:330], "test": frame[330:]}
    fresh = leakage_audit(splits, ["title"], Settings())
    assert sum(fresh["pairs"].values()) > 0
    # The step searched some of these texts (and others) just before: the audit reuses those band
    # keys and signs the rest, and the two must meet in the same buckets.
    step_texts = shingles.normalise_texts(pl.concat([frame[:300], pl.DataFrame({"title": ["an extra row"]})]), ["title"])
    find(step_texts, Settings(), remember_keys=True)
    assert search._MEMO.texts is not None
    assert leakage_audit(splits, ["title"], Settings()) == fresh
    assert search._MEMO.texts is None  # the audit releases them
    # Keys remembered for other settings are not used.
    find(step_texts, Settings(permutations=64), remember_keys=True)
    assert leakage_audit(splits, ["title"], Settings()) == fresh
