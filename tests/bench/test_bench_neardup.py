"""Opt-in benchmark of the near-duplicate search (``pytest -m bench -s tests/bench/test_bench_neardup.py``).

Side by side in one process on the same texts, shingles (character 5-grams of the normalised text),
permutations (128), threshold and (b, r): prep's search and, as an outside reference, the general
MinHash LSH library datasketch (``pip install -e ".[bench]"``), used through its batch API
(``MinHash.bulk``) and an insertion session, candidates kept when the estimated Jaccard reaches the
threshold (its usual use). Inputs come from the demo generator. Prints:

- throughput (texts/s, end to end including signatures) of both and the ratio, for titles and
  title+body at each size; the reference's time split into signing+indexing and querying, and a
  second comparison on the distinct texts only (prep folds identical texts before signing; this
  line credits it nothing for that);
- peak RSS of prep's search alone on the largest titles input (a child process that loads the
  texts and runs the search; the reference is not in it);
- recall and precision against the exhaustive oracle on a 20k sample at thresholds 0.8 and 0.7;
- the time exponent from 250k to 1M, with the growth of distinct texts and candidate pairs beside
  it, twice: on the demo texts as they are (their templated texts give more near pairs per text as
  the input grows: candidate pairs grow about with the square of the input), and on inputs whose
  near-duplicate rate per text is constant across sizes (see :func:`_constant_rate`).

Sizes: PREP_BENCH_SIZES (default "100000,250000,1000000"). The reference runs on at most
PREP_BENCH_REF_MAX texts (default 100000) and its time is scaled linearly beyond that; it is at
least linear per text (its queries grow with bucket sizes), so the scaled figure favours it.
PREP_BENCH_DATA: a folder to keep the generated inputs in and reuse (1M rows take about a minute).
"""

from __future__ import annotations

import json
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

from prep.neardup import Settings, choose_bands, find, normalise_texts, pair_similarity

pytestmark = pytest.mark.bench
ROOT = Path(__file__).resolve().parents[2]
SIZES = [int(x) for x in os.environ.get("PREP_BENCH_SIZES", "100000,250000,1000000").split(",")]
REF_MAX = int(os.environ.get("PREP_BENCH_REF_MAX", "100000"))


@pytest.fixture(scope="module")
def data_folder(tmp_path_factory) -> Path:
    kept = os.environ.get("PREP_BENCH_DATA")
    return Path(kept) if kept else tmp_path_factory.mktemp("neardup-bench")


def _demo_texts(rows: int, folder: Path) -> pl.DataFrame:
    """Columns ``titles`` and ``both`` (title + body) of `rows` generated demo tickets, normalised,
    read by prep's own readers from the demo pipeline's sources (chat rows have no title: their
    first 60 body characters stand in). Kept in ``folder`` and reused."""
    import yaml

    from prep.ledger import Ledger
    from prep.pipeline import load_pipeline
    from prep.run import read_sources

    folder = folder / f"demo-{rows}"
    cached = folder / "texts.parquet"
    if cached.exists():
        return pl.read_parquet(cached)
    folder.mkdir(parents=True, exist_ok=True)
    subprocess.run([sys.executable, str(ROOT / "sample_inputs" / "make_demo.py"), "--rows", str(rows),
                    "--out", str(folder / "exports")], check=True, capture_output=True)
    spec = yaml.safe_load((ROOT / "sample_inputs" / "pipeline.yaml").read_text(encoding="utf-8"))
    spec["steps"] = []
    (folder / "pipeline.yaml").write_text(yaml.safe_dump(spec), encoding="utf-8")
    table, _ = read_sources(load_pipeline(folder / "pipeline.yaml"), Ledger())
    table = table.with_columns(pl.coalesce("title", pl.col("body").str.slice(0, 60)).alias("title"))
    texts = pl.DataFrame({"titles": normalise_texts(table, ["title"]), "both": normalise_texts(table, ["title", "body"])})
    texts.write_parquet(cached)
    return texts


