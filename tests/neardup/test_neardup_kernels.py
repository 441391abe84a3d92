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


@pytest.mark.parametrize("kind, n", [("char", 1), ("char", 5), ("char", 9), ("word", 3)])
@pytest.mark.parametrize("chunk", [1, 37, 1 << 22])
def test_shingles_in_chunks_equal_the_numpy_definition(kind, n, chunk, monkeypatch):
    # shingle() fingerprints chunks of texts into one array; a chunk boundary must change nothing
    # (chunks of one code point put every text in a chunk of its own).
    monkeypatch.setattr(shingles, "CHUNK_CODEPOINTS", chunk)
    texts = _texts(70 + n, 300, 120) + ["x" * 100]
    got = shingle(texts, kind, n)
    ref_counts, ref_hashes = shingles._chunk_hashes_numpy(texts, kind, n)
    assert np.array_equal(np.diff(got.offsets), ref_counts)
    assert np.array_equal(got.hashes, ref_hashes)
    assert shingle([], kind, n).hashes.size == 0 and shingle([""], kind, n).offsets.tolist() == [0, 0]


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


@pytest.mark.parametrize("k", [1, 7, 128])
def test_one_permutation_kernel_equals_the_numpy_definition(k):
    sh = shingle(_texts(k + 1, 400, 200))
    assert (sh.counts == 0).any() and (sh.counts < k).any()  # empty texts, and texts that leave bins empty
    assert np.array_equal(minhash.one_permutation_signatures(sh, k), minhash.one_permutation_signatures_numpy(sh, k))


@pytest.mark.parametrize("bands, rows", [(21, 6), (1, 1), (3, 5)])
def test_band_key_kernel_equals_the_numpy_definition(bands, rows):
    rng = np.random.default_rng(bands)
    sigs = rng.integers(0, 2**32, size=(500, bands * rows), dtype=np.uint32)
    sigs[::7, :] = 0xFFFFFFFF
    assert np.array_equal(lsh.band_keys(sigs, bands, rows), lsh.band_keys_numpy(sigs, bands, rows))



def test_sorted_sets_equal_sorted_python_sets():
    # Reference: sorted(set(...)) in Python, per text. Spread-out fingerprints (as the shingler
    # makes them), values crowded into a few top-bit buckets, repeats, empty texts, and texts past
    # the bucket sort's size limit (sorted another way).
    from prep.neardup import kernels

    rng = np.random.default_rng(8)
    texts = []
    for t in range(400):
        n = int(rng.integers(0, 300)) if t % 50 else int(rng.integers(kernels._BUCKET_SORT_MAX, 2 * kernels._BUCKET_SORT_MAX))
        if t % 3 == 0:
            v = rng.integers(0, 2**64, size=n, dtype=np.uint64)
        elif t % 3 == 1:
            v = rng.integers(0, 50, size=n).astype(np.uint64)  # all in the lowest bucket, many repeats
        else:
            v = (rng.integers(0, 4, size=n).astype(np.uint64) << np.uint64(62)) | rng.integers(0, 2**20, size=n).astype(np.uint64)
        texts.append(v if t % 7 else v[:0])
    offsets = np.concatenate([[0], np.cumsum([v.size for v in texts])]).astype(np.int64)
    values, new_offsets = kernels.sorted_sets(np.concatenate(texts).astype(np.uint64), offsets)
    for t, v in enumerate(texts):
        assert values[new_offsets[t]:new_offsets[t + 1]].tolist() == sorted(set(v.tolist()))


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
    # Reference: every pair of rows sharing a key, by enumeration (a bucket above
    # MAX_BUCKET_ALL_PAIRS included: all its pairs too).
    rng = np.random.default_rng(9)
    ids = np.sort(rng.choice(10_000, size=2000, replace=False)).astype(np.int64)
    keys = rng.integers(0, 600, size=ids.size).astype(np.uint64)
    keys[rng.choice(ids.size, size=lsh.MAX_BUCKET_ALL_PAIRS + 40, replace=False)] = np.uint64(10**6)
    got, large = lsh._bucket_pairs(ids, keys)
    want = set()
    for key in np.unique(keys):
        members = sorted(ids[keys == key].tolist())
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
    assert search._MEMO.digests is not None
    assert leakage_audit(splits, ["title"], Settings()) == fresh
    assert search._MEMO.digests is None  # the audit releases them
    # Keys remembered for other settings are not used.
    find(step_texts, Settings(permutations=64), remember_keys=True)
    assert leakage_audit(splits, ["title"], Settings()) == fresh



