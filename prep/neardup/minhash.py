"""MinHash signatures (Broder 1997, "On the resemblance and containment of documents").

For each of k hash functions h_i, a text's signature holds min over its shingles of h_i(shingle);
two texts agree at position i with probability equal to the Jaccard similarity of their shingle
sets, so the share of agreeing positions estimates it with standard error sqrt(J(1-J)/k).

The hash functions are Dietzfelbinger's multiply-add-shift scheme on the high 32 bits x of a
shingle fingerprint: h_i(x) = ((a_i * x + b_i) mod 2**64) >> 32, with 64-bit a_i, b_i; this family
is 2-independent for 32-bit keys (Dietzfelbinger 1996, "Universal hashing and k-wise independent
hashing via integer arithmetic without primes", STACS). a_i and b_i are taken from BLAKE2b of a
fixed text (RFC 7693), so signatures are stable across runs, machines and library versions.

:func:`signatures` runs a compiled kernel (:mod:`prep.neardup.kernels`); :func:`signatures_numpy`
is the same computation in vectorised numpy (blocks of whole texts, each a (shingles x k) matrix
reduced per text with ``np.minimum.reduceat``), kept as the reference the kernel is tested against.

One permutation hashing (the default signing of the near-duplicate step) gets k values from one
hash per shingle instead of k (Li, Owen, Zhang 2012, "One Permutation Hashing", NIPS): a shingle's
hash g picks one of k bins (its high 32 bits) and its value there (its low 32 bits); each bin keeps
its smallest value. Two sets agree in a non-empty bin with probability J. A bin no shingle fell in
takes the value of a non-empty bin chosen by probing a fixed sequence of bins, the same sequence
for every text ("optimal densification", Shrivastava 2017, "Optimal Densification for Fast and
Accurate Minwise Hashing", ICML), after which every position agrees with probability J exactly, as
in k-permutation MinHash. Its estimate has a smaller variance than Broder's when a set has far more
shingles than k (bins are filled without replacement) and a larger one when it has far fewer (several
bins copy the same value); the LSH banding treats both alike. Measured against the exhaustive oracle
on 20,000 demo tickets (title + body, and titles alone; thresholds 0.8, 0.7, 0.5) its recall
equalled the k-permutation signatures' to within one pair in 2,500 and it gave fewer candidates,
at a tenth of the signing time (``tests/bench/test_bench_neardup.py``). On texts with few shingles
it is slower than k functions: each empty bin probes about k/f bins for f filled ones (measured at
k=128: 20 µs a text with one shingle, 1.0 µs with 150; k functions 0.15 µs and 9.9 µs).
"""

from __future__ import annotations

import hashlib
from typing import Literal

import numpy as np

from prep.neardup.shingles import Shingled, splitmix64

Signing = Literal["one_permutation", "permutations"]
DEFAULT_SIGNING: Signing = "one_permutation"

DEFAULT_PERMUTATIONS = 128
# Seed text for the hash coefficients; changing it changes every signature (and nothing else).
HASH_SEED = "prep.neardup.minhash/v1"
# Signature value of a text without shingles (it matches nothing: such rows skip the LSH).
EMPTY = np.uint32(0xFFFFFFFF)
# About this many (shingle, permutation) cells per block: 2**18 x 8 bytes = 2 MiB, cache sized.
BLOCK_CELLS = 1 << 18


def coefficients(k: int, seed: str = HASH_SEED) -> tuple[np.ndarray, np.ndarray]:
    """(a, b): k 64-bit multipliers (odd) and k 64-bit addends from BLAKE2b(seed, i)."""
    raw = b"".join(hashlib.blake2b(f"{seed}\x1f{i}".encode(), digest_size=16).digest() for i in range(k))
    words = np.frombuffer(raw, dtype="<u8").reshape(k, 2)
    return words[:, 0] | np.uint64(1), words[:, 1].copy()


def signatures(shingled: Shingled, k: int = DEFAULT_PERMUTATIONS, seed: str = HASH_SEED) -> np.ndarray:
    """uint32 array (texts x k) of MinHash values; rows of texts without shingles are all EMPTY."""
    from prep.neardup import kernels

    a, b = coefficients(k, seed)
    return kernels.minhash(shingled.hashes, shingled.offsets, a, b)


def one_permutation_salts(seed: str = HASH_SEED) -> tuple[np.uint64, np.uint64]:
    """(bin salt, densification salt): two 64-bit words from BLAKE2b(seed) (RFC 7693)."""
    raw = hashlib.blake2b(f"{seed}\x1fone-permutation".encode(), digest_size=16).digest()
    words = np.frombuffer(raw, dtype="<u8")
    return np.uint64(words[0]), np.uint64(words[1])