def _constant_rate(series: pl.Series, rows: int, block: int) -> pl.Series:
    """``rows`` texts whose near-duplicate rate per text does not grow with ``rows``: the demo texts
    in one fixed random order (seed 7; the demo's export order puts one source after another, and
    e.g. chat rows have no title, so slices in file order are not alike), cut into consecutive
    blocks of ``block`` texts; in block k every character except the space is replaced by its own
    character in a range of 256 CJK code points of block k's own (U+4E00 + 256 k + the character's
    rank among the demo's characters; the demo uses 54 distinct characters). A one-to-one mapping
    within a block keeps every shingle set and every similarity of the demo texts, and no shingle
    and no near pair crosses blocks. Every block, the first included, is written with three-byte
    UTF-8 characters, so the input's bytes grow exactly with ``rows``. (The earlier construction
    moved blocks 1-3 up by 0x40000 code points, into four-byte characters: its 1M input held 11.6
    times the bytes of its 250k input, which the string operations paid for.) Each block is a
    random quarter of the same demo texts, so blocks are alike: the same pairs per text, the same
    share of distinct texts. The 250k input is block 0 of the 1M input. Built with a Python loop
    over texts (benchmark input only)."""
    series = series.sample(fraction=1.0, shuffle=True, seed=7)
    parts = []
    ranks: dict[str, int] = {}
    for k, lo in enumerate(range(0, rows, block)):
        texts = series.slice(lo, min(block, rows - lo)).fill_null("").to_list()
        for c in sorted(set("".join(texts)) - {" "} - set(ranks)):
            ranks[c] = len(ranks)
        assert len(ranks) <= 256, "more distinct characters than a block's range holds"
        table = {ord(c): chr(0x4E00 + 256 * k + r) for c, r in ranks.items()}
        parts.append(pl.Series([t.translate(table) for t in texts], dtype=pl.String))
    return pl.concat(parts)


def _reference(texts: list[str], threshold: float, k: int, b: int, r: int) -> tuple[float, float, set[tuple[int, int]]]:
    """(seconds to sign and index, seconds to query and filter, pairs) with datasketch."""
    from datasketch import MinHash, MinHashLSH

    t0 = time.perf_counter()
    grams = [[t[i:i + 5].encode() for i in range(max(1, len(t) - 4))] if t else [] for t in texts]
    hashes = MinHash.bulk(grams, num_perm=k)
    lsh = MinHashLSH(threshold=threshold, num_perm=k, params=(b, r))
    with lsh.insertion_session() as session:
        for i, h in enumerate(hashes):
            if grams[i]:
                session.insert(i, h)
    t1 = time.perf_counter()
    pairs = set()
    for i, h in enumerate(hashes):
        if not grams[i]:
            continue
        for j in lsh.query(h):
            if j > i and h.jaccard(hashes[j]) >= threshold:
                pairs.add((i, j))
    return t1 - t0, time.perf_counter() - t1, pairs


def _distinct_pairs(found) -> set[tuple[int, int]]:
    return set(zip(found.i.tolist(), found.j.tolist()))


def _timed_find(texts: pl.Series, settings: Settings):
    t0 = time.perf_counter()
    found = find(texts, settings)
    return time.perf_counter() - t0, found


