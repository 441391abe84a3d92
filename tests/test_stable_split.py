"""Stable splits across versions (``split.history``): old rows keep their split, new rows fill in.

References: the largest-remainder allocation checked in tests/test_split.py; own invariants
otherwise (stated per test). All data is invented.
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest

from prep.errors import InputError, PipelineError
from prep.split import SPLITS, assign_splits, load_split_history

FRACTIONS = {"train": 0.8, "validation": 0.1, "test": 0.1}
QUEUES = ["Billing", "Unlock & Docking", "Lost & Found", "App & Login"]


def table(n: int, *, start: int = 0, seed: int = 0) -> pl.DataFrame:
    rng = np.random.default_rng(seed)
    labels = rng.choice(QUEUES, size=n, p=[0.5, 0.25, 0.15, 0.1]).tolist()
    return pl.DataFrame({"row_id": [f"desk:{i}" for i in range(start, start + n)], "label": labels,
                         "customer": [f"cust-{(i * 7) % 97}" for i in range(start, start + n)]})


def split(frame, *, history=None, group=None, seed=7):
    result = assign_splits(frame, fractions=FRACTIONS, seed=seed, stratify="label", group=group, history=history)
    return result, dict(zip(frame["row_id"], result.assignment))


def as_history(frame, assignment: dict[str, str]) -> pl.DataFrame:
    return pl.DataFrame({"row_id": list(assignment), "split": list(assignment.values())})


@pytest.mark.parametrize("group", [None, "customer"])
@pytest.mark.parametrize("added", [0, 37, 400])
def test_old_rows_keep_their_split_and_new_rows_keep_proportions(group, added):
    old = table(1000, seed=1)
    _, before = split(old, group=group)
    new = pl.concat([old, table(added, start=1000, seed=2)])
    result, after = split(new, history=as_history(old, before), group=group)
    assert {r: after[r] for r in before} == before                  # 0 rows moved
    if group:
        per_group = new.with_columns(result.assignment).group_by("customer").agg(pl.col("split").n_unique())
        assert per_group["split"].max() == 1                          # groups never cut
    else:
        # Own invariant: a class's counts end within one row of its exact target whenever the kept
        # rows do not already overfill a split (here they never do: the old split was on target).
        counts = new.with_columns(result.assignment).group_by("label", "split").len()
        sizes = dict(new.group_by("label").len().iter_rows())
        for klass, name, n in counts.iter_rows():
            assert abs(n - sizes[klass] * FRACTIONS[name]) < 1.0 + 1e-9, (klass, name, n)
    assert any(n.startswith("Stable split:") and "kept the split" in n for n in result.notes)
    assert any("largest drift" in n for n in result.notes)


def test_without_history_the_same_rows_may_move():
    # The reason for the option: the plain split re-cuts each class, so some old rows move.
    old = table(1000, seed=1)
    _, before = split(old)
    new = pl.concat([old, table(400, start=1000, seed=2)])
    _, after = split(new)
    assert sum(after[r] != s for r, s in before.items()) > 0


def test_history_equal_to_the_table_reproduces_it():
    frame = table(500, seed=3)
    _, before = split(frame)
    _, again = split(frame, history=as_history(frame, before))
    assert again == before


def test_history_ignores_rows_no_longer_present_and_is_order_free():
    old = table(600, seed=4)
    _, before = split(old)
    new = pl.concat([old.slice(100), table(50, start=600, seed=5)])
    _, a = split(new, history=as_history(old, before))
    _, b = split(new.sample(fraction=1.0, shuffle=True, seed=9), history=as_history(old, before))
    assert a == b
    assert all(a[r] == before[r] for r in new["row_id"] if r in before)


def _write_output(folder, frame, assignment):
    folder.mkdir()
    for name in SPLITS:
        ids = [r for r, s in assignment.items() if s == name]
        frame.filter(pl.col("row_id").is_in(ids)).write_parquet(folder / f"{name}.parquet")


def test_history_from_an_output_folder(tmp_path):
    old = table(300, seed=6)
    _, before = split(old)
    _write_output(tmp_path / "v1", old, before)
    history = load_split_history(tmp_path / "v1")
    assert dict(zip(history["row_id"], history["split"])) == before
    new = pl.concat([old, table(30, start=300, seed=7)])
    _, after = split(new, history=tmp_path / "v1")
    assert {r: after[r] for r in before} == before


def test_a_missing_split_file_is_an_input_error(tmp_path):
    (tmp_path / "v1").mkdir()
    table(5).write_parquet(tmp_path / "v1" / "train.parquet")
    with pytest.raises(InputError, match=r"validation\.parquet"):
        load_split_history(tmp_path / "v1", shown="v1")


def test_pipeline_key_split_history(tmp_path):
    from prep.pipeline import load_pipeline

    (tmp_path / "in.csv").write_text("text,label\nhello,a\n", encoding="utf-8")
    base = ("dataset: d\nsources:\n  - {name: s, path: in.csv, columns: {body: text, label: label}}\n"
            "label: label\ntext: [body]\nsplit: {train: 0.8, validation: 0.1, test: 0.1, seed: 1, history: old}\n"
            "output: out/\n")
    (tmp_path / "p.yaml").write_text(base, encoding="utf-8")
    with pytest.raises(PipelineError, match=r"split\.history.*not a folder"):
        load_pipeline(tmp_path / "p.yaml")
    (tmp_path / "old").mkdir()
    with pytest.raises(PipelineError, match=r"split\.history.*train\.parquet"):
        load_pipeline(tmp_path / "p.yaml")
    _write_output(tmp_path / "old2", table(3), {"desk:0": "train", "desk:1": "validation", "desk:2": "test"})
    (tmp_path / "p.yaml").write_text(base.replace("history: old", "history: old2"), encoding="utf-8")
    assert load_pipeline(tmp_path / "p.yaml").split.history == "old2"


def test_own_output_as_history_allocates_afresh_on_the_first_run(tmp_path):
    # README: the history may be the pipeline's own `output`. On the very first run that folder does
    # not exist yet; that failed with "not a folder" (found by a new user). Now the first run
    # allocates every row and says so, and the second keeps every row in its split.
    from prep.pipeline import load_pipeline
    from prep.run import run_pipeline

    rows = "\n".join(f"ticket {i} about {'billing' if i % 2 else 'access'} number {i * 7919 % 1000}," + ("a" if i % 2 else "b")
                     for i in range(60))
    (tmp_path / "in.csv").write_text("text,label\n" + rows + "\n", encoding="utf-8")
    (tmp_path / "p.yaml").write_text(
        "dataset: d\nsources:\n  - {name: s, path: in.csv, columns: {body: text, label: label}}\n"
        "label: label\ntext: [body]\nsplit: {train: 0.6, validation: 0.2, test: 0.2, seed: 1, history: out}\n"
        "output: out/\n", encoding="utf-8")
    first = run_pipeline(load_pipeline(tmp_path / "p.yaml"))
    notes = first.card["splits"]["notes"]
    assert any("`out` (this pipeline's own output) does not exist yet" in n for n in notes), notes
    second = run_pipeline(load_pipeline(tmp_path / "p.yaml"))
    assert any("60 rows kept the split they had" in n for n in second.card["splits"]["notes"]), second.card["splits"]["notes"]
    assert second.split_rows == first.split_rows
    # Another folder that does not exist is still an error.
    (tmp_path / "q.yaml").write_text((tmp_path / "p.yaml").read_text().replace("history: out", "history: old"), encoding="utf-8")
    with pytest.raises(PipelineError, match=r"split\.history.*not a folder"):
        load_pipeline(tmp_path / "q.yaml")


def test_own_output_history_with_another_out_or_an_impossible_path_is_refused(tmp_path, cli_runner):
    # Found in review: with --out elsewhere, every run counted as the first (the history folder never
    # appears), and `gone/../out` names a folder that can never exist. Both are refused, in one line,
    # before any work.
    from prep.cli import cli
    from prep.pipeline import load_pipeline

    (tmp_path / "in.csv").write_text("text,label\nhello there,a\nsomething else,b\n", encoding="utf-8")
    base = ("dataset: d\nsources:\n  - {name: s, path: in.csv, columns: {body: text, label: label}}\n"
            "label: label\ntext: [body]\nsplit: {train: 0.6, validation: 0.2, test: 0.2, seed: 1, history: out}\n"
            "output: out/\n")
    (tmp_path / "p.yaml").write_text(base, encoding="utf-8")
    result = cli_runner.invoke(cli, ["run", str(tmp_path / "p.yaml"), "--out", str(tmp_path / "elsewhere")])
    assert result.exit_code == 2, result.stderr
    assert "`split.history`: the split history `out` does not exist" in result.stderr and "elsewhere" in result.stderr
    assert not (tmp_path / "elsewhere").exists() or not any((tmp_path / "elsewhere").iterdir())
    (tmp_path / "q.yaml").write_text(base.replace("history: out", "history: gone/../out"), encoding="utf-8")
    with pytest.raises(PipelineError, match=r"split\.history.*not a folder"):
        load_pipeline(tmp_path / "q.yaml")
