"""Tests of `prep compare`.

References: scipy's ``scipy.spatial.distance.jensenshannon`` (a general-purpose library) for the
Jensen-Shannon distance, and its definition (Lin 1991) worked by hand for two small cases; the
version-to-version expectations are exact counts of invented rows.
"""

from __future__ import annotations

import json
import math

import numpy as np
import polars as pl
import pytest
from click.testing import CliRunner
from scipy.spatial.distance import jensenshannon

from prep.cli import cli
from prep.compare import compare, js_distance, render_html, write
from prep.errors import InputError
from prep.split import SPLITS, assign_splits, load_split_history

FRACTIONS = {"train": 0.8, "validation": 0.1, "test": 0.1}
WORDS = "rider bike dock station refund invoice app login helmet scooter lock card phone basket".split()


@pytest.mark.parametrize("p,q", [({"a": 10, "b": 5}, {"a": 3, "b": 9, "c": 1}),
                                 ({"a": 1}, {"a": 1}), ({"x": 2, "y": 2}, {"x": 7, "y": 1})])
def test_js_distance_against_scipy(p, q):
    keys = sorted(set(p) | set(q))
    expected = jensenshannon([p.get(k, 0) for k in keys], [q.get(k, 0) for k in keys], base=2)
    assert js_distance(p, q) == pytest.approx(expected, abs=1e-6)


def test_js_distance_by_hand():
    # Disjoint supports: divergence 1 bit, distance 1 (Lin 1991). Halves vs all-in-one: the mixture
    # is (3/4, 1/4); JSD = 1/2 [1/2 log2(2/3) + 1/2 log2(2)] + 1/2 [log2(4/3)] = 0.3113 bits.
    assert js_distance({"a": 1}, {"b": 1}) == pytest.approx(1.0)
    jsd = 0.5 * (0.5 * math.log2(0.5 / 0.75) + 0.5 * math.log2(0.5 / 0.25)) + 0.5 * math.log2(1 / 0.75)
    assert js_distance({"a": 1, "b": 1}, {"a": 1}) == pytest.approx(math.sqrt(jsd), abs=1e-6)


def _rows(start: int, n: int, seed: int, classes=("Billing", "Lost & Found", "App & Login")) -> pl.DataFrame:
    rng = np.random.default_rng(seed)
    return pl.DataFrame({
        "row_id": [f"desk:{i}" for i in range(start, start + n)],
        "source": ["desk"] * n,
        "source_row": list(range(start, start + n)),
        "title": [None] * n,
        "body": [" ".join(rng.choice(WORDS, size=12)) + f" ticket {i}" for i in range(start, start + n)],
        "label": rng.choice(list(classes), size=n).tolist(),
    }, schema_overrides={"source_row": pl.Int64})


def _output(folder, frame, *, history=None, seed=7):
    result = assign_splits(frame, fractions=FRACTIONS, seed=seed, stratify="label", group=None, history=history)
    folder.mkdir()
    for name in SPLITS:
        frame.filter(result.assignment == name).write_parquet(folder / f"{name}.parquet")
    card = {"dataset": "invented", "task": {"label_column": "label", "text_columns": ["title", "body"]}}
    (folder / "card.json").write_text(json.dumps(card), encoding="utf-8")
    return folder


def test_two_runs_on_the_same_data_compare_as_identical(tmp_path):
    frame = _rows(0, 400, 1)
    a, b = _output(tmp_path / "a", frame), _output(tmp_path / "b", frame)
    result = compare(a, b)
    assert result["identical"] is True
    assert result["classes"]["js_distance"] == 0
    assert result["splits"]["moved"] == 0 and result["splits"]["added"] == 0
    # Cross-version leakage: the same rows, the same splits: nothing of the old train is in new validation/test.
    assert result["leakage"]["rows"] == {"validation": 0, "test": 0}
    # Deterministic bytes.
    write(result, tmp_path / "c1")
    write(compare(a, b), tmp_path / "c2")
    for name in ("compare.json", "compare.html"):
        assert (tmp_path / "c1" / name).read_bytes() == (tmp_path / "c2" / name).read_bytes()


def test_added_rows_are_new_and_stable_splits_move_none(tmp_path):
    old = _rows(0, 500, 2)
    new = pl.concat([old, _rows(500, 120, 3, classes=("Billing", "Lost & Found", "App & Login", "Accessibility"))])
    v1 = _output(tmp_path / "v1", old)
    stable = _output(tmp_path / "v2", new, history=load_split_history(v1))
    plain = _output(tmp_path / "v2plain", new)
    result = compare(v1, stable)
    assert result["identical"] is False
    assert result["splits"]["added"] == 120
    assert sum(result["splits"]["added_per_split"].values()) == 120
    assert result["splits"]["removed"] == 0
    assert result["splits"]["moved"] == 0
    assert result["leakage"]["rows"] == {"validation": 0, "test": 0}
    assert result["classes"]["new_classes"] == ["Accessibility"] and result["classes"]["vanished_classes"] == []
    # Without history, rows move, and the old train rows that moved to validation/test leak.
    moving = compare(v1, plain)
    moved_to_eval = sum(v for k, v in moving["splits"]["transitions"].items() if k.startswith("train->"))
    assert moving["splits"]["moved"] > 0
    assert moving["leakage"]["rows"]["validation"] + moving["leakage"]["rows"]["test"] >= moved_to_eval
    # Class counts: the per-class table is exact.
    per_class = {r["class"]: (r["old_rows"], r["new_rows"]) for r in result["classes"]["per_class"]}
    old_counts = dict(old.group_by("label").len().iter_rows())
    new_counts = dict(new.group_by("label").len().iter_rows())
    assert per_class == {k: (old_counts.get(k, 0), new_counts.get(k, 0)) for k in set(old_counts) | set(new_counts)}


def test_html_escapes_class_names_and_holds_no_text(tmp_path):
    frame = _rows(0, 200, 4, classes=("<b>Billing</b>", "Lost & Found"))
    a, b = _output(tmp_path / "a", frame), _output(tmp_path / "b", frame)
    page = render_html(compare(a, b))
    assert "<b>Billing</b>" not in page and "&lt;b&gt;Billing&lt;/b&gt;" in page
    assert "ticket 17" not in page and "ticket 17" not in json.dumps(compare(a, b))


def test_cli_compare(tmp_path):
    frame = _rows(0, 200, 5)
    a, b = _output(tmp_path / "a", frame), _output(tmp_path / "b", frame)
    result = CliRunner().invoke(cli, ["compare", str(a), str(b), "--out", str(tmp_path / "c")])
    assert result.exit_code == 0, result.output
    assert "identical" in result.output and "rows whose split changed: 0" in result.output
    assert (tmp_path / "c" / "compare.json").is_file() and (tmp_path / "c" / "compare.html").is_file()
    bad = CliRunner().invoke(cli, ["compare", str(a), str(tmp_path / "nowhere")])
    assert bad.exit_code == 1 and "is not a folder" in bad.output


def test_not_an_output_folder(tmp_path):
    (tmp_path / "x").mkdir()
    with pytest.raises(InputError, match="card.json"):
        compare(tmp_path / "x", tmp_path / "x")
