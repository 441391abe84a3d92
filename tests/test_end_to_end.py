"""The whole run on the shipped demo: accounting, determinism, and what the outputs hold."""

from __future__ import annotations

import json
from pathlib import Path

import polars as pl
import pytest

from prep.ledger import LEDGER_SCHEMA, Reason
from prep.pipeline import load_pipeline
from prep.run import run_pipeline

DEMO_PIPELINE = Path(__file__).resolve().parent.parent / "sample_inputs" / "pipeline.yaml"

SPLITS = ("train", "validation", "test")
BYTE_IDENTICAL = ("train.parquet", "validation.parquet", "test.parquet", "set_aside.parquet", "card.json", "card.md")


@pytest.fixture(scope="module")
def demo_runs(demo_output, tmp_path_factory) -> tuple[Path, Path]:
    """Two runs of the demo: the shared session run (tests/conftest.py) and one more."""
    second = tmp_path_factory.mktemp("second") / "out"
    run_pipeline(load_pipeline(DEMO_PIPELINE), out=second)
    return demo_output, second


def test_every_row_accounted_for_exactly_once(demo_runs):
    out, _ = demo_runs
    splits = {name: pl.read_parquet(out / f"{name}.parquet") for name in SPLITS}
    ledger = pl.read_parquet(out / "set_aside.parquet")
    manifest = json.loads((out / "manifest.json").read_text())
    rows_read = manifest["rows"]["read"]
    ids = pl.concat([f.get_column("row_id") for f in splits.values()] + [ledger.get_column("row_id")])
    assert ids.len() == rows_read
    assert ids.n_unique() == rows_read
    # Rows read is what the sources hold: count them independently of prep's readers.
    card = json.loads((out / "card.json").read_text())
    assert card["accounting"]["balanced"] is True


def test_second_run_is_byte_identical(demo_runs):
    first, second = demo_runs
    for name in BYTE_IDENTICAL:
        assert (first / name).read_bytes() == (second / name).read_bytes(), name


def test_outputs_have_provenance_and_ledger_schema(demo_runs):
    out, _ = demo_runs
    for name in SPLITS:
        frame = pl.read_parquet(out / f"{name}.parquet")
        assert frame.columns[:3] == ["row_id", "source", "source_row"]
        assert not any(c.startswith("_") for c in frame.columns)
    ledger = pl.read_parquet(out / "set_aside.parquet")
    assert dict(ledger.schema) == LEDGER_SCHEMA
    assert set(ledger.get_column("reason").unique()) <= {r.value for r in Reason}
    dups = ledger.filter(pl.col("reason") == "exact_duplicate")
    assert dups.height > 0 and dups.get_column("kept_row_id").null_count() == 0
    # A kept row is never itself set aside.
    assert not set(dups.get_column("kept_row_id")) & set(ledger.get_column("row_id"))


def test_manifest_hashes_match_files(demo_runs):
    import hashlib

    out, _ = demo_runs
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["tool"] == "prep"
    for name, info in manifest["files"].items():
        assert hashlib.sha256((out / name).read_bytes()).hexdigest() == info["sha256"], name


def test_no_exact_text_leakage_between_splits(demo_runs):
    out, _ = demo_runs
    card = json.loads((out / "card.json").read_text())
    keys = []
    for name in SPLITS:
        frame = pl.read_parquet(out / f"{name}.parquet")
        keys.append(
            set(
                frame.select(
                    pl.concat_str([pl.col("title").fill_null(""), pl.col("body").fill_null("")], separator="\x1f")
                    .str.to_lowercase()
                ).to_series()
            )
        )
    assert not (keys[0] & keys[1]) and not (keys[0] & keys[2]) and not (keys[1] & keys[2])
    assert card["leakage"]["total"] == 0


def test_sources_parsed_side_by_side_give_what_one_at_a_time_gives(monkeypatch):
    # With two cores the runner parses two sources at once; the table, the ledger (unreadable
    # records) and the source facts must be those of reading them one after another.
    import os

    from prep.ledger import Ledger
    from prep.run import read_sources

    pipeline = load_pipeline(DEMO_PIPELINE)
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    side_ledger = Ledger()
    side_table, side_facts = read_sources(pipeline, side_ledger)
    monkeypatch.setattr(os, "cpu_count", lambda: 1)
    one_ledger = Ledger()
    one_table, one_facts = read_sources(pipeline, one_ledger)
    assert one_ledger.frame().height > 0  # the demo has unreadable records
    assert side_table.equals(one_table)
    assert side_ledger.frame().equals(one_ledger.frame())
    assert side_facts == one_facts


