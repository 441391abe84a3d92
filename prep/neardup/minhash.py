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
"""

from __future__ import annotations

import hashlib

import numpy as np

from prep.neardup.shingles import Shingled

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
