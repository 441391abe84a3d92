"""What a run learned, handed from the runner to the card builder.

Everything here is deterministic for the same inputs (no timings, no absolute paths),
so that ``card.json`` is byte-identical across runs. Timings live in the manifest only.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import polars as pl


@dataclass
class SourceFacts:
    name: str
    path: str                 # as written in the pipeline file (relative), never absolute
    format: str               # csv, tsv, jsonl, json, parquet
    compression: str | None   # "gzip" or None
    encoding: str | None      # encoding actually used for text formats (e.g. "utf-8", "utf-8-sig", "latin-1")
    rows_read: int            # data records found, including unreadable ones
    rows_unreadable: int
    sha256: str
    bytes: int


@dataclass
class StepFacts:
    name: str
    params: dict[str, Any]    # the step's config, plain JSON
    rows_in: int
    rows_out: int
    set_aside: dict[str, int]  # reason -> rows
    facts: dict[str, Any]     # what the step reported through ctx.report


@dataclass
class SplitFileFacts:
    file: str                 # e.g. "train.parquet"
    rows: int
    sha256: str
    columns: dict[str, str]   # column -> polars dtype name


@dataclass
class RunFacts:
    dataset: str
    description: str | None
    about: dict[str, str | None]   # purpose, intended_use, license, maintainer, contact (None = not provided)
    label: str
    text: list[str]
    split_config: dict[str, Any]   # train, validation, test, seed, stratify, group
    seed: int
    tool_version: str
    pipeline_sha256: str
    sources: list[SourceFacts]
    steps: list[StepFacts]
    splits: dict[str, pl.DataFrame]      # "train"/"validation"/"test" -> final table
    split_files: dict[str, SplitFileFacts]
    split_notes: list[str]                # what the splitter could not honour, in words
    ledger: pl.DataFrame                  # the full set-aside ledger
    rows_read: int
    extra: dict[str, Any] = field(default_factory=dict)
    # Which engine ran the pipeline ("local" or "dask"); the only card field allowed to differ between them.
    engine: str = "local"
