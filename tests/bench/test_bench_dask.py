"""Opt-in: the Dask engine against the local engine at 250k, 500k and 1M rows (see bench_dask.py)."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

pytest.importorskip("distributed")
sys.path.insert(0, str(Path(__file__).resolve().parent))


@pytest.mark.bench
def test_bench_dask_against_local(tmp_path):
    from bench_dask import DEFAULT_SIZES, report, run_both

    results = {n: run_both(n, tmp_path) for n in DEFAULT_SIZES}
    print(report(results))
    assert all(r["same_outputs"] for r in results.values())
