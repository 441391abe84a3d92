"""Opt-in: the whole demo pipeline at 250k, 500k and 1M rows (``pytest -m bench -s``).

The work is in ``bench_pipeline.py`` beside this file (also runnable as a script). Sizes:
PREP_BENCH_PIPELINE_SIZES (default "250000,500000,1000000"); PREP_BENCH_DATA keeps the generated
inputs for reuse.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
import bench_pipeline  # noqa: E402

pytestmark = pytest.mark.bench


def test_pipeline_at_scale(tmp_path):
    sizes = [int(x) for x in os.environ.get("PREP_BENCH_PIPELINE_SIZES", "250000,500000,1000000").split(",")]
    folder = Path(os.environ["PREP_BENCH_DATA"]) if os.environ.get("PREP_BENCH_DATA") else tmp_path
    results = {}
    for n in sizes:
        exports = bench_pipeline.generate(n, folder)
        results[n] = bench_pipeline.run_once(bench_pipeline.pipeline_for(exports, folder))
        rows = results[n]["rows"]
        # every row read is in one split or in the ledger
        assert rows["read"] == rows["train"] + rows["validation"] + rows["test"] + rows["set_aside"]
    print()
    print(bench_pipeline.report(results))