def test_pairs_among_a_subset_of_a_remembered_search_equal_a_fresh_search(monkeypatch):
    # The audit's texts are the step's texts minus the rows it set aside: the verified pairs are
    # then looked up, not searched. The reference is a fresh search of the subset.
    rng = random.Random(5)
    words = "scooter bike dock unlock refund charge app map battery brake station ride helmet".split()
    base = [" ".join(rng.choice(words) for _ in range(12)) for _ in range(400)]
    texts = base + [t + " thanks" for t in base[:150]] + [t.replace("bike", "bikes") for t in base[:150]]
    step_texts = pl.Series("t", texts).unique(maintain_order=True)
    subset = step_texts.sample(fraction=0.6, seed=3, shuffle=True)
    settings = Settings(threshold=0.75)

    def keep_some(i, j):
        return (i + j) % 3 != 0

    search.forget_keys()
    fresh = find(subset, settings)
    fresh_filtered = find(subset, settings, pair_filter=keep_some)
    assert fresh.i.size > 20
    find(step_texts, settings, remember_keys=True)

    def no_search(*args, **kwargs):
        raise AssertionError("searched again")

    with monkeypatch.context() as m:
        m.setattr(search, "_lsh_candidates", no_search)
        looked_up = find(subset, settings, reuse_keys=True, reuse_pairs=True)
        looked_up_filtered = find(subset, settings, reuse_keys=True, reuse_pairs=True, pair_filter=keep_some)
    for a, b in ((fresh, looked_up), (fresh_filtered, looked_up_filtered)):
        assert np.array_equal(a.i, b.i) and np.array_equal(a.j, b.j)
        assert np.array_equal(a.similarity, b.similarity) and np.array_equal(a.cluster, b.cluster)
    # A text the remembered search did not see, or other settings: searched, not looked up.
    for other, other_settings in ((pl.concat([subset, pl.Series("t", ["a text never seen before here"])]), settings),
                                  (subset, Settings(threshold=0.7))):
        with monkeypatch.context() as m:
            m.setattr(search, "_lsh_candidates", no_search)
            with pytest.raises(AssertionError, match="searched again"):
                find(other, other_settings, reuse_keys=True, reuse_pairs=True)
    search.forget_keys()


def _random_sets(seed: int, m: int, subset: float = 0.8) -> tuple[Shingled, list[set[int]]]:
    """m fingerprint sets: variants of a few base sets with some elements swapped for fresh ones (so
    that pairs fall on both sides of every threshold), repeats inside a text, a few empty sets, and
    variants of a large base set that go past the last sketch level in many buckets, and subsets
    holding ceil(subset x size) of a base set (Jaccard just at or above ``subset``: the intersection
    they need is their whole size)."""
    rng = np.random.default_rng(seed)
    bases = [rng.integers(0, 2**64, size=int(rng.integers(1, 120)), dtype=np.uint64) for _ in range(12)]
    bases.append(rng.integers(0, 2**64, size=2500, dtype=np.uint64))
    parts = []
    for t in range(m):
        if t % 50 == 7:
            parts.append(np.zeros(0, dtype=np.uint64))
            continue
        base = bases[-1] if t % 40 == 3 else bases[int(rng.integers(0, len(bases) - 1))]
        v = base.copy()
        swap = rng.random(v.size) < (0.0 if t % 9 == 0 else rng.uniform(0.0, 0.4))  # some equal sets
        v[swap] = rng.integers(0, 2**64, size=int(swap.sum()), dtype=np.uint64)
        if t % 13 == 5:
            v = base[: int(np.ceil(subset * base.size))]
        parts.append(np.concatenate([v, v[: int(rng.integers(0, 3))]]))  # a few repeats
    sh = Shingled(offsets=np.concatenate([[0], np.cumsum([p.size for p in parts])]).astype(np.int64),
                  hashes=np.concatenate(parts).astype(np.uint64))
    return sh, [set(p.tolist()) for p in parts]


