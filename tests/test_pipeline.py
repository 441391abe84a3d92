"""Loading and validating pipeline files: every error names the file, key path and YAML line (exit 2)."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from prep.errors import PipelineError
from prep.pipeline import load_pipeline

BASE = """\
dataset: demo
sources:
  - name: desk
    path: desk.csv
    columns: {title: Subject, body: Text, label: Team}
label: label
text: [title, body]
steps:
  - normalise: {}
split: {train: 0.8, validation: 0.1, test: 0.1, seed: 7}
output: out/
"""


def write(tmp_path: Path, text: str) -> Path:
    (tmp_path / "desk.csv").write_text("Subject,Text,Team\na,b,c\n", encoding="utf-8")
    (tmp_path / "desk.xyz").write_text("", encoding="utf-8")
    path = tmp_path / "pipeline.yaml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def test_valid_file_resolves_paths_and_defaults(tmp_path):
    p = load_pipeline(write(tmp_path, BASE))
    assert p.dataset == "demo"
    assert p.sources[0].path == tmp_path / "desk.csv"
    assert p.sources[0].format == "csv" and p.sources[0].compression is None
    assert p.split.stratify == "label"  # defaults to the label column
    assert p.output == tmp_path / "out"
    assert [s.name for s in p.steps] == ["normalise"]
    assert p.canonical_columns == ("title", "body", "label")
    assert len(p.sha256) == 64


@pytest.mark.parametrize(
    ("old", "new", "key", "line", "fragment"),
    [
        ("dataset: demo\n", "dataset: demo\ncolour: red\n", "colour", 2, "unknown key"),
        ("    path: desk.csv\n", "    path: nowhere.csv\n", "sources[0].path", 4, "not found"),
        ("    path: desk.csv\n", "    path: desk.xyz\n", "sources[0].path", 4, "format"),
        ("  - normalise: {}\n", "  - normalize: {}\n", "steps[0]", 9, "unknown step"),
        ("  - normalise: {}\n", "  - normalise: {colour: 1}\n", "steps[0].normalise.colour", 9, "unknown key"),
        ("seed: 7}", "seed: seven}", "split.seed", 10, "whole number"),
        ("test: 0.1,", "test: 0.3,", "split", 10, "sum to 1"),
        ("label: label\n", "label: team\n", "label", 6, "no source maps"),
        ("text: [title, body]\n", "text: [title, summary]\n", "text[1]", 7, "no source maps"),
        ("label: label\n", "label: 3\n", "label", 6, "expected a string"),
    ],
)
def test_errors_name_key_and_line(tmp_path, old, new, key, line, fragment):
    assert old in BASE
    path = write(tmp_path, BASE.replace(old, new))
    with pytest.raises(PipelineError) as info:
        load_pipeline(path)
    err = info.value
    assert err.exit_code == 2
    assert err.key == key
    assert err.line == line
    assert fragment in str(err)
    assert str(path) in str(err)


def test_duplicate_key_and_bad_yaml_give_a_line(tmp_path):
    path = write(tmp_path, BASE + "dataset: again\n")
    with pytest.raises(PipelineError) as info:
        load_pipeline(path)
    assert info.value.line == 12
    path = write(tmp_path, BASE.replace("text: [title, body]", "text: [title, body"))
    with pytest.raises(PipelineError) as info:
        load_pipeline(path)
    assert info.value.line is not None


def test_missing_file_and_directory(tmp_path):
    with pytest.raises(PipelineError, match="not found"):
        load_pipeline(tmp_path / "absent.yaml")
    (tmp_path / "sub").mkdir()
    path = write(tmp_path, BASE.replace("path: desk.csv", "path: sub"))
    with pytest.raises(PipelineError, match="directory"):
        load_pipeline(path)


def test_gzip_and_explicit_format(tmp_path):
    (tmp_path / "web.jsonl.gz").write_bytes(b"")
    (tmp_path / "dump.txt").write_bytes(b"")
    text = BASE.replace("path: desk.csv", "path: web.jsonl.gz")
    p = load_pipeline(write(tmp_path, text))
    assert (p.sources[0].format, p.sources[0].compression) == ("jsonl", "gzip")
    text = BASE.replace("path: desk.csv", "path: dump.txt\n    format: tsv")
    assert load_pipeline(write(tmp_path, text)).sources[0].format == "tsv"


def test_split_may_use_the_source_and_the_language_step_column(tmp_path):
    # Found by a new user: `group: source` and `stratify: language` were refused although both
    # columns are in the table at the split (provenance; the language step's output).
    grouped = BASE.replace("seed: 7}", "seed: 7, group: source}")
    assert load_pipeline(write(tmp_path, grouped)).split.group == "source"
    by_language = BASE.replace("  - normalise: {}\n", "  - normalise: {}\n  - language: {}\n").replace("seed: 7}", "seed: 7, stratify: language}")
    assert load_pipeline(write(tmp_path, by_language)).split.stratify == "language"
    # Without a language step there is no such column, and the message lists what can be used.
    with pytest.raises(PipelineError, match=r"split\.stratify.*`language` is not a column the split can use \(known: title, body, label, source\)"):
        load_pipeline(write(tmp_path, BASE.replace("seed: 7}", "seed: 7, stratify: language}")))
