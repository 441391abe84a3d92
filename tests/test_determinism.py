"""Determinism: the same inputs give byte-identical outputs across reruns, PYTHONHASHSEED values and
polars thread counts (the thread pool is fixed when polars is imported, so each run is its own process).

Only ``manifest.json`` may differ (it holds the run times); every other file is compared byte for byte.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

CLASSES = {
    "billing": ["I was charged twice for ride {i}", "Refund for trip {i} please", "Invoice {i} shows the wrong amount"],
    "unlock": ["Scooter {i} will not unlock", "The dock at stop {i} is stuck", "Bike {i} stays locked after payment"],
    "app": ["The app crashes when I open map {i}", "Login loop on version {i}", "Cannot reset my password, try {i}"],
}


def small_rows(n_per_class: int) -> list[dict]:
    """Invented tickets: ``n_per_class`` per class, texts from the templates above."""
    return [
        {"ref": f"{label}-{i}", "summary": f"{label} case {i}", "description": templates[i % 3].format(i=i), "queue": label}
        for label, templates in CLASSES.items()
        for i in range(n_per_class)
    ]

RUNS = [
    {"PYTHONHASHSEED": "0", "POLARS_MAX_THREADS": "1"},
    {"PYTHONHASHSEED": "4242", "POLARS_MAX_THREADS": "2"},
]


def _write_case(folder: Path) -> Path:
    rows = small_rows(14)
    lines = ["Case,Subject,Text,Team"]
    for i, r in enumerate(rows):
        lines.append(f'{r["ref"]},{r["summary"]},"{r["description"]}",{r["queue"]}')
        if i % 5 == 0:  # exact duplicates, some with a conflicting label, so the clusters file is written
            team = r["queue"] if i % 10 else "billing"
            lines.append(f'dup-{i},{r["summary"].upper()},"{r["description"]}",{team}')
    lines.append("nolabel,Some subject,Some text,")
    (folder / "desk.csv").write_text("\r\n".join(lines) + "\r\n", encoding="utf-8")
    with open(folder / "web.jsonl", "w", encoding="utf-8") as fh:
        for r in rows[::3]:
            fh.write(json.dumps(dict(r, ref="w" + r["ref"], description=r["description"] + " (web form)")) + "\n")
        fh.write("{not json\n")
    spec = {
        "dataset": "determinism",
        "sources": [
            {"name": "desk", "path": "desk.csv", "columns": {"ticket_id": "Case", "title": "Subject", "body": "Text", "label": "Team"}},
            {"name": "web", "path": "web.jsonl", "columns": {"ticket_id": "ref", "title": "summary", "body": "description", "label": "queue"}},
        ],
        "label": "label",
        "text": ["title", "body"],
        "steps": [{"normalise": {}}, {"missing": {}}, {"exact_duplicates": {}}, {"rare_classes": {}}],
        "split": {"train": 0.7, "validation": 0.15, "test": 0.15, "seed": 11},
        "output": "out/",
    }
    pipeline = folder / "pipeline.yaml"
    pipeline.write_text(json.dumps(spec), encoding="utf-8")
    return pipeline


def _files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir()) if p.name != "manifest.json"}


def test_outputs_are_byte_identical_across_hash_seeds_and_thread_counts(tmp_path):
    pipeline = _write_case(tmp_path)
    results = []
    for i, env_extra in enumerate(RUNS):
        out = tmp_path / f"out{i}"
        env = {**os.environ, **env_extra}
        proc = subprocess.run(
            [sys.executable, "-m", "prep", "run", str(pipeline), "--out", str(out), "-q"],
            capture_output=True, text=True, env=env, timeout=300,
        )
        assert proc.returncode == 0, proc.stderr
        results.append(_files(out))
    first, second = results
    for name in ("train.parquet", "validation.parquet", "test.parquet", "set_aside.parquet", "card.json", "card.md"):
        assert name in first, name
    # The duplicate clusters (`duplicates.parquet`, or `exact_duplicate_clusters.parquet` before the
    # near-duplicate step combined them) are compared too.
    assert any("duplicate" in name for name in first), sorted(first)
    assert first.keys() == second.keys()
    differing = sorted(name for name in first if first[name] != second[name])
    assert differing == []


def test_rerun_in_the_same_process_is_byte_identical(tmp_path, cli_runner):
    from prep.cli import cli

    pipeline = _write_case(tmp_path)
    outputs = []
    for i in range(2):
        out = tmp_path / f"again{i}"
        result = cli_runner.invoke(cli, ["run", str(pipeline), "--out", str(out), "-q"])
        assert result.exit_code == 0, result.output
        outputs.append(_files(out))
    assert outputs[0] == outputs[1]


def test_parquet_bytes_do_not_depend_on_memory_chunks(tmp_path):
    # The same rows held in one memory chunk or in two must give the same file bytes.
    import polars as pl

    from prep.write import OutputFolder

    whole = pl.DataFrame({"row_id": [f"s:{i}" for i in range(300_000)], "n": list(range(300_000))})
    pieces = pl.concat([whole.slice(0, 1_000), whole.slice(1_000)], rechunk=False)
    assert pieces.n_chunks() == 2
    digests = []
    for name, frame in (("a", whole), ("b", pieces)):
        with OutputFolder(tmp_path / name) as folder:
            digests.append(folder.write_parquet("x.parquet", frame)["sha256"])
            folder.commit({})
    assert digests[0] == digests[1]
