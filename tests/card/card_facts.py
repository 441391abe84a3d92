"""A small invented RunFacts for the card tests (helpers; the fixture is in conftest.py).

``make_facts(**overrides) -> RunFacts``: an invented bike-share help desk
with three classes, two sources, three steps and a ledger. Every text cell and every other
non-label cell holds a distinctive marker (see ``SECRET_MARKERS``) so tests can assert that no
row value reaches the card. Personal-data look-alikes use the reserved example.com domain only.
"""

from __future__ import annotations

import hashlib

import polars as pl

from prep.facts import RunFacts, SourceFacts, SplitFileFacts, StepFacts
from prep.ledger import LEDGER_SCHEMA

#: Substrings of row values that must never appear in card.json or card.md.
SECRET_MARKERS = ("Quokkafinch-7731", "rider.unique@example.com", "TK-55501", "Wanda Quillfeather")

LABELS = {"train": ["billing"] * 6 + ["unlock"] * 3 + ["app"] * 1, "validation": ["billing", "unlock", "app"], "test": ["billing", "unlock"]}


def sha(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()


def split_frame(name: str, labels: list[str | None], *, start: int = 0) -> pl.DataFrame:
    n = len(labels)
    return pl.DataFrame(
        {
            "row_id": [f"desk:{start + i}" for i in range(n)],
            "source": ["desk"] * n,
            "source_row": list(range(start, start + n)),
            "ticket_id": [f"TK-55501-{name}-{i}" for i in range(n)],
            "title": [f"Quokkafinch-7731 {name} {i}" for i in range(n)],
            "body": [f"Wanda Quillfeather wrote from rider.unique@example.com about case {name} {i}" for i in range(n)],
            "label": labels,
        },
        schema={
            "row_id": pl.String, "source": pl.String, "source_row": pl.Int64,
            "ticket_id": pl.String, "title": pl.String, "body": pl.String, "label": pl.String,
        },
    )


def ledger_frame(rows: list[tuple[str, str, str]]) -> pl.DataFrame:
    """(row_id, step, reason) triples -> a ledger frame."""
    return pl.DataFrame(
        {
            "row_id": [r[0] for r in rows],
            "source": [r[0].split(":")[0] for r in rows],
            "source_row": [int(r[0].split(":")[1]) for r in rows],
            "step": [r[1] for r in rows],
            "reason": [r[2] for r in rows],
            "detail": [None] * len(rows),
            "kept_row_id": [None] * len(rows),
            "similarity": [None] * len(rows),
        },
        schema=LEDGER_SCHEMA,
    )


def make_facts(**overrides) -> RunFacts:
    splits = {}
    start = 0
    for name, labels in LABELS.items():
        splits[name] = split_frame(name, labels, start=start)
        start += len(labels)
    ledger = ledger_frame(
        [
            ("web:0", "read", "unreadable"),
            ("desk:100", "missing", "missing_label"),
            ("desk:101", "exact_duplicates", "exact_duplicate"),
            ("desk:102", "exact_duplicates", "exact_duplicate"),
            ("desk:103", "exact_duplicates", "label_conflict"),
        ]
    )
    split_files = {
        name: SplitFileFacts(
            file=f"{name}.parquet", rows=frame.height, sha256=sha(f"split {name}"),
            columns={c: str(t) for c, t in frame.schema.items()},
        )
        for name, frame in splits.items()
    }
    rows_in_splits = sum(f.height for f in splits.values())
    values = dict(
        dataset="spokewheel-help",
        description="Invented tickets of an invented bike-share help desk.",
        about={"purpose": "Test the card.", "intended_use": None, "license": "CC0-1.0", "maintainer": None, "contact": None},
        label="label",
        text=["title", "body"],
        split_config={"train": 0.8, "validation": 0.1, "test": 0.1, "seed": 7, "stratify": "label", "group": None},
        seed=7,
        tool_version="0.1.0",
        pipeline_sha256=sha("pipeline"),
        sources=[
            SourceFacts("desk", "exports/desk.csv", "csv", None, "utf-8", rows_in_splits + 4, 0, sha("desk"), 2048),
            SourceFacts("web", "exports/web.jsonl.gz", "jsonl", "gzip", "utf-8", 1, 1, sha("web"), 99),
        ],
        steps=[
            StepFacts("normalise", {"labels": True}, 19, 19, {}, {
                "columns": ["title", "body"], "changed_cells": {"body": 3, "label": 2},
                "label_merges": [{"class": "billing", "spellings": {"Billing": 1, "billing": 6}}],
            }),
            StepFacts("missing", {"label": "set_aside"}, 19, 18, {"missing_label": 1}, {}),
            StepFacts("exact_duplicates", {}, 18, 15, {"exact_duplicate": 2, "label_conflict": 1}, {"groups": 2}),
        ],
        splits=splits,
        split_files=split_files,
        split_notes=["Class `app` has too few rows for the test split."],
        ledger=ledger,
        rows_read=rows_in_splits + ledger.height,
    )
    values.update(overrides)
    return RunFacts(**values)
