"""The exhaustive method: every pair, by a sparse product of shingle indicator matrices.

X (texts x distinct shingles, 0/1) times its transpose holds |A∩B| for every pair sharing a
shingle; Jaccard follows from the set sizes. It is exact and is the oracle of the tests, but its
cost grows with the square of the input, so it refuses more than :data:`EXHAUSTIVE_MAX_ROWS` texts.
"""

from __future__ import annotations

import numpy as np
from scipy.sparse import csr_matrix

from prep.neardup.shingles import Shingled

# Largest input the exhaustive method accepts: 20,000 texts is 2 x 10**8 pairs at worst, a few
# seconds to a minute of sparse products on one core here.
EXHAUSTIVE_MAX_ROWS = 20_000
# Texts per block of the product (bounds the memory of one block's dense-ish result).
_BLOCK = 1000


class TooLargeForExhaustive(ValueError):
    """The input has more texts than the exhaustive method accepts."""


def all_pairs(shingled: Shingled, threshold: float, *, max_rows: int = EXHAUSTIVE_MAX_ROWS) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(i, j, jaccard) for every pair i < j with Jaccard >= threshold, sorted by (i, j)."""
    m = shingled.offsets.size - 1
    if m > max_rows:
        raise TooLargeForExhaustive(f"the exhaustive method accepts at most {max_rows} texts; got {m}")
    counts = shingled.counts
    rows = np.repeat(np.arange(m), counts)
    if rows.size == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, np.zeros(0)
    uniq, cols = np.unique(shingled.hashes, return_inverse=True)
    x = csr_matrix((np.ones(rows.size, dtype=np.float64), (rows, cols.ravel())), shape=(m, uniq.size))
    x.data[:] = 1.0  # duplicate (row, shingle) entries were summed: sets, not multisets
    x.sum_duplicates()
    x.data[:] = 1.0
    sizes = np.asarray(x.sum(axis=1)).ravel()
    xt = x.T.tocsr()
    out_i, out_j, out_s = [], [], []
    for lo in range(0, m, _BLOCK):  # one iteration per block of texts
        prod = (x[lo:lo + _BLOCK] @ xt).tocoo()
        a = prod.row.astype(np.int64) + lo
        b = prod.col.astype(np.int64)
        keep = a < b
        a, b, inter = a[keep], b[keep], prod.data[keep]
        sim = inter / (sizes[a] + sizes[b] - inter)
        ok = sim >= threshold
        out_i.append(a[ok]); out_j.append(b[ok]); out_s.append(sim[ok])
    i, j, s = np.concatenate(out_i), np.concatenate(out_j), np.concatenate(out_s)
    order = np.lexsort((j, i))
    return i[order], j[order], s[order]
