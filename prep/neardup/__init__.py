"""Near-duplicate detection: shingling, MinHash, LSH banding, exact verification, clusters.

A pure package (numpy, polars, scipy, numba for the compiled kernels in ``kernels.py``; rapidfuzz
for the optional edit similarity). The step
``prep.steps.near_duplicates`` and the runner's leakage audit (:mod:`prep.neardup.audit`) use it.
"""

from prep.neardup.clusters import components
from prep.neardup.exhaustive import EXHAUSTIVE_MAX_ROWS, TooLargeForExhaustive, all_pairs
from prep.neardup.lsh import candidate_probability, choose_bands
from prep.neardup.minhash import signatures
from prep.neardup.search import Found, Settings, find, pair_similarity, similarity_of
from prep.neardup.shingles import normalise_texts, shingle

__all__ = [
    "EXHAUSTIVE_MAX_ROWS", "Found", "Settings", "TooLargeForExhaustive", "all_pairs", "candidate_probability",
    "choose_bands", "components", "find", "normalise_texts", "pair_similarity", "shingle", "signatures",
    "similarity_of",
]