def test_bench_throughput_and_memory(data_folder):
    largest = max(SIZES)
    table = _demo_texts(largest, data_folder)
    titles, both = table.get_column("titles"), table.get_column("both")
    print(f"\ndemo texts: {titles.len():,}; mean chars: titles {titles.str.len_chars().mean():.0f}, "
          f"title+body {both.str.len_chars().mean():.0f}; distinct: titles {titles.n_unique():,}, "
          f"title+body {both.n_unique():,}")
    b, r, _ = choose_bands(0.8, 128)
    find(titles.head(1000), Settings())  # compiled kernels loaded once, outside the timings
    times, facts, ref_times = {}, {}, {}
    for name, series in (("titles", titles), ("title+body", both)):
        for n in SIZES:
            sample = series.head(n)
            ours, found = _timed_find(sample, Settings(threshold=0.8))
            times[(name, n)], facts[(name, n)] = ours, found.facts
            m = min(n, REF_MAX)
            if (name, m) not in ref_times:  # the reference runs once per input kind and size
                ref_times[(name, m)] = _reference(sample.head(m).to_list(), 0.8, 128, b, r)[:2]
            sign_t, query_t = ref_times[(name, m)]
            ref_scaled = (sign_t + query_t) * n / m
            print(f"{name:<11} {n:>9,}: prep {n / ours:>10,.0f} texts/s ({ours:6.1f} s); reference "
                  f"{n / ref_scaled:>8,.0f} texts/s ({sign_t + query_t:6.1f} s on {m:,}{', scaled' if m < n else ''}: "
                  f"sign+index {sign_t:.1f} s, query {query_t:.1f} s); ratio {ref_scaled / ours:6.1f}x "
                  f"(vs its signing alone {sign_t * n / m / ours:5.1f}x); distinct {found.facts['distinct_texts']:,}, "
                  f"candidates {found.facts['candidates']:,}, exactly verified {found.facts['exactly_verified']:,}, "
                  f"verified {found.facts['verified_pairs']:,}")
        # Distinct texts only, both tools: prep's identical-text folding earns nothing here.
        n = min(REF_MAX, series.len())
        distinct = series.head(max(SIZES)).unique(maintain_order=True).head(n)
        ours, _ = _timed_find(distinct, Settings(threshold=0.8))
        sign_t, query_t, _ = _reference(distinct.to_list(), 0.8, 128, b, r)
        print(f"{name:<11} {distinct.len():>9,} distinct texts: prep {distinct.len() / ours:>10,.0f} texts/s; reference "
              f"{distinct.len() / (sign_t + query_t):>8,.0f} texts/s; ratio {(sign_t + query_t) / ours:6.1f}x "
              f"(vs its signing alone {sign_t / ours:5.1f}x)")
    if 250_000 in SIZES and 1_000_000 in SIZES:
        for name, series in (("titles", titles), ("title+body", both)):
            exp = math.log(times[(name, 1_000_000)] / times[(name, 250_000)]) / math.log(4)
            f0, f1 = facts[(name, 250_000)], facts[(name, 1_000_000)]
            print(f"time exponent 250k -> 1M ({name}, demo as is): {exp:.2f}; over the same step distinct texts grew "
                  f"x{f1['distinct_texts'] / f0['distinct_texts']:.2f}, candidate pairs x{f1['candidates'] / max(1, f0['candidates']):.2f}, "
                  f"exactly verified x{f1['exactly_verified'] / max(1, f0['exactly_verified']):.2f}")
            # Constant near-duplicate rate per text: 1 block of 250k against 4 blocks (both mapped alike).
            small, found0 = _timed_find(_constant_rate(series, 250_000, 250_000), Settings(threshold=0.8))
            ours, found = _timed_find(_constant_rate(series, 1_000_000, 250_000), Settings(threshold=0.8))
            f0, g = found0.facts, found.facts
            exp = math.log(ours / small) / math.log(4)
            print(f"time exponent 250k -> 1M ({name}, constant near-duplicate rate: 4 disjoint 250k blocks): {exp:.2f} "
                  f"({small:.1f} s -> {ours:.1f} s); distinct texts x{g['distinct_texts'] / f0['distinct_texts']:.2f}, "
                  f"candidate pairs x{g['candidates'] / max(1, f0['candidates']):.2f}, verified pairs x{g['verified_pairs'] / max(1, f0['verified_pairs']):.2f}")
    # Peak memory of prep's search alone on the largest titles input, in a child process.
    (data_folder / "titles.parquet").unlink(missing_ok=True)
    titles.head(largest).to_frame("t").write_parquet(data_folder / "titles.parquet")
    # The child reads its peak from /proc/self/status (VmHWM, in KiB): getrusage's ru_maxrss keeps
    # the parent's peak across fork and exec on Linux, so in a child of this large process it
    # would report the benchmark's own peak, not the search's.
    child = (
        "import json, resource, sys, polars as pl\n"
        "from pathlib import Path\n"
        "from prep.neardup import Settings, find\n"
        "def hwm():\n"
        "    status = Path('/proc/self/status')\n"
        "    if not status.exists():  # not Linux: ru_maxrss (may include the parent's peak)\n"
        "        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "    for line in status.read_text().splitlines():\n"
        "        if line.startswith('VmHWM:'):\n"
        "            return int(line.split()[1])\n"
        "t = pl.read_parquet(sys.argv[1]).get_column('t')\n"
        "before = hwm()\n"
        "f = find(t, Settings())\n"
        "print(json.dumps({'before': before, 'peak': hwm(), 'pairs': int(f.i.size)}))\n"
    )
    out = subprocess.run([sys.executable, "-c", child, str(data_folder / "titles.parquet")], check=True,
                         capture_output=True, text=True)
    mem = json.loads(out.stdout.strip().splitlines()[-1])
    print(f"peak RSS, prep's search on {largest:,} titles (child process, texts loaded): {mem['peak'] / 2**20:.2f} GiB "
          f"({mem['before'] / 2**20:.2f} GiB before the search: interpreter, libraries, texts)")
    print(f"peak RSS of this benchmark process: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20:.2f} GiB "
          "(includes the reference and the inputs)")
    if largest >= 1_000_000:
        assert mem["peak"] / 2**20 <= 1.5


