"""Tests of prep.neardup against outside references: the S-curve formula and its worked example
(Leskovec, Rajaraman, Ullman, Mining of Massive Datasets, ch. 3), the MinHash standard error
(Broder 1997), plain-Python set arithmetic, and the exhaustive all-pairs oracle."""

from __future__ import annotations

import random

import numpy as np
import polars as pl
from hypothesis import given, settings
from hypothesis import strategies as st
import pytest

from prep.neardup import (
    EXHAUSTIVE_MAX_ROWS, Settings, TooLargeForExhaustive, all_pairs, candidate_probability, choose_bands,
    components, find, normalise_texts, shingle, signatures,
)
from prep.neardup.minhash import signatures_by
from prep.neardup.shingles import Shingled

WORDS = ("scooter bike dock unlock refund charge app map battery brake station ride helmet lock "
         "account card payment receipt parking zone speed light bell seat tyre crash lost found").split()


# --- the S-curve and the choice of bands ------------------------------------------------------------


@pytest.mark.parametrize("s, expected", [
    # Mining of Massive Datasets, 3rd ed., section 3.4.2, Figure 3.8: b = 20, r = 5.
    (0.2, 0.006), (0.3, 0.047), (0.4, 0.186), (0.5, 0.470), (0.6, 0.802), (0.7, 0.975), (0.8, 0.9996),
])
def test_s_curve_matches_the_published_table(s, expected):
    assert candidate_probability(s, 20, 5) == pytest.approx(expected, abs=0.0006)


def test_s_curve_is_the_formula():
    # 1 - (1 - s^r)^b, evaluated in plain Python (MMDS section 3.4.2).
    for s in (0.1, 0.55, 0.9):
        for b, r in ((1, 1), (7, 3), (32, 4)):
            assert candidate_probability(s, b, r) == pytest.approx(1 - (1 - s**r) ** b, rel=1e-12)