def test_set_sketches_equal_python_sets():
    # Reference: plain-Python sets, bucket counts by the fingerprint's low bits, and the bound
    # sum_w min(count_A(w), count_B(w)) >= |A & B| checked for every pair (exhaustive comparison).
    from prep.neardup import kernels

    sh, sets = _random_sets(11, 160)
    sizes, sketch, excess = kernels.set_sketches(sh.hashes, sh.offsets)
    buckets, levels = kernels.SKETCH_BUCKETS, kernels.SKETCH_LEVELS
    counts = np.zeros((len(sets), buckets), dtype=np.int64)
    for t, s in enumerate(sets):
        assert sizes[t] == len(s)
        for x in s:
            counts[t, x % buckets] += 1
        bits = np.unpackbits(sketch[t].view(np.uint8), bitorder="little").reshape(levels, buckets)
        for level in range(levels):
            assert np.array_equal(bits[level], (counts[t] > level).astype(np.uint8))
        assert excess[t] == np.maximum(counts[t] - levels, 0).sum()
    assert excess.max() > 0  # the large set goes past the last level
    # The bound the kernel uses (numpy's popcount here) against the bucket counts and the sets.
    pop = np.bitwise_count(sketch[:, None, :] & sketch[None, :, :]).sum(axis=2, dtype=np.int64)
    bound = pop + np.minimum(excess[:, None], excess[None, :])
    by_buckets = np.minimum(counts[:, None, :], counts[None, :, :]).sum(axis=2)
    assert (bound >= by_buckets).all()
    for a in range(len(sets)):
        for b in range(len(sets)):
            assert by_buckets[a, b] >= len(sets[a] & sets[b])


@pytest.mark.parametrize("threshold,bands", [(0.3, 4), (0.6, 4), (0.8, 4), (0.6, 21), (0.8, 9)])
def test_filtered_candidates_equal_brute_force(threshold, bands):
    # Reference: brute force over all pairs. The candidates are the pairs sharing a key in at least
    # one band (a bucket far larger than any other included); every candidate whose exact Jaccard
    # (Python sets) reaches the threshold must come out, nothing else than candidates may, and the
    # count of distinct candidates is exact. The result must not depend on the work split.
    sh, sets = _random_sets(int(threshold * 10), 300, threshold)
    from prep.neardup import kernels

    m = len(sets)
    rng = np.random.default_rng(5)
    keys = rng.integers(0, 90, size=(m, bands)).astype(np.uint64)
    if bands > 8:
        # Keys over the whole 64 bits, whose top bytes (the kernel's first test) often agree
        # while the keys differ: both branches of the byte test are taken.
        keys |= rng.integers(0, 3, size=(m, bands)).astype(np.uint64) << np.uint64(56)
        keys += rng.integers(0, 2, size=(m, bands)).astype(np.uint64) << np.uint64(40)
    keys[rng.choice(m, size=lsh.MAX_BUCKET_ALL_PAIRS + 30, replace=False), 2] = np.uint64(10**6)  # one large bucket
    sizes, sketch, excess = kernels.set_sketches(sh.hashes, sh.offsets)
    signed = search._Signed(keys=keys, active=sizes > 0, sizes=sizes, sketch=sketch, excess=excess)
    i, j, n_candidates, large = search._lsh_candidates(signed, threshold)
    active = np.flatnonzero(sizes > 0)
    want, candidates = set(), 0
    for x in active:
        for y in active[active > x]:
            if (keys[x] == keys[y]).any():
                candidates += 1
                a, b = sets[x], sets[y]
                if len(a & b) / len(a | b) >= threshold:
                    want.add((int(x), int(y)))
    got = list(zip(i.tolist(), j.tolist()))
    assert len(got) == len(set(got)) and got == sorted(got)
    assert want <= set(got)
    assert all((keys[x] == keys[y]).any() for x, y in got)
    assert n_candidates == candidates
    assert len(got) < candidates  # the bounds did drop pairs
    assert large == 1
    # The same pairs from one work item as from the split the search chose (threads).
    monkey = search._threads
    try:
        search._threads = lambda: 1
        one = search._lsh_candidates(signed, threshold)
    finally:
        search._threads = monkey
    assert np.array_equal(one[0], i) and np.array_equal(one[1], j) and one[2] == n_candidates