@pytest.mark.parametrize("threshold", [0.8, 0.7])
def test_bench_recall_against_the_oracle(data_folder, threshold):
    sample = _demo_texts(20_000, data_folder).get_column("both").head(20_000)
    t0 = time.perf_counter()
    oracle = find(sample, Settings(threshold=threshold, method="exhaustive"))
    t1 = time.perf_counter()
    ours = find(sample, Settings(threshold=threshold))
    t2 = time.perf_counter()
    want, got = _distinct_pairs(oracle), _distinct_pairs(ours)
    b, r, p = choose_bands(threshold, 128)
    _, _, ref = _reference(sample.to_list(), threshold, 128, b, r)
    # Both prep runs link copies of an identical text to its first row only, so their pair sets
    # compare one to one; the reference reports every pair of rows.
    print(f"\nthreshold {threshold}: b={b}, r={r}, P(candidate at threshold)={p:.4f}; oracle pairs {len(want):,} "
          f"(exhaustive {t1 - t0:.1f} s, LSH {t2 - t1:.1f} s)")
    recall = len(want & got) / max(1, len(want))
    precision = len(want & got) / max(1, len(got))
    print(f"prep: recall {recall:.4f}, precision {precision:.4f}")
    # Reference pairs over all rows; the oracle's pairs (first rows of distinct texts) are among them
    # when found. Its precision: the share of its pairs whose exact Jaccard reaches the threshold.
    ref_recall = len(want & ref) / max(1, len(want))
    ri = np.array([p[0] for p in ref], dtype=np.int64)
    rj = np.array([p[1] for p in ref], dtype=np.int64)
    exact = pair_similarity(sample.fill_null(""), ri, rj, Settings(threshold=threshold))
    ref_precision = float(np.mean(exact >= threshold)) if ref else 1.0
    print(f"reference (datasketch, estimated Jaccard >= threshold): recall {ref_recall:.4f}, precision "
          f"{ref_precision:.4f} ({len(ref):,} pairs reported over all rows, identical copies included)")
    assert precision == 1.0
    assert recall >= 0.97