@pytest.mark.parametrize("threshold", [0.5, 0.6, 0.7, 0.8, 0.9, 0.95])
@pytest.mark.parametrize("k", [16, 64, 128, 256])
def test_chosen_bands_reach_the_target_recall(threshold, k):
    b, r, p = choose_bands(threshold, k, 0.99)
    assert b * r <= k
    assert p == pytest.approx(1 - (1 - threshold**r) ** b)
    if candidate_probability(threshold, k, 1) >= 0.99:  # reachable at all with k permutations
        assert p >= 0.99
        # r is the largest that reaches it: one more row per band falls short.
        assert candidate_probability(threshold, k // (r + 1), r + 1) < 0.99 or k // (r + 1) == 0


def test_more_permutations_never_lose_the_target():
    # Feasibility is monotone: once k permutations reach the target recall at the threshold,
    # every larger k does too (b = k // r can only grow). The recall *above* the target is not
    # monotone: the rule spends extra permutations on more rows per band (fewer candidates).
    for threshold in (0.7, 0.8, 0.9):
        reached = False
        for k in range(8, 300):
            _, _, p = choose_bands(threshold, k, 0.99)
            if reached:
                assert p >= 0.99, (threshold, k, p)
            reached = reached or p >= 0.99
        assert reached


def test_pinned_bands_and_rows_are_honoured():
    assert choose_bands(0.8, 128, bands=20, rows=5) == (20, 5, pytest.approx(0.99965, abs=1e-5))
    with pytest.raises(ValueError):
        choose_bands(0.8, 64, bands=20, rows=5)
    with pytest.raises(ValueError):
        choose_bands(0.8, 128, bands=20)


# --- shingling ---------------------------------------------------------------------------------------


def _char_set(text: str, n: int) -> set[str]:
    if not text:
        return set()
    return {text[i:i + n] for i in range(len(text) - n + 1)} if len(text) >= n else {text}


def _word_set(text: str, n: int) -> set[tuple[str, ...]]:
    words = text.split()
    if not words:
        return set()
    return {tuple(words[i:i + n]) for i in range(len(words) - n + 1)} if len(words) >= n else {tuple(words)}


def _jaccard(a: set, b: set) -> float:
    return len(a & b) / len(a | b) if a | b else 0.0


def _random_texts(rng: random.Random, m: int) -> list[str]:
    out = []
    for _ in range(m):
        out.append(" ".join(rng.choice(WORDS) for _ in range(rng.randint(0, 9))) + rng.choice(["", " é", " ü€"]))
    return [t.strip() for t in out]


@pytest.mark.parametrize("kind, n, ref", [("char", 5, _char_set), ("char", 2, _char_set), ("word", 2, _word_set), ("word", 3, _word_set)])
def test_fingerprint_jaccard_equals_plain_python_sets(kind, n, ref):
    # Reference: Python sets of substrings / word tuples; fingerprints must give the same Jaccard.
    rng = random.Random(3)
    texts = _random_texts(rng, 120)
    sh = shingle(texts, kind, n)
    sets = [set(sh.hashes[sh.offsets[t]:sh.offsets[t + 1]].tolist()) for t in range(len(texts))]
    for t, text in enumerate(texts):
        assert len(sets[t]) == len(ref(text, n))
    for _ in range(400):
        a, b = rng.randrange(len(texts)), rng.randrange(len(texts))
        assert _jaccard(sets[a], sets[b]) == pytest.approx(_jaccard(ref(texts[a], n), ref(texts[b], n)))


def test_fingerprints_are_stable():
    # Pinned values: a change here changes every stored signature and cluster; bump HASH_SEED on purpose only.
    sh = shingle(["hello"], "char", 5)
    assert sh.hashes.tolist() == [int(sh.hashes[0])]
    again = shingle(["x hello y"], "char", 5)
    assert int(sh.hashes[0]) in again.hashes.tolist()
    assert int(sh.hashes[0]) == PINNED_HELLO


# Computed once by this implementation (not from an outside source): a regression pin.
PINNED_HELLO = 6047951329601383810


def test_normalise_texts():
    frame = pl.DataFrame({"a": ["Re: Scooter  LOCKED!", None, "  "], "b": ["Ünlock, please", "x", None]})
    assert normalise_texts(frame, ["a", "b"]).to_list() == ["re scooter locked ünlock please", "x", ""]
    assert normalise_texts(frame, ["a"], "remove").to_list() == ["re scooter locked", "", ""]
    assert normalise_texts(frame, ["a"], "keep").to_list() == ["re: scooter locked!", "", ""]



def _plain_compared(frame: pl.DataFrame, columns: list[str], punctuation: str) -> list[str]:
    """normalise_texts as first written: one plain expression per stage (the definition)."""
    text = pl.concat_str([pl.col(c) for c in columns], separator=" ", ignore_nulls=True).fill_null("").str.to_lowercase()
    if punctuation != "keep":
        text = text.str.replace_all(r"[\p{P}\p{S}]", " " if punctuation == "space" else "")
    text = text.str.replace_all(r"\s+", " ").str.strip_chars(" ")
    return frame.select(text).to_series().to_list()


@settings(max_examples=300, deadline=None)
@given(st.lists(st.text(alphabet=st.sampled_from(list("ab Z,.!-_$€\t\n\r\x0b\x0c\x85\xa0\u2003\u3000\u2028«»¿")), max_size=12), max_size=6))
def test_normalise_texts_equals_plain_expressions(values):
    # The match-only-where-it-changes rewrites against the plain expressions they replace.
    frame = pl.DataFrame({"a": values, "b": list(reversed(values))}, schema={"a": pl.String, "b": pl.String})
    for punctuation in ("space", "remove", "keep"):
        assert normalise_texts(frame, ["a", "b"], punctuation).to_list() == _plain_compared(frame, ["a", "b"], punctuation)


def test_normalise_texts_every_mark_and_space_in_slices():
    # Every code point with the White_Space property or in a P*/S* category (Unicode character
    # database via Python's unicodedata), each between letters and in runs, over enough rows that
    # the table is cut into slices on threads (prep.text.PARALLEL_FROM_ROWS).
    import sys
    import unicodedata

    from prep.text import PARALLEL_FROM_ROWS

    marks = [chr(c) for c in range(sys.maxunicode + 1)
             if unicodedata.category(chr(c))[0] in "PS" or chr(c).isspace()]
    values = [f"x{m}y {m}{m} z{m}" for m in marks]
    values = (values * (PARALLEL_FROM_ROWS // len(values) + 2))[: PARALLEL_FROM_ROWS + 7]
    frame = pl.DataFrame({"a": values})
    for punctuation in ("space", "remove", "keep"):
        assert normalise_texts(frame, ["a"], punctuation).to_list() == _plain_compared(frame, ["a"], punctuation)


# --- MinHash -------------------------------------------------------------------------------------


@pytest.mark.parametrize("signing", ["permutations", "one_permutation"])
def test_minhash_estimate_within_three_standard_errors(signing):
    # Broder 1997: the share of equal signature positions is an unbiased estimate of J with
    # variance J(1-J)/k; within 3 standard errors in >= 99% of cases (normal approximation).
    # One permutation hashing with optimal densification: every position agrees with probability
    # J exactly (Shrivastava 2017, ICML; recalled from memory), with a variance no larger than Broder's when
    # the sets hold more shingles than k has bins (Li, Owen, Zhang 2012): the same bound here, on
    # set sizes of 20 to 400 (ticket texts hold about 50 to 300 character 5-grams).
    rng = np.random.default_rng(11)
    k, trials, inside = 128, 400, 0
    offsets, hashes, truth = [0], [], []
    for _ in range(trials):
        size_a, size_b = rng.integers(20, 400, size=2)
        common = int(rng.integers(0, min(size_a, size_b) + 1))
        pool = rng.integers(0, 2**63, size=size_a + size_b - common, dtype=np.uint64)
        a = pool[:size_a]
        b = np.concatenate([pool[:common], pool[size_a:]])
        truth.append(common / (size_a + size_b - common))
        hashes += [a, b]
        offsets += [offsets[-1] + a.size, offsets[-1] + a.size + b.size]
    sig = signatures_by(Shingled(np.array(offsets), np.concatenate(hashes)), k, signing)
    for t in range(trials):
        est = float(np.mean(sig[2 * t] == sig[2 * t + 1]))
        j = truth[t]
        se = np.sqrt(j * (1 - j) / k)
        inside += abs(est - j) <= 3 * se + 1e-12
    assert inside / trials >= 0.99


# --- LSH against the exhaustive oracle -------------------------------------------------------------


def _planted(rng: random.Random, m: int) -> list[str]:
    """Random word texts, a third of them copied with one small edit (a near duplicate)."""
    vocab = ["".join(rng.choice("abcdefghijklmnopqrstuvwxyz") for _ in range(rng.randint(3, 8))) for _ in range(3000)]
    base = [" ".join(rng.choice(vocab) for _ in range(rng.randint(8, 30))) for _ in range(m)]
    out = list(base)
    for t in rng.sample(range(m), m // 3):
        words = base[t].split()
        edit = rng.choice(["re", "sig", "typo", "extra"])
        if edit == "re":
            words = ["re"] + words
        elif edit == "sig":
            words += ["sent", "from", "my", "phone"]
        elif edit == "typo":
            i = rng.randrange(len(words))
            words[i] = words[i][::-1]
        else:
            words += [rng.choice(WORDS) for _ in range(4)]
        out.append(" ".join(words))
    rng.shuffle(out)
    return out


@pytest.mark.parametrize("signing", ["one_permutation", "permutations"])
@pytest.mark.parametrize("threshold", [0.7, 0.8])
def test_lsh_finds_what_the_oracle_finds(threshold, signing):
    rng = random.Random(int(threshold * 10))
    texts = pl.Series(_planted(rng, 1500))
    settings = Settings(threshold=threshold, signing=signing)
    found = find(texts, settings)
    oracle = find(texts, Settings(threshold=threshold, method="exhaustive"))
    assert oracle.i.size > 250
    got = dict(zip(zip(found.i.tolist(), found.j.tolist()), found.similarity.tolist()))
    want = dict(zip(zip(oracle.i.tolist(), oracle.j.tolist()), oracle.similarity.tolist()))
    # Precision 1: every reported pair is above the threshold, with the oracle's exact value.
    assert set(got) <= set(want)
    for pair, s in got.items():
        assert s >= threshold and s == pytest.approx(want[pair])
    # Recall: misses allowed only as the S-curve predicts (expected misses + 3 sigma, at least 1).
    b, r, _ = choose_bands(threshold, 128)
    miss_p = 1 - candidate_probability(np.array(list(want.values())), b, r)
    allowed = miss_p.sum() + 3 * np.sqrt((miss_p * (1 - miss_p)).sum()) + 1
    assert len(set(want) - set(got)) <= allowed
    # Same clusters as the oracle's whenever nothing was missed.
    if set(want) == set(got):
        assert np.array_equal(found.cluster, oracle.cluster)


def test_exhaustive_refuses_large_inputs():
    sh = shingle(["a"] * 5, "char", 5)
    with pytest.raises(TooLargeForExhaustive):
        all_pairs(sh, 0.8, max_rows=4)
    assert EXHAUSTIVE_MAX_ROWS == 20_000


# --- clusters ------------------------------------------------------------------------------------------


def test_components_are_transitive_and_numbered_by_first_row():
    # Reference: a plain-Python union-find.
    rng = random.Random(5)
    n = 300
    edges = [tuple(sorted(rng.sample(range(n), 2))) for _ in range(200)]
    parent = list(range(n))

    def root(x):
        while parent[x] != x:
            x = parent[x]
        return x

    for a, b in edges:
        parent[root(a)] = root(b)
    labels = components(n, np.array([e[0] for e in edges]), np.array([e[1] for e in edges]))
    in_edge = {x for e in edges for x in e}
    for a in range(n):
        assert (labels[a] >= 0) == (a in in_edge)
        for b in range(a + 1, n):
            if a in in_edge and b in in_edge:
                assert (labels[a] == labels[b]) == (root(a) == root(b))
    firsts = [int(np.flatnonzero(labels == c)[0]) for c in range(labels.max() + 1)]
    assert firsts == sorted(firsts)


def test_identical_texts_cluster_and_empty_texts_never_do():
    texts = pl.Series(["scooter will not unlock at the dock", "", "scooter will not unlock at the dock", "", "x"])
    found = find(texts, Settings())
    assert found.cluster.tolist() == [0, -1, 0, -1, -1]
    assert found.similarity.tolist() == [1.0]


def test_edit_similarity_option():
    texts = pl.Series(["the scooter at the dock will not unlock", "the scooter at the dock will not unlok", "refund please"])
    found = find(texts, Settings(similarity="edit", threshold=0.9))
    assert (found.i.tolist(), found.j.tolist()) == ([0], [1])
    # rapidfuzz's Indel ratio: 1 - 1/(39+38) deletions/insertions -> (77-1)/77.
    assert found.similarity[0] == pytest.approx(1 - 1 / 77)


@pytest.mark.parametrize("similarity", ["jaccard", "edit"])
def test_similarity_of_found_pairs_equals_computing_every_pair(similarity):
    # Reference: plain-Python character 5-gram sets (Jaccard) and rapidfuzz's Indel ratio (edit),
    # computed for every asked pair, whether or not the search verified it.
    from rapidfuzz import fuzz

    from prep.neardup.search import similarity_of

    rng = random.Random(11)
    values = _planted(rng, 300)
    values += values[:20]  # identical copies: linked with similarity 1.0
    texts = pl.Series(values)
    settings = Settings(threshold=0.7, similarity=similarity)
    found = find(texts, settings)
    assert found.i.size > 50
    # Every verified pair both ways round, pairs within clusters that were not verified, and
    # unrelated pairs.
    i = np.concatenate([found.i, found.j, rng.sample(range(len(values)), 40)])
    j = np.concatenate([found.j, found.i, rng.sample(range(len(values)), 40)])
    in_cluster = np.flatnonzero(found.cluster >= 0)
    i = np.concatenate([i, in_cluster[:-1]])
    j = np.concatenate([j, in_cluster[1:]])
    keep = i != j
    i, j = i[keep], j[keep]
    got = similarity_of(found, texts, i, j, settings)
    for a, b, s in zip(i.tolist(), j.tolist(), got.tolist()):
        if similarity == "jaccard":
            want = _jaccard(_char_set(values[a], 5), _char_set(values[b], 5))
        else:
            want = fuzz.ratio(values[a], values[b]) / 100
        assert s == pytest.approx(want, abs=1e-12)
