"""Hashed word and character n-gram counts of texts, for the after-split steps' linear models.

:func:`hashed_counts` returns the same features as scikit-learn's ``HashingVectorizer`` union of
``analyzer="word"`` (token pattern ``(?u)\\b\\w+\\b``) and ``analyzer="char_wb"`` with
``alternate_sign=False, norm=None``, with one difference: the hash function. The n-grams are the
ones scikit-learn's analyzers produce (tests/test_features.py compares them text by text), but each
n-gram is hashed here by a compiled kernel (numba) over the code points of the whole batch at once,
on both cores. Measured on this project's 2-core machine: scikit-learn's analyzers handle about
1,300 ticket texts (~300 characters) per second, because they build every n-gram as a Python
string; the kernel does well over 100 times that (tests/bench/test_after_split_bench.py prints both).

The hash: 64-bit FNV-1a over the n-gram's code points (Fowler, Noll, Vo; offset basis
0xcbf29ce484222325, prime 0x100000001b3), then the SplitMix64 finaliser (Steele, Lea, Flood 2014),
then the low ``bits`` bits. A word n-gram is hashed as its tokens joined by one space, as
scikit-learn joins them. Word features take columns ``[0, 2**bits)``, character features
``[2**bits, 2 * 2**bits)``. Pure integer arithmetic: the same text gives the same columns on any
machine and with any number of threads.

Lower-casing is the caller's (``texts_lowercase`` does it with Python's ``str.lower``, as
scikit-learn does).
"""

from __future__ import annotations

import functools
from collections.abc import Sequence

import numpy as np
from numba import njit, prange, uint64

FNV_OFFSET = uint64(0xCBF29CE484222325)
FNV_PRIME = uint64(0x100000001B3)
_M1 = uint64(0xBF58476D1CE4E5B9)
_M2 = uint64(0x94D049BB133111EB)
SPACE = 32
MAX_CODE_POINT = 0x110000
_TEXTS_PER_ITEM = 256  # texts per parallel work item (each item zeroes one dense counter)


@functools.lru_cache(maxsize=1)
def char_classes() -> tuple[np.ndarray, np.ndarray]:
    """Two tables over all code points: ``\\w`` of Python's ``re`` (``str.isalnum()`` or ``_``) and
    ``str.isspace()``, the definitions scikit-learn's token pattern and ``str.split()`` use."""
    # Every code point as a one-character numpy string; numpy's string functions apply the same
    # Unicode predicates as str.isalnum / str.isspace (tests/test_features.py checks them against
    # the str methods over every code point), ten times faster than a Python loop.
    chars = np.arange(MAX_CODE_POINT, dtype=np.uint32).view("<U1")
    word = np.strings.isalnum(chars)
    word[ord("_")] = True
    return word, np.strings.isspace(chars)


@njit(inline="always")
def _finish(h, mask):
    h ^= h >> uint64(30)
    h *= _M1
    h ^= h >> uint64(27)
    h *= _M2
    h ^= h >> uint64(31)
    return np.int64(h & mask)


@njit(cache=True, nogil=True)
def _one_text(cps, a, b, is_word, is_space, wmin, wmax, cmin, cmax, mask, char_base, out, pos, write):
    """Features of cps[a:b]; writes them at out[pos:] when ``write``; returns how many there are."""
    n = 0
    # --- word n-grams: maximal runs of \w characters, joined by one space -----------------------
    if wmax > 0:
        starts = np.empty(b - a + 1, dtype=np.int64)
        ends = np.empty(b - a + 1, dtype=np.int64)
        tokens = 0
        p = a
        while p < b:
            if is_word[cps[p]]:
                q = p
                while q < b and is_word[cps[q]]:
                    q += 1
                starts[tokens] = p
                ends[tokens] = q
                tokens += 1
                p = q
            else:
                p += 1
        for size in range(wmin, wmax + 1):
            for i in range(tokens - size + 1):
                if write:
                    h = FNV_OFFSET
                    for t in range(i, i + size):
                        if t > i:
                            h = (h ^ uint64(SPACE)) * FNV_PRIME
                        for q in range(starts[t], ends[t]):
                            h = (h ^ uint64(cps[q])) * FNV_PRIME
                    out[pos + n] = _finish(h, mask)
                n += 1
    # --- char_wb n-grams: inside each whitespace-separated word padded with one space each side --
    if cmax > 0:
        p = a
        while p < b:
            if is_space[cps[p]]:
                p += 1
                continue
            q = p
            while q < b and not is_space[cps[q]]:
                q += 1
            width = q - p + 2  # the padded word
            for size in range(cmin, cmax + 1):
                if width <= size:  # scikit-learn: the whole padded word once, and no longer n-grams
                    if write:
                        h = FNV_OFFSET
                        for k in range(width):
                            c = SPACE if k == 0 or k == width - 1 else cps[p + k - 1]
                            h = (h ^ uint64(c)) * FNV_PRIME
                        out[pos + n] = char_base + _finish(h, mask)
                    n += 1
                    break
                for o in range(width - size + 1):
                    if write:
                        h = FNV_OFFSET
                        for k in range(o, o + size):
                            c = SPACE if k == 0 or k == width - 1 else cps[p + k - 1]
                            h = (h ^ uint64(c)) * FNV_PRIME
                        out[pos + n] = char_base + _finish(h, mask)
                    n += 1
            p = q
    return n


