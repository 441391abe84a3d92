"""Benchmark of language identification on the demo (opt-in: ``pytest -m bench -s tests/bench/test_bench_language.py``).

Everything is measured side by side in one run, on the same texts, so ratios hold even on a
shared machine:

- langdetect per text (untruncated, seeded, one core): the reference for agreement;
- prep's step (the default backend cld2, 200-character prefixes, distinct texts, all cores)
  over every row of the demo: effective texts per second = rows / wall time;
- the step with the langdetect backend, on a sample of rows;
- CLD2 and, if installed, py3langid per text on the sample (alternatives considered).

Agreement with langdetect is counted on texts of 40 characters or more, overall and per
language (by langdetect's answer). Environment: ``PREP_BENCH_ROWS`` (default 1,000,000) demo
rows; ``PREP_BENCH_DEMO`` a folder already written by ``make_demo.py`` (skips generating);
``PREP_BENCH_SAMPLE`` (default 3000) texts for langdetect.
"""

from __future__ import annotations

import os
import random
import shutil
import subprocess
import sys
import time
from collections import Counter
from pathlib import Path

import polars as pl
import pytest

from prep.lang import identify, iso_code
from prep.ledger import Ledger
from prep.pipeline import load_pipeline
from prep.run import read_sources
from prep.steps import language as language_step
from prep.steps import normalise, redact
from prep.steps.base import StepContext

REPO = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.bench


def build_ctx(step: str, pipeline_dir: Path) -> StepContext:
    return StepContext(step=step, label="label", text=("title", "body"), ledger=Ledger(),
                       split_fractions={"train": 0.8, "validation": 0.1, "test": 0.1}, pipeline_dir=pipeline_dir)


def _demo_table(tmp_path: Path) -> pl.DataFrame:
    rows = int(os.environ.get("PREP_BENCH_ROWS", "1000000"))
    exports = tmp_path / "exports"
    given = os.environ.get("PREP_BENCH_DEMO")
    if given:
        shutil.copytree(given, exports)
    else:
        subprocess.run(
            [sys.executable, str(REPO / "sample_inputs" / "make_demo.py"), "--rows", str(rows), "--out", str(exports)], check=True
        )
    shutil.copy(REPO / "sample_inputs" / "pipeline.yaml", tmp_path / "pipeline.yaml")
    pipeline = load_pipeline(tmp_path / "pipeline.yaml")
    table, _ = read_sources(pipeline, Ledger())
    table = normalise.apply(table, normalise.Config(), build_ctx("normalise", tmp_path))
    return redact.apply(table, redact.Config(regions=["GB", "US"]), build_ctx("redact", tmp_path))


def _agreement(reference: list[str], other: list[str]) -> tuple[float, dict[str, str]]:
    per: dict[str, list[int]] = {}
    for r, o in zip(reference, other):
        per.setdefault(r, [0, 0])
        per[r][0] += r == o
        per[r][1] += 1
    overall = sum(a for a, _ in per.values()) / max(1, len(reference))
    return overall, {lang: f"{a}/{n} = {a / n:.1%}" for lang, (a, n) in sorted(per.items(), key=lambda kv: -kv[1][1])}


def test_language_benchmark(tmp_path: Path) -> None:
    table = _demo_table(tmp_path)
    texts = table.select(pl.concat_str(["title", "body"], separator=" ", ignore_nulls=True)).to_series().fill_null("")
    n_rows = table.height

    # prep's step, default backend, every row
    t0 = time.perf_counter()
    result = language_step.apply(table, language_step.Config(), build_ctx("language", tmp_path))
    step_seconds = time.perf_counter() - t0
    step_codes = result.get_column("language")

    # a sample of texts of 40 characters or more, the same for every contender
    rng = random.Random(20260)
    long_rows = texts.str.len_chars().ge(40).arg_true().to_list()
    sample_rows = sorted(rng.sample(long_rows, min(len(long_rows), int(os.environ.get("PREP_BENCH_SAMPLE", "3000")))))
    sample = texts.gather(sample_rows).to_list()

    t0 = time.perf_counter()
    reference = identify(sample, "langdetect", workers=1)  # untruncated, seeded, one core
    ld_seconds = time.perf_counter() - t0

    t0 = time.perf_counter()
    cld2_full = identify(sample, "cld2", workers=1)
    cld2_seconds = time.perf_counter() - t0

    sample_table = table.gather(sample_rows)
    t0 = time.perf_counter()
    ld_step = language_step.apply(sample_table, language_step.Config(backend="langdetect"), build_ctx("language", tmp_path))
    ld_step_seconds = time.perf_counter() - t0

    lines = [
        f"rows {n_rows}, sample {len(sample)} texts >= 40 chars, cores {len(os.sched_getaffinity(0))}, load {os.getloadavg()[0]:.1f}",
        f"langdetect per text, untruncated, 1 core : {len(sample) / ld_seconds:9.0f} texts/s",
        f"langdetect step (prefix, distinct, procs): {len(sample) / ld_step_seconds:9.0f} texts/s",
        f"cld2 per text, untruncated, 1 core       : {len(sample) / cld2_seconds:9.0f} texts/s",
        f"prep step, cld2, all {n_rows} rows       : {n_rows / step_seconds:9.0f} texts/s effective ({step_seconds:.1f} s)",
    ]
    agreements = {
        "prep step (cld2, prefix 200)": step_codes.gather(sample_rows).to_list(),
        "cld2 untruncated": cld2_full,
        "langdetect step (prefix 200)": ld_step.get_column("language").to_list(),
    }
    for prefix in (100, 300):
        cut = [t[:prefix] for t in sample]
        agreements[f"cld2 prefix {prefix}"] = identify(cut, "cld2", workers=1)
    try:
        import py3langid  # an alternative considered; not a dependency

        t0 = time.perf_counter()
        agreements["py3langid untruncated"] = [iso_code(py3langid.classify(t)[0]) for t in sample]
        lines.append(f"py3langid per text, untruncated, 1 core  : {len(sample) / (time.perf_counter() - t0):9.0f} texts/s")
    except ImportError:
        lines.append("py3langid not installed: skipped")
    for name, codes in agreements.items():
        overall, per = _agreement(reference, codes)
        lines.append(f"agreement with langdetect, {name}: {overall:.2%}  {per}")
    lines.append(f"langdetect answers on the sample: {dict(Counter(reference).most_common())}")
    print("\n" + "\n".join(lines))
    overall, _ = _agreement(reference, agreements["prep step (cld2, prefix 200)"])
    assert overall >= 0.97  # the target
