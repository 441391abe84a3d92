"""Shared fixtures: a small pipeline written into a temporary folder, and the CLI runner."""

from __future__ import annotations

import json
import textwrap
from pathlib import Path

import pytest
from click.testing import CliRunner

REPO = Path(__file__).resolve().parent.parent
DEMO_PIPELINE = REPO / "sample_inputs" / "pipeline.yaml"

CLASSES = {
    "billing": ["I was charged twice for ride {i}", "Refund for trip {i} please", "Invoice {i} shows the wrong amount"],
    "unlock": ["Scooter {i} will not unlock", "The dock at stop {i} is stuck", "Bike {i} stays locked after payment"],
    "app": ["The app crashes when I open map {i}", "Login loop on version {i}", "Cannot reset my password, try {i}"],
}


def small_rows(n_per_class: int = 12) -> list[dict]:
    rows = []
    for label, templates in CLASSES.items():
        for i in range(n_per_class):
            text = templates[i % len(templates)].format(i=i)
            rows.append({"ref": f"{label}-{i}", "summary": f"{label} case {i}", "description": text, "queue": label})
    return rows


@pytest.fixture
def small_pipeline(tmp_path: Path) -> Path:
    """A two-source pipeline (CSV + JSONL) over 3 classes x 12 rows, with a few planted problems."""
    rows = small_rows()
    csv_rows, json_rows = rows[::2], rows[1::2]
    lines = ["Case,Subject,Text,Team"]
    for r in csv_rows:
        lines.append(f'{r["ref"]},{r["summary"]},"{r["description"]}",{r["queue"]}')
    lines.append('dup-1,Billing case 0,"I was charged twice for ride 0",Billing')  # exact duplicate, other spelling
    lines.append("nolabel-1,Some subject,Some text,")  # missing label
    (tmp_path / "desk.csv").write_text("\r\n".join(lines) + "\r\n", encoding="utf-8")
    with open(tmp_path / "web.jsonl", "w", encoding="utf-8") as fh:
        for r in json_rows:
            fh.write(json.dumps(r) + "\n")
        fh.write("{not json\n")  # unreadable line
    (tmp_path / "pipeline.yaml").write_text(
        textwrap.dedent(
            """\
            dataset: small
            description: A small test pipeline.
            sources:
              - name: desk
                path: desk.csv
                columns: {ticket_id: Case, title: Subject, body: Text, label: Team}
              - name: web
                path: web.jsonl
                columns: {ticket_id: ref, title: summary, body: description, label: queue}
            label: label
            text: [title, body]
            steps:
              - normalise: {}
              - missing: {}
              - exact_duplicates: {}
              - rare_classes: {}
            split: {train: 0.6, validation: 0.2, test: 0.2, seed: 3}
            output: out/
            """
        ),
        encoding="utf-8",
    )
    return tmp_path / "pipeline.yaml"


@pytest.fixture
def cli_runner() -> CliRunner:
    return CliRunner()


@pytest.fixture(scope="session")
def demo_output(tmp_path_factory) -> Path:
    """One run of the shipped demo pipeline, shared (read-only) by every test that needs real outputs.

    Tests that change an output folder copy it first.
    """
    from prep.pipeline import load_pipeline
    from prep.run import run_pipeline

    pipeline = Path(__file__).resolve().parents[1] / "sample_inputs" / "pipeline.yaml"
    out = tmp_path_factory.mktemp("demo") / "out"
    run_pipeline(load_pipeline(pipeline), out=out)
    return out