@njit(cache=True, nogil=True, parallel=True)
def _features(cps, offsets, is_word, is_space, wmin, wmax, cmin, cmax, bits):
    texts = offsets.size - 1
    mask = uint64((1 << bits) - 1)
    char_base = np.int64(1) << bits
    dummy = np.empty(0, dtype=np.int64)
    raw = np.empty(texts, dtype=np.int64)
    for t in prange(texts):
        raw[t] = _one_text(cps, offsets[t], offsets[t + 1], is_word, is_space, wmin, wmax, cmin, cmax,
                           mask, char_base, dummy, 0, False)
    rawptr = np.zeros(texts + 1, dtype=np.int64)
    for t in range(texts):
        rawptr[t + 1] = rawptr[t] + raw[t]
    out = np.empty(rawptr[texts], dtype=np.int64)
    counts = np.empty(rawptr[texts], dtype=np.float64)
    distinct = np.zeros(texts, dtype=np.int64)
    items = (texts + _TEXTS_PER_ITEM - 1) // _TEXTS_PER_ITEM
    for item in prange(items):
        # A dense counter per work item: repeated n-grams of a text are added up in first-seen order.
        dense = np.zeros(2 * char_base, dtype=np.int32)
        for t in range(item * _TEXTS_PER_ITEM, min(texts, (item + 1) * _TEXTS_PER_ITEM)):
            a = rawptr[t]
            _one_text(cps, offsets[t], offsets[t + 1], is_word, is_space, wmin, wmax, cmin, cmax,
                      mask, char_base, out, a, True)
            k = 0
            for i in range(a, rawptr[t + 1]):
                c = out[i]
                if dense[c] == 0:
                    out[a + k] = c
                    k += 1
                dense[c] += 1
            for j in range(a, a + k):
                counts[j] = dense[out[j]]
                dense[out[j]] = 0
            distinct[t] = k
    rowptr = np.zeros(texts + 1, dtype=np.int64)
    for t in range(texts):
        rowptr[t + 1] = rowptr[t] + distinct[t]
    columns = np.empty(rowptr[texts], dtype=np.int32)
    values = np.empty(rowptr[texts], dtype=np.float64)
    for t in prange(texts):
        a, b = rawptr[t], rowptr[t]
        for j in range(distinct[t]):
            columns[b + j] = out[a + j]
            values[b + j] = counts[a + j]
    return rowptr, columns, values


def code_points(texts: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    """All texts as one uint32 array of code points, and the offsets of each text in it."""
    lengths = np.fromiter((len(t) for t in texts), dtype=np.int64, count=len(texts))
    offsets = np.zeros(len(texts) + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    cps = np.frombuffer("".join(texts).encode("utf-32-le"), dtype=np.uint32)
    return cps, offsets


def texts_lowercase(texts: Sequence[str]) -> list[str]:
    return [t.lower() for t in texts]


def hashed_counts(
    texts: Sequence[str],
    *,
    word: tuple[int, int] | None = (1, 2),
    char: tuple[int, int] | None = (3, 4),
    bits: int = 18,
):
    """(n, 2 * 2**bits) sparse CSR matrix of n-gram counts (float64); see the module docstring.

    ``texts`` should already be lower-cased. ``word`` / ``char`` are (min, max) n-gram sizes, or
    None to leave that analyzer out (its columns then stay empty).
    """
    from scipy import sparse

    is_word, is_space = char_classes()
    cps, offsets = code_points(texts)
    wmin, wmax = word if word else (1, 0)
    cmin, cmax = char if char else (1, 0)
    indptr, indices, data = _features(cps, offsets, is_word, is_space, wmin, wmax, cmin, cmax, bits)
    matrix = sparse.csr_matrix((data, indices, indptr), shape=(len(texts), 2 << bits))
    # Each row holds every column once (repeats added up), in first-seen order: not sorted.
    return matrix


def fnv_hash(gram: str, bits: int = 18) -> int:
    """The column of one n-gram string, in plain Python (the kernel's definition, for tests)."""
    h = int(FNV_OFFSET)
    for ch in gram:
        h = ((h ^ ord(ch)) * int(FNV_PRIME)) & 0xFFFFFFFFFFFFFFFF
    h ^= h >> 30
    h = (h * int(_M1)) & 0xFFFFFFFFFFFFFFFF
    h ^= h >> 27
    h = (h * int(_M2)) & 0xFFFFFFFFFFFFFFFF
    h ^= h >> 31
    return h & ((1 << bits) - 1)
