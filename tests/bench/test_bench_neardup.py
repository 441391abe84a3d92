"""Opt-in benchmark of the near-duplicate search (``pytest -m bench -s tests/bench/test_bench_neardup.py``).

Side by side in one process on the same texts, shingles (character 5-grams of the normalised text),
permutations (128), threshold and (b, r): prep's search and, as an outside reference, the general
MinHash LSH library datasketch (``pip install -e ".[bench]"``), used through its batch API
(``MinHash.bulk``) and an insertion session, candidates kept when the estimated Jaccard reaches the
threshold (its usual use). Inputs come from the demo generator. Prints throughput (texts/s, end to
end including signatures), the ratio, peak memory of prep's search, recall against the exhaustive
oracle on a 20k sample at thresholds 0.8 and 0.7, precision, and the time exponent 250k -> 1M.

Sizes: PREP_BENCH_SIZES (default "100000,250000,1000000"); the reference runs on at most
PREP_BENCH_REF_MAX texts (default 100000) and its time is scaled linearly beyond that (it is
linear per text); the printout says so.
"""

from __future__ import annotations

import math
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from prep.neardup import Settings, choose_bands, find, normalise_texts, shingle

pytestmark = pytest.mark.bench
ROOT = Path(__file__).resolve().parents[2]
SIZES = [int(x) for x in os.environ.get("PREP_BENCH_SIZES", "100000,250000,1000000").split(",")]
REF_MAX = int(os.environ.get("PREP_BENCH_REF_MAX", "100000"))


def _demo_texts(rows: int, folder: Path) -> tuple[pl.Series, pl.Series]:
    """(titles, title + body) of `rows` generated demo tickets, read by prep's own readers from the
    demo pipeline's sources (chat rows have no title: their first 60 body characters stand in)."""
    import yaml

    from prep.ledger import Ledger
    from prep.pipeline import load_pipeline
    from prep.run import read_sources

    folder.mkdir(parents=True, exist_ok=True)
    subprocess.run([sys.executable, str(ROOT / "sample_inputs" / "make_demo.py"), "--rows", str(rows),
                    "--out", str(folder / "exports")], check=True, capture_output=True)
    spec = yaml.safe_load((ROOT / "sample_inputs" / "pipeline.yaml").read_text(encoding="utf-8"))
    spec["steps"] = []
    (folder / "pipeline.yaml").write_text(yaml.safe_dump(spec), encoding="utf-8")
    table, _ = read_sources(load_pipeline(folder / "pipeline.yaml"), Ledger())
    table = table.with_columns(pl.coalesce("title", pl.col("body").str.slice(0, 60)).alias("title"))
    return normalise_texts(table, ["title"]), normalise_texts(table, ["title", "body"])


def _reference(texts: list[str], threshold: float, k: int, b: int, r: int) -> tuple[float, set[tuple[int, int]]]:
    from datasketch import MinHash, MinHashLSH

    t0 = time.perf_counter()
    grams = [[t[i:i + 5].encode() for i in range(max(1, len(t) - 4))] if t else [] for t in texts]
    hashes = MinHash.bulk(grams, num_perm=k)
    lsh = MinHashLSH(threshold=threshold, num_perm=k, params=(b, r))
    with lsh.insertion_session() as session:
        for i, h in enumerate(hashes):
            if grams[i]:
                session.insert(i, h)
    pairs = set()
    for i, h in enumerate(hashes):
        if not grams[i]:
            continue
        for j in lsh.query(h):
            if j > i and h.jaccard(hashes[j]) >= threshold:
                pairs.add((i, j))
    return time.perf_counter() - t0, pairs


def _distinct_pairs(found) -> set[tuple[int, int]]:
    return set(zip(found.i.tolist(), found.j.tolist()))


def test_bench_throughput_and_memory(tmp_path):
    texts = {}
    largest = max(SIZES)
    titles, both = _demo_texts(largest, tmp_path / "demo")
    print(f"\ndemo texts: {titles.len():,}; mean chars: titles {titles.str.len_chars().mean():.0f}, "
          f"title+body {both.str.len_chars().mean():.0f}; distinct titles {titles.n_unique():,}")
    b, r, _ = choose_bands(0.8, 128)
    times = {}
    for name, series in (("titles", titles), ("title+body", both)):
        for n in SIZES:
            sample = series.head(n)
            t0 = time.perf_counter()
            found = find(sample, Settings(threshold=0.8))
            ours = time.perf_counter() - t0
            times[(name, n)] = ours
            m = min(n, REF_MAX)
            ref_t, _ = _reference(sample.head(m).to_list(), 0.8, 128, b, r)
            ref_scaled = ref_t * n / m
            print(f"{name:<11} {n:>9,}: prep {n / ours:>10,.0f} texts/s ({ours:6.1f} s); reference "
                  f"{n / ref_scaled:>8,.0f} texts/s ({ref_t:6.1f} s on {m:,}{' scaled' if m < n else ''}); "
                  f"ratio {ref_scaled / ours:5.1f}x; pairs {found.i.size:,}")
    if 250_000 in SIZES and 1_000_000 in SIZES:
        for name in ("titles", "title+body"):
            exp = math.log(times[(name, 1_000_000)] / times[(name, 250_000)]) / math.log(4)
            print(f"time exponent 250k -> 1M ({name}): {exp:.2f}")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    print(f"peak RSS of the whole benchmark process: {peak:.2f} GiB (includes the reference and the inputs)")


@pytest.mark.parametrize("threshold", [0.8, 0.7])
def test_bench_recall_against_the_oracle(tmp_path, threshold):
    _, both = _demo_texts(20_000, tmp_path / "demo")
    sample = both.head(20_000)
    oracle = find(sample, Settings(threshold=threshold, method="exhaustive"))
    ours = find(sample, Settings(threshold=threshold))
    want, got = _distinct_pairs(oracle), _distinct_pairs(ours)
    b, r, p = choose_bands(threshold, 128)
    _, ref = _reference(sample.to_list(), threshold, 128, b, r)
    # Both prep runs link copies of an identical text to its first row only, so their pair sets
    # compare one to one; the reference reports every pair of rows.
    print(f"\nthreshold {threshold}: b={b}, r={r}, P(candidate at threshold)={p:.4f}; oracle pairs {len(want):,}")
    recall = len(want & got) / max(1, len(want))
    precision = len(want & got) / max(1, len(got))
    print(f"prep: recall {recall:.4f}, precision {precision:.4f}")
    # Reference pairs over all rows; restrict to the oracle's row pairs (first rows of distinct texts).
    ref_recall = len(want & ref) / max(1, len(want))
    print(f"reference (datasketch, estimated Jaccard >= threshold): recall {ref_recall:.4f} "
          f"({len(ref):,} pairs reported over all rows, identical copies included)")
    assert precision == 1.0
    assert recall >= 0.97
