"""Clusters: connected components of the verified pairs (scipy's graph search, linear time)."""

from __future__ import annotations

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components


def components(n: int, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Cluster id per row (int64; -1 for a row in no pair). Clusters are numbered 0, 1, ... in the
    order of their first row, so the numbering depends only on row order and the pairs."""
    labels = np.full(n, -1, dtype=np.int64)
    if i.size == 0:
        return labels
    graph = coo_matrix((np.ones(i.size, dtype=np.int8), (i, j)), shape=(n, n)).tocsr()
    _, comp = connected_components(graph, directed=False)
    in_pair = np.zeros(n, dtype=bool)
    in_pair[i] = True
    in_pair[j] = True
    rows = np.flatnonzero(in_pair)
    # Renumber by first appearance: np.unique's return_index gives each component's first row.
    uniq, first = np.unique(comp[rows], return_index=True)
    rank = np.empty(uniq.size, dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(uniq.size)
    labels[rows] = rank[np.searchsorted(uniq, comp[rows])]
    return labels