def one_permutation_signatures(shingled: Shingled, k: int = DEFAULT_PERMUTATIONS, seed: str = HASH_SEED) -> np.ndarray:
    """uint32 array (texts x k) by one permutation hashing with optimal densification (see the
    module docstring); rows of texts without shingles are all EMPTY."""
    from prep.neardup import kernels

    salt, densify_salt = one_permutation_salts(seed)
    return kernels.one_permutation_minhash(shingled.hashes, shingled.offsets, k, salt, densify_salt)


def one_permutation_signatures_numpy(shingled: Shingled, k: int = DEFAULT_PERMUTATIONS, seed: str = HASH_SEED) -> np.ndarray:
    """:func:`one_permutation_signatures` in numpy, the definition the kernel is tested against.

    g = splitmix64(fingerprint XOR salt); bin = (high 32 bits of g) * k >> 32 (Lemire's reduction),
    value = low 32 bits of g; a bin keeps its smallest value. An empty bin p probes bins
    c_a = reduce(splitmix64(densify_salt XOR (p << 32) XOR a)) for a = 1, 2, ... and takes the value
    of the first non-empty one (probing only bins that a shingle filled)."""
    salt, densify_salt = one_permutation_salts(seed)
    offsets = shingled.offsets
    m = offsets.size - 1
    unset = np.uint64(1 << 32)
    bins = np.full((m, k), unset, dtype=np.uint64)
    counts = np.diff(offsets)
    owner = np.repeat(np.arange(m, dtype=np.int64), counts)
    g = splitmix64(shingled.hashes ^ salt)
    value = g & np.uint64(0xFFFFFFFF)
    b = (((g >> np.uint64(32)) * np.uint64(k)) >> np.uint64(32)).astype(np.int64)
    flat = bins.reshape(-1)
    np.minimum.at(flat, owner * k + b, value)
    out = bins.copy()
    rows, cols = np.nonzero((bins == unset) & (counts > 0)[:, None])
    attempt = np.uint64(1)
    with np.errstate(over="ignore"):
        while rows.size:  # one iteration per probe round, over all empty bins still unfilled
            probe = splitmix64(densify_salt ^ (cols.astype(np.uint64) << np.uint64(32)) ^ attempt)
            c = (((probe >> np.uint64(32)) * np.uint64(k)) >> np.uint64(32)).astype(np.int64)
            got = bins[rows, c]
            hit = got != unset
            out[rows[hit], cols[hit]] = got[hit]
            rows, cols = rows[~hit], cols[~hit]
            attempt += np.uint64(1)
    out[counts == 0] = np.uint64(EMPTY)
    return out.astype(np.uint32)


def signatures_by(shingled: Shingled, k: int, signing: Signing) -> np.ndarray:
    """The signatures of ``shingled`` by the named method."""
    if signing == "one_permutation":
        return one_permutation_signatures(shingled, k)
    return signatures(shingled, k)


def signatures_numpy(shingled: Shingled, k: int = DEFAULT_PERMUTATIONS, seed: str = HASH_SEED) -> np.ndarray:
    """:func:`signatures` in vectorised numpy (the reference; ~10x slower)."""
    a, b = coefficients(k, seed)
    offsets = shingled.offsets
    m = offsets.size - 1
    out = np.full((m, k), EMPTY, dtype=np.uint32)
    nonempty = np.flatnonzero(np.diff(offsets) > 0)
    if nonempty.size == 0:
        return out
    x = shingled.hashes >> np.uint64(32)
    per_block = max(1, BLOCK_CELLS // k)
    starts = offsets[nonempty]
    ends = offsets[nonempty + 1]
    # Blocks of whole texts holding about `per_block` shingles (a longer text is a block alone).
    bounds = np.searchsorted(ends, np.arange(per_block, int(ends[-1]) + per_block, per_block), side="right")
    bounds = np.unique(np.concatenate([[0], np.maximum(bounds, 1), [nonempty.size]]))
    s_shift = np.uint64(32)
    with np.errstate(over="ignore"):
        for lo, hi in zip(bounds[:-1], bounds[1:]):  # one iteration per block of texts
            lo, hi = int(lo), int(hi)
            first, last = int(starts[lo]), int(ends[hi - 1])
            block = x[first:last, None] * a[None, :]
            block += b[None, :]
            block >>= s_shift
            mins = np.minimum.reduceat(block, starts[lo:hi] - first, axis=0)
            out[nonempty[lo:hi]] = mins.astype(np.uint32)
    return out


def estimate_jaccard(sig_a: np.ndarray, sig_b: np.ndarray) -> np.ndarray | float:
    """Share of equal positions: the MinHash estimate of Jaccard similarity."""
    return np.mean(sig_a == sig_b, axis=-1)