@pytest.mark.parametrize("threshold", [0.5, 0.8])
def test_search_verifies_the_same_pairs_as_verifying_every_candidate(threshold):
    # Reference: the numpy definition of the candidates (lsh.candidate_pairs: every pair sharing a
    # band key) with every candidate verified exactly. The search drops candidates by its bounds
    # before verifying; it must end with exactly the same verified pairs and candidate count.
    rng = random.Random(8)
    words = "scooter bike dock unlock refund charge app map battery brake station ride helmet lock".split()
    base = [" ".join(rng.choice(words) for _ in range(rng.randint(3, 30))) for _ in range(150)]
    texts = []
    for _ in range(1500):  # templated variants: many pairs near every threshold, some large buckets
        w = rng.choice(base).split()
        for _ in range(rng.randint(0, 4)):
            w[rng.randrange(len(w))] = rng.choice(words)
        texts.append(" ".join(w))
    # One long shared phrase and a short varying tail: buckets above MAX_BUCKET_ALL_PAIRS at 0.5.
    common = "the map will not load past the splash screen near the station"
    texts += [common + " " + " ".join(rng.choice(words) for _ in range(rng.randint(2, 8))) for _ in range(400)]
    distinct = pl.Series(list(dict.fromkeys(texts)))
    settings = Settings(threshold=threshold)
    found = find(distinct, settings)
    b, r, _ = lsh.choose_bands(threshold, settings.permutations)
    sh = shingle(distinct)
    ci, cj, _ = lsh.candidate_pairs(minhash.signatures_by(sh, settings.permutations, settings.signing), b, r, active=sh.counts > 0)
    sim = verify.jaccard_pairs(sh, ci, cj)
    ok = sim >= threshold
    assert found.facts["candidates"] == ci.size
    assert found.facts["exactly_verified"] < ci.size  # the bounds did drop candidates
    assert found.facts["large_buckets"] >= (1 if threshold == 0.5 else 0)
    assert np.array_equal(found.i, ci[ok]) and np.array_equal(found.j, cj[ok])
    assert np.array_equal(found.similarity, sim[ok])


def test_search_with_keys_signed_ahead_in_parts_equals_a_fresh_search(monkeypatch):
    # The Dask engine signs each partition on a worker (search.sign) and the client remembers the
    # parts (search.remember_signed): the step's search must then sign nothing and find exactly
    # what a fresh search finds. Parts overlap (a text in two partitions) and hold empty texts.
    from prep.neardup import minhash

    rng = random.Random(9)
    words = "scooter bike dock unlock refund charge app map battery brake station ride helmet".split()
    base = [" ".join(rng.choice(words) for _ in range(10)) for _ in range(250)]
    texts = pl.Series("t", base + [t + " please" for t in base[:90]] + ["", base[3]])
    settings = Settings(threshold=0.7)
    search.forget_keys()
    fresh = find(texts, settings)
    parts = [search.sign(texts.slice(a, 140), settings) for a in range(0, texts.len(), 120)]
    search.remember_signed(parts)

    def no_signing(*args, **kwargs):
        raise AssertionError("signed again")

    with monkeypatch.context() as m:
        m.setattr(minhash, "signatures", no_signing)
        ahead = find(texts, settings, reuse_keys=True, remember_keys=True)
    for name in ("i", "j", "similarity", "cluster"):
        assert np.array_equal(getattr(fresh, name), getattr(ahead, name))
    assert fresh.facts == ahead.facts
    search.forget_keys()