def test_the_first_failing_source_in_pipeline_order_is_the_error(small_pipeline, monkeypatch):
    # Both sources are broken; whichever parse finishes first, the error names the first source.
    import os

    from prep.errors import PrepError
    from prep.ledger import Ledger
    from prep.run import read_sources

    folder = small_pipeline.parent
    (folder / "desk.csv").write_text("Case,Subject\nx,y\n", encoding="utf-8")  # mapped columns missing
    (folder / "web.jsonl").write_text("[1, 2]\n" * 3, encoding="utf-8")  # no JSON object on any line
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    with pytest.raises(PrepError) as caught:
        read_sources(load_pipeline(small_pipeline), Ledger())
    assert "desk.csv" in str(caught.value) and "web.jsonl" not in str(caught.value)


def test_a_read_only_after_split_step_beside_the_next_keeps_file_order(small_pipeline, monkeypatch):
    # A READ_ONLY after-split step runs on a thread while the next step goes on; its facts, timing,
    # outputs and progress event still come in file order, and the next step sees the same splits.
    import dataclasses
    import threading
    import types

    import prep.run as run_module
    from prep.ledger import Ledger
    from prep.pipeline import StepSpec

    started = threading.Event()
    seen = {}

    def slow_apply(splits, config, ctx):
        started.set()
        threading.Event().wait(0.3)  # still running when the next step has finished
        ctx.report("mark", "slow")
        ctx.add_output("slow_output", pl.DataFrame({"a": [1]}))
        return splits

    def next_apply(splits, config, ctx):
        assert started.wait(5)
        seen["splits"] = splits
        ctx.report("mark", "next")
        return splits

    preloaded = []

    def preload(name):
        return lambda: preloaded.append((name, threading.get_ident(), started.is_set()))

    modules = {
        "slow": types.SimpleNamespace(PHASE="splits", READ_ONLY=True, apply_splits=slow_apply, preload=preload("slow")),
        "next": types.SimpleNamespace(PHASE="splits", apply_splits=next_apply, preload=preload("next")),
    }
    monkeypatch.setattr(run_module, "step_module", lambda name: modules[name])
    monkeypatch.setattr(run_module, "_overlap_possible", lambda: True)
    pipeline = dataclasses.replace(
        load_pipeline(small_pipeline), steps=[StepSpec("slow", None, "steps[0].slow", None), StepSpec("next", None, "steps[1].next", None)]
    )
    splits = {s: pl.DataFrame({"row_id": [f"{s}:0"]}) for s in SPLITS}
    events = []
    out, facts, timings, outputs = run_module.apply_steps(
        pipeline, splits, Ledger(), lambda kind, **kw: events.append(kw["step"]), phase="splits"
    )
    assert out is splits and seen["splits"] is splits
    assert [f.name for f in facts] == [t.name for t in timings] == events == ["slow", "next"]
    assert [f.facts["mark"] for f in facts] == ["slow", "next"]
    assert timings[0].seconds >= 0.3 and list(outputs) == ["slow_output"]
    # Every step's imports ran on the calling thread, before the read-only step started.
    assert preloaded == [("slow", threading.get_ident(), False), ("next", threading.get_ident(), False)]

    # A READ_ONLY step that changes the splits is a bug, and the run says so.
    modules["slow"] = types.SimpleNamespace(PHASE="splits", READ_ONLY=True,
                                            apply_splits=lambda s, c, ctx: {**s, "train": s["train"].with_columns(pl.lit("x").alias("row_id"))})
    with pytest.raises(AssertionError, match="READ_ONLY"):
        run_module.apply_steps(pipeline, splits, Ledger(), phase="splits")


def test_the_demo_with_no_step_beside_another_gives_the_same_bytes(demo_output, tmp_path, monkeypatch):
    # The session's demo run overlaps baseline with suspect_labels where the machine allows it
    # (two cores, a thread-safe numba layer); one after the other must give the same files.
    import prep.run as run_module

    monkeypatch.setattr(run_module, "_overlap_possible", lambda: False)
    out = tmp_path / "one-by-one"
    run_pipeline(load_pipeline(DEMO_PIPELINE), out=out)
    for name in (*BYTE_IDENTICAL, "baseline_predictions.parquet", "suspect_labels.parquet", "duplicates.parquet"):
        assert (out / name).read_bytes() == (demo_output / name).read_bytes(), name


