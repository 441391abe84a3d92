"""Text normalisation and shingling into stable 64-bit shingle fingerprints.

A shingle is a substring of the normalised text: every run of ``n`` characters (``kind="char"``)
or of ``n`` words (``kind="word"``). A text shorter than one shingle is a single shingle of its
own; an empty text has none (it is never a near duplicate of anything).

Each shingle becomes a 64-bit fingerprint, computed without a Python loop per text or shingle:
the codepoints of all texts are laid out in one numpy array, a polynomial hash of every substring
is read off prefix sums in the ring of integers modulo 2**64 (Karp and Rabin 1987, "Efficient
randomized pattern-matching algorithms"), and the result, with the substring length, goes
through the SplitMix64 finaliser (Steele, Lea, Flood 2014, "Fast splittable pseudorandom number
generators") to spread the bits. Only numpy integer arithmetic with fixed constants is used, so
fingerprints are the same on every run, machine and library version.

Two different shingles share a fingerprint with probability about 2**-64 per pair; "exact"
Jaccard similarity in this package is the Jaccard similarity of the fingerprint sets.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import polars as pl

ShingleKind = Literal["char", "word"]
Punctuation = Literal["space", "remove", "keep"]

# Default shingle sizes. Character 5-grams: common practice for short web texts (Leskovec,
# Rajaraman, Ullman, Mining of Massive Datasets, 3rd ed., section 3.2.2 suggests k=5 for short
# documents such as e-mails). Word 3-grams: common practice, no source.
DEFAULT_N: dict[str, int] = {"char": 5, "word": 3}

# Polynomial base for the substring hash: an odd 64-bit constant (odd, so it is invertible modulo
# 2**64); the value is the 64-bit golden-ratio constant used by SplitMix64.
_BASE = np.uint64(0x9E3779B97F4A7C15)
_BASE_INV = np.uint64(pow(0x9E3779B97F4A7C15, -1, 2**64))
_LENGTH_SALT = np.uint64(0xD6E8FEB86659FD93)

# Texts are fingerprinted in chunks of about this many codepoints, so that the few uint64 work
# arrays stay small (8 bytes x 4M = 32 MiB each) whatever the input size.
CHUNK_CODEPOINTS = 1 << 22

# Only the first this many characters of a normalised text are compared. Tickets are far shorter;
# the cap bounds the cost of a hostile multi-megabyte field (MinHash work grows with the text
# times the permutations). Common practice, no source.
MAX_COMPARED_CHARS = 20_000

# Unicode punctuation and symbols (general categories P* and S*).
_PUNCT = r"[\p{P}\p{S}]"


def splitmix64(x: np.ndarray) -> np.ndarray:
    """SplitMix64 finaliser (Steele, Lea, Flood 2014) on a uint64 array, modulo 2**64."""
    x = x.astype(np.uint64, copy=True)
    x ^= x >> np.uint64(30)
    x *= np.uint64(0xBF58476D1CE4E5B9)
    x ^= x >> np.uint64(27)
    x *= np.uint64(0x94D049BB133111EB)
    x ^= x >> np.uint64(31)
    return x


def normalise_texts(frame: pl.DataFrame, columns: list[str], punctuation: Punctuation = "space") -> pl.Series:
    """The compared text of every row: the columns joined by a space (nulls skipped), lowercased,
    punctuation handled as asked (``space``: each mark becomes a space; ``remove``: deleted;
    ``keep``), whitespace collapsed to one space and trimmed.

    The rewrites match only where something changes (a run of two or more, or a single mark or
    white space other than U+0020): replacing every single space with itself made the plain
    ``\\s+`` rewrite the costliest part (measured on 506k ticket texts: 5.2 s -> 1.5 s, the same
    result; tests/test_neardup_shingles.py compares with the plain expressions). Slices of the
    table run on one thread per core (:func:`prep.text.by_slices`)."""
    from prep.text import by_slices

    joined = frame.select(
        pl.concat_str([pl.col(c).cast(pl.String) for c in columns], separator=" ", ignore_nulls=True).alias("_text")
    ).to_series()
    return by_slices(joined, lambda part: _compared(part, punctuation))


# A run of marks and white space becomes one space (punctuation "space"), or a run of white space
# does (otherwise); each alternative matches only where the text changes.
_MARK_RUN = r"[\p{P}\p{S}\s]{2,}|[[\p{P}\p{S}\s]--[ ]]"
_SPACE_RUN = r"\s{2,}|[\s--[ ]]"


def _compared(text: pl.Series, punctuation: Punctuation) -> pl.Series:
    """:func:`normalise_texts` on the joined columns. Equal to lowercasing, then
    ``replace_all(_PUNCT, " " or "")`` (unless ``keep``), ``replace_all(r"\\s+", " ")``,
    ``strip_chars(" ")`` and the slice to MAX_COMPARED_CHARS."""
    text = text.fill_null("").str.to_lowercase()
    if punctuation == "space":
        text = text.str.replace_all(_MARK_RUN, " ")
    else:
        if punctuation == "remove":
            text = text.str.replace_all(_PUNCT, "")
        text = text.str.replace_all(_SPACE_RUN, " ")
    return text.str.strip_chars(" ").str.slice(0, MAX_COMPARED_CHARS)


@dataclass(frozen=True)
class Shingled:
    """Shingle fingerprints of m texts in CSR form: text t owns ``hashes[offsets[t]:offsets[t+1]]``
    (in text order, repeats included)."""

    offsets: np.ndarray  # int64, m + 1
    hashes: np.ndarray   # uint64

    @property
    def counts(self) -> np.ndarray:
        return np.diff(self.offsets)


def _ranges(starts: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Concatenation of arange(s, s + c) for every (s, c); vectorised."""
    total = int(counts.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    first = np.cumsum(counts) - counts
    return np.repeat(starts - first, counts) + np.arange(total, dtype=np.int64)


def _chunk_hashes(texts: list[str], kind: str, n: int) -> tuple[np.ndarray, np.ndarray]:
    """(shingle counts per text, fingerprints) for a chunk of texts; the values of
    :func:`_chunk_hashes_numpy`, computed by the compiled kernels of :mod:`prep.neardup.kernels`."""
    from prep.neardup import kernels

    if kind == "char":
        shingled = _char_shingles(texts, n)
        return shingled.counts, shingled.hashes
    m = len(texts)
    cps = np.frombuffer("".join(texts).encode("utf-32-le"), dtype=np.uint32)
    lens = np.fromiter(map(len, texts), dtype=np.int64, count=m)
    text_start = np.cumsum(lens) - lens
    counts, starts, ends = _word_spans(cps, lens, text_start, n)
    return counts, kernels.substring_hashes(cps, starts, ends, _BASE, _LENGTH_SALT)


def _word_spans(cps: np.ndarray, lens: np.ndarray, text_start: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(shingles per text, start, end) of the word n-grams of texts laid out in ``cps``: a span runs
    from the first character of its first word to the last of its last (inner spaces included)."""
    m, total = lens.size, cps.size
    space = cps == 32
    prev_space = np.ones(total, dtype=bool)
    next_space = np.ones(total, dtype=bool)
    prev_space[1:] = space[:-1]
    next_space[:-1] = space[1:]
    is_first = np.zeros(total, dtype=bool)
    is_last = np.zeros(total, dtype=bool)
    nonempty = lens > 0
    is_first[text_start[nonempty]] = True
    is_last[(text_start + lens - 1)[nonempty]] = True
    word_start = np.flatnonzero(~space & (prev_space | is_first))
    word_end = np.flatnonzero(~space & (next_space | is_last)) + 1
    # Words per text (texts are contiguous and words never cross a text boundary).
    words = np.bincount(np.searchsorted(text_start[nonempty], word_start, side="right") - 1,
                        minlength=int(nonempty.sum())) if word_start.size else np.zeros(int(nonempty.sum()), np.int64)
    wcount = np.zeros(m, dtype=np.int64)
    wcount[nonempty] = words
    wfirst = np.cumsum(wcount) - wcount
    counts = np.where(wcount >= n, wcount - n + 1, (wcount > 0).astype(np.int64))
    k = _ranges(wfirst, counts)  # index of the shingle's first word
    span = np.repeat(np.minimum(wcount, n), counts)
    return counts, word_start[k], word_end[k + span - 1]


def _chunk_hashes_numpy(texts: list[str], kind: str, n: int) -> tuple[np.ndarray, np.ndarray]:
    """(shingle counts per text, fingerprints) for a chunk of texts: the numpy definition, kept as the
    reference that the compiled kernels are tested against (slow: a square-and-multiply per shingle)."""
    m = len(texts)
    joined = "".join(texts)
    cps = np.frombuffer(joined.encode("utf-32-le"), dtype=np.uint32)
    lens = np.fromiter((len(t) for t in texts), dtype=np.int64, count=m)
    text_start = np.cumsum(lens) - lens
    total = cps.size
    if kind == "char":
        counts = np.where(lens >= n, lens - n + 1, (lens > 0).astype(np.int64))
        starts = _ranges(text_start, counts)
        ends = starts + np.repeat(np.minimum(lens, n), counts)
    else:
        counts, starts, ends = _word_spans(cps, lens, text_start, n)
    # Prefix sums G[i] = sum_{k<i} (c_k + 1) * BASE^-k (mod 2**64); the substring [a, b) hashes to
    # sum_{k=a}^{b-1} (c_k + 1) * BASE^(b-1-k) = BASE^(b-1) * (G[b] - G[a]).
    with np.errstate(over="ignore"):
        inv_pow = np.empty(total + 1, dtype=np.uint64)
        inv_pow[0] = 1
        if total:
            inv_pow[1:] = _BASE_INV
            inv_pow = np.cumprod(inv_pow, dtype=np.uint64)
        prefix = np.zeros(total + 1, dtype=np.uint64)
        np.cumsum((cps.astype(np.uint64) + np.uint64(1)) * inv_pow[:-1], out=prefix[1:], dtype=np.uint64)
        del inv_pow
        if starts.size:
            pow_end = _powers(ends - 1)
            h = pow_end * (prefix[ends] - prefix[starts])
            h ^= (ends - starts).astype(np.uint64) * _LENGTH_SALT
        else:
            h = np.zeros(0, dtype=np.uint64)
    return counts, splitmix64(h)


def _powers(exponents: np.ndarray) -> np.ndarray:
    """BASE**e mod 2**64 for an int64 array of exponents >= 0 (square-and-multiply, vectorised)."""
    result = np.ones(exponents.size, dtype=np.uint64)
    base = np.full(exponents.size, _BASE, dtype=np.uint64)
    e = exponents.astype(np.int64, copy=True)
    with np.errstate(over="ignore"):
        while True:
            odd = (e & 1).astype(bool)
            result[odd] *= base[odd]
            e >>= 1
            if not e.any():
                break
            base *= base
    return result


def shingle(texts: pl.Series | list[str], kind: ShingleKind = "char", n: int | None = None) -> Shingled:
    """Shingle fingerprints of already normalised ``texts`` (see :func:`normalise_texts`)."""
    if n is None:
        n = DEFAULT_N[kind]
    if n < 1:
        raise ValueError("n must be >= 1")
    values = texts.fill_null("").to_list() if isinstance(texts, pl.Series) else [t or "" for t in texts]
    if kind == "char":
        return _char_shingles(values, n)
    counts_parts, hash_parts = [], []
    i, m = 0, len(values)
    while i < m:  # one iteration per chunk of about CHUNK_CODEPOINTS codepoints, not per text
        j, size = i, 0
        lens = None
        # Grow the chunk geometrically by text count; cheap and keeps chunks near the target.
        step = 4096
        while j < m and size < CHUNK_CODEPOINTS:
            lens = sum(map(len, values[j:j + step]))
            size += lens
            j = min(m, j + step)
        counts, hashes = _chunk_hashes(values[i:j], kind, n)
        counts_parts.append(counts)
        hash_parts.append(hashes)
        i = j
    counts = np.concatenate(counts_parts) if counts_parts else np.zeros(0, dtype=np.int64)
    hashes = np.concatenate(hash_parts) if hash_parts else np.zeros(0, dtype=np.uint64)
    offsets = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(counts, out=offsets[1:])
    return Shingled(offsets=offsets, hashes=hashes)


def _char_shingles(values: list[str], n: int) -> Shingled:
    """:func:`shingle` for character n-grams: the shingle counts follow from the lengths, so one
    output array is allocated up front and each chunk of about CHUNK_CODEPOINTS code points is
    fingerprinted straight into its slice (measured on 956k demo tickets: the per-chunk arrays and
    their final concatenation cost about 1 s of fresh memory pages)."""
    from prep.neardup import kernels

    m = len(values)
    lens = np.fromiter(map(len, values), dtype=np.int64, count=m)
    counts = np.where(lens >= n, lens - n + 1, (lens > 0).astype(np.int64))
    offsets = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(counts, out=offsets[1:])
    hashes = np.empty(offsets[m], dtype=np.uint64)
    if m == 0:
        return Shingled(offsets=offsets, hashes=hashes)
    ends = np.cumsum(lens)
    # Chunk bounds: after the first text whose end reaches each multiple of CHUNK_CODEPOINTS.
    cuts = np.searchsorted(ends, np.arange(CHUNK_CODEPOINTS, int(ends[-1]), CHUNK_CODEPOINTS), side="left") + 1
    bounds = np.unique(np.concatenate([[0], np.minimum(cuts, m), [m]]))
    for lo, hi in zip(bounds[:-1].tolist(), bounds[1:].tolist()):  # one iteration per chunk of texts
        cps = np.frombuffer("".join(values[lo:hi]).encode("utf-32-le"), dtype=np.uint32)
        chunk_lens = lens[lo:hi]
        text_start = np.cumsum(chunk_lens) - chunk_lens
        local = offsets[lo:hi + 1] - offsets[lo]
        kernels.char_shingle_hashes(cps, text_start, chunk_lens, local, n, _BASE, _LENGTH_SALT,
                                    hashes[offsets[lo]:offsets[hi]])
    return Shingled(offsets=offsets, hashes=hashes)
