"""Shared fixtures for step tests: a canonical table and a StepContext.

Fixtures (both are factories, so a test can build several tables/contexts)::

    make_table(rows, *, columns=None, source="t") -> pl.DataFrame
        Adds ``row_id`` "t:i", ``source`` "t", ``source_row`` i (Int64, 0-based) in front
        of the given columns, as the reader does. Every other column is String
        (nullable); a key missing from a row is null. ``columns`` fixes the column
        order (and allows an empty table); by default it is the keys in first-seen order.

    make_ctx(step_name, **overrides) -> StepContext
        Ledger(), label="label", text=("title", "body"),
        split_fractions {"train": .8, "validation": .1, "test": .1},
        pipeline_dir=tmp_path, seed=0. Any StepContext field can be overridden.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import polars as pl
import pytest

from prep.ledger import Ledger
from prep.steps.base import StepContext

PROVENANCE_SCHEMA = {"row_id": pl.String(), "source": pl.String(), "source_row": pl.Int64()}


def build_table(
    rows: Sequence[dict[str, str | None]],
    *,
    columns: Sequence[str] | None = None,
    source: str = "t",
) -> pl.DataFrame:
    """A canonical table from plain dicts (values must be str or None)."""
    if columns is None:
        seen: dict[str, None] = {}
        for row in rows:
            for key in row:
                seen.setdefault(key, None)
        columns = list(seen)
    for i, row in enumerate(rows):
        for key, value in row.items():
            if value is not None and not isinstance(value, str):
                raise TypeError(f"make_table: row {i}, column {key!r} must be str or None, got {type(value).__name__}")
            if key not in columns:
                raise KeyError(f"make_table: row {i} has column {key!r} not in columns={list(columns)}")
    n = len(rows)
    data: dict[str, list[Any]] = {
        "row_id": [f"{source}:{i}" for i in range(n)],
        "source": [source] * n,
        "source_row": list(range(n)),
    }
    schema: dict[str, pl.DataType] = dict(PROVENANCE_SCHEMA)
    for col in columns:
        data[col] = [row.get(col) for row in rows]
        schema[col] = pl.String()
    return pl.DataFrame(data, schema=schema)


def build_ctx(step_name: str, pipeline_dir: Path, **overrides: Any) -> StepContext:
    """A StepContext with the project's usual test defaults; keyword overrides win."""
    kwargs: dict[str, Any] = {
        "step": step_name,
        "label": "label",
        "text": ("title", "body"),
        "ledger": Ledger(),
        "split_fractions": {"train": 0.8, "validation": 0.1, "test": 0.1},
        "pipeline_dir": pipeline_dir,
        "seed": 0,
    }
    kwargs.update(overrides)
    return StepContext(**kwargs)


@pytest.fixture
def make_table() -> Callable[..., pl.DataFrame]:
    return build_table


@pytest.fixture
def make_ctx(tmp_path: Path) -> Callable[..., StepContext]:
    def _make_ctx(step_name: str, **overrides: Any) -> StepContext:
        pipeline_dir = overrides.pop("pipeline_dir", tmp_path)
        return build_ctx(step_name, pipeline_dir, **overrides)

    return _make_ctx