def test_after_split_imports_are_done_before_two_steps_run_at_once():
    # baseline and suspect_labels import scikit-learn when they start; run side by side, their first
    # imports met and failed ("cannot import name 'clone' from partially initialized module
    # 'sklearn.base'", at 500k rows; two threads importing these modules at once failed 8 times in 8
    # here). After the steps' preload, the same two-thread imports must succeed.
    import subprocess
    import sys
    import textwrap

    script = textwrap.dedent(
        """
        import threading
        from prep.steps import baseline, suspect_labels
        baseline.preload()
        suspect_labels.preload()
        errors = []
        def first():
            try:
                from sklearn.feature_extraction.text import TfidfTransformer
                from sklearn.linear_model import SGDClassifier
                from sklearn.metrics import f1_score
            except Exception as exc:
                errors.append(repr(exc))
        def second():
            try:
                from sklearn.model_selection import StratifiedKFold
                from sklearn.linear_model import SGDClassifier
                from sklearn.feature_extraction.text import TfidfTransformer
            except Exception as exc:
                errors.append(repr(exc))
        threads = [threading.Thread(target=first), threading.Thread(target=second)]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        print(errors or "ok")
        """
    )
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0 and done.stdout.strip() == "ok", done.stdout + done.stderr


def test_an_earlier_read_only_steps_error_wins_over_a_later_steps_error(small_pipeline, monkeypatch):
    # Run one after the other, the read-only step's error (first in file order) is the one reported;
    # side by side it must be too, even when the next step fails first.
    import dataclasses
    import threading
    import types

    import prep.run as run_module
    from prep.errors import DataError
    from prep.ledger import Ledger
    from prep.pipeline import StepSpec

    def failing_read_only(splits, config, ctx):
        threading.Event().wait(0.3)
        raise DataError("error of the read-only step")

    def failing_next(splits, config, ctx):
        raise DataError("error of the next step")

    modules = {
        "first": types.SimpleNamespace(PHASE="splits", READ_ONLY=True, apply_splits=failing_read_only),
        "second": types.SimpleNamespace(PHASE="splits", apply_splits=failing_next),
    }
    monkeypatch.setattr(run_module, "step_module", lambda name: modules[name])
    pipeline = dataclasses.replace(
        load_pipeline(small_pipeline), steps=[StepSpec("first", None, "steps[0].first", None), StepSpec("second", None, "steps[1].second", None)]
    )
    splits = {s: pl.DataFrame({"row_id": [f"{s}:0"]}) for s in SPLITS}
    for overlap in (True, False):
        monkeypatch.setattr(run_module, "_overlap_possible", lambda overlap=overlap: overlap)
        with pytest.raises(DataError, match="read-only step"):
            run_module.apply_steps(pipeline, splits, Ledger(), phase="splits")


def test_demo_split_stratified_by_language_runs_and_balances(tmp_path):
    # The split may stratify by the column the language step adds (see README "Splitting"): each
    # language's rows are spread over the splits in proportion (largest remainder per stratum).
    import shutil

    repo = DEMO_PIPELINE.parent.parent
    shutil.copytree(repo / "sample_inputs" / "exports", tmp_path / "sample_inputs" / "exports")
    shutil.copytree(repo / "schemas", tmp_path / "schemas")
    text = (repo / "sample_inputs" / "pipeline.yaml").read_text(encoding="utf-8")
    lines = [line for line in text.splitlines() if not line.lstrip().startswith(("- baseline", "- suspect_labels"))]
    text = "\n".join(lines).replace("seed: 7}", "seed: 7, stratify: language}") + "\n"
    path = tmp_path / "sample_inputs" / "pipeline.yaml"
    path.write_text(text, encoding="utf-8")
    result = run_pipeline(load_pipeline(path))
    frames = {s: pl.read_parquet(result.output / f"{s}.parquet") for s in SPLITS}
    assert sum(f.height for f in frames.values()) + pl.read_parquet(result.output / "set_aside.parquet").height == result.rows_read
    per_language = pl.concat([f.select("language", pl.lit(s).alias("split")) for s, f in frames.items()])
    counts = per_language.group_by("language", "split").len().pivot("split", index="language", values="len").fill_null(0)
    for row in counts.iter_rows(named=True):
        n = row["train"] + row.get("validation", 0) + row.get("test", 0)
        # The largest-remainder (Hamilton) method gives every split the floor or the ceiling of its
        # exact quota n x fraction (0.8/0.1/0.1), so each is within one row of it.
        for split, fraction in (("train", 0.8), ("validation", 0.1), ("test", 0.1)):
            assert abs(row.get(split, 0) - n * fraction) < 1 + 1e-9, (row, split)
