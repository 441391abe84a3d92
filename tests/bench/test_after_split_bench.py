"""Benchmark (opt-in, ``pytest -m bench -s``): the time the baseline and suspect_labels steps add
at 100,000 rows of the invented demo. Prints the figures; asserts only that the run balances.

The demo is generated with sample_inputs/make_demo.py into a temporary folder; the pipeline keeps
only `normalise` (which merges label spellings) and `missing` before the split, so that the
figures are those of the two steps.
"""

from __future__ import annotations

import importlib.util
import sys
import time
from pathlib import Path

import pytest

ROWS = 100_000
SAMPLE_INPUTS = Path(__file__).resolve().parents[2] / "sample_inputs"


def _make_demo():
    spec = importlib.util.spec_from_file_location("make_demo", SAMPLE_INPUTS / "make_demo.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules.setdefault("make_demo", module)
    spec.loader.exec_module(module)
    return module


@pytest.mark.bench
def test_baseline_and_suspect_labels_at_100k(tmp_path):
    from prep.pipeline import load_pipeline
    from prep.run import run_pipeline

    _make_demo().generate(rows=ROWS, out=tmp_path / "exports")
    text = (SAMPLE_INPUTS / "pipeline.yaml").read_text("utf-8")
    head, _, _ = text.partition("steps:")
    steps = ("steps:\n  - normalise: {}\n  - missing: {columns: {label: set_aside, body: {fill_from: title}}}\n"
             "  - baseline: {}\n  - suspect_labels: {}\n"
             "split: {train: 0.8, validation: 0.1, test: 0.1, seed: 7}\noutput: out/\n")
    (tmp_path / "pipeline.yaml").write_text(head + steps, encoding="utf-8")
    started = time.perf_counter()
    result = run_pipeline(load_pipeline(tmp_path / "pipeline.yaml"))
    total = time.perf_counter() - started
    seconds = {t.name: t.seconds for t in result.timings}
    print(f"\n{ROWS:,} rows read; splits {result.split_rows}; whole run {total:.1f} s")
    for name in ("baseline", "suspect_labels"):
        print(f"  {name:<16} {seconds[name]:7.1f} s")
    card = result.card
    print("  baseline metrics:", {s: {k: v for k, v in (card["baseline"]["metrics"][s] or {}).items() if k != "per_class_f1"}
                                  for s in ("validation", "test")})
    print("  suspect labels flagged:", card["suspect_labels"]["flagged"])
    assert result.rows_read == sum(result.split_rows.values()) + result.set_aside
