"""What every step gets from the runner, and the contract a step module fulfils.

A step module (``prep/steps/<name>.py``) defines::

    NAME = "<name>"                    # the key used in the pipeline file
    @dataclass(frozen=True)
    class Config: ...                  # typed config, built by prep.config.build
    def apply(table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.DataFrame

``apply`` is pure over the table: it never reads files, never prints, keeps row
order, and never drops a row silently. Each removed row goes to the ledger via
``ctx.set_aside(...)``. Facts for the card (counts, mappings, parameters it
derived) go to ``ctx.report(key, value)``; values must be JSON-safe and must not
contain personal data (counts and class names are fine, texts are not).
Extra output tables (e.g. schema failure cases) go to ``ctx.add_output(name, frame)``.

A step whose decision needs the whole table but only a little of each row (``exact_duplicates``,
``near_duplicates``, ``schema``, ``rare_classes``) may also split ``apply`` in three, so that the
Dask engine can run the row-local parts on the workers and send only the keys to the client::

    KEYED = True
    def keys(part, config, ctx, *, compact: bool) -> pl.DataFrame   # row-local: one row per row,
        # the provenance columns and what the decision needs; ``compact``: texts as digests
        # (prep.text.digest_exprs)
    def decide(keys, config, ctx) -> RowPlan    # the whole table's keys: ledger, facts, outputs
    # apply(table) == RowPlan.carry_out(table) of decide(keys(table, compact=False))
    # (``schema`` keeps its own apply, pandera on the whole table, and is tested equal)

Optional: ``can_key(config, ctx) -> bool`` (False: the engine collects the table instead), and
``FETCHES_TEXTS = True`` with ``decide(..., fetch=None)`` and ``fetch_texts(part, config, ctx,
rows)`` for a decision that needs the texts of a few rows (``near_duplicates``).
"""

from __future__ import annotations

import contextlib
import threading
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import polars as pl

from prep.ledger import Ledger, Reason


@dataclass
class StepContext:
    step: str                       # step name as in the pipeline file
    label: str                      # canonical label column
    text: tuple[str, ...]           # canonical text columns, in reading order
    ledger: Ledger
    split_fractions: dict[str, float]  # {"train": .8, "validation": .1, "test": .1}
    pipeline_dir: Path              # folder of the pipeline file (to resolve paths in configs)
    seed: int = 0
    group: str | None = None        # the split's group column, if any
    facts: dict[str, Any] = field(default_factory=dict)
    outputs: dict[str, pl.DataFrame] = field(default_factory=dict)

    def set_aside(
        self,
        rows: pl.DataFrame,
        reason: Reason | str,
        *,
        detail: str | pl.Series | None = None,
        kept_row_id: str | pl.Series | None = None,
        similarity: float | pl.Series | None = None,
    ) -> None:
        """Record ``rows`` (holding row_id, source, source_row) in the ledger under this step."""
        self.ledger.add(
            rows, step=self.step, reason=reason, detail=detail, kept_row_id=kept_row_id, similarity=similarity
        )

    def report(self, key: str, value: Any) -> None:
        """A JSON-safe fact for the card's section on this step."""
        self.facts[key] = value

    def add_output(self, name: str, frame: pl.DataFrame) -> None:
        """An extra table written next to the outputs as ``<name>.parquet``."""
        self.outputs[name] = frame


@dataclass(frozen=True)
class RowPlan:
    """What a keyed step does to the rows of the table, decided from the keys of all of them:
    ``keep`` (None: every row) and whole new columns (``columns``), one value per row in table
    order. :meth:`part` cuts the plan of one partition; :meth:`carry_out` applies it."""

    keep: pl.Series | None = None
    columns: tuple[pl.Series, ...] = ()

    def part(self, offset: int, length: int) -> RowPlan:
        return RowPlan(
            None if self.keep is None else self.keep.slice(offset, length),
            tuple(c.slice(offset, length) for c in self.columns),
        )

    def rows_out(self, rows_in: int) -> int:
        return rows_in if self.keep is None else int(self.keep.sum())

    def carry_out(self, table: pl.DataFrame) -> pl.DataFrame:
        if self.columns:
            table = table.with_columns(self.columns)
        return table if self.keep is None else table.filter(self.keep)


_WARNINGS_LOCK = threading.Lock()


@contextlib.contextmanager
def ignoring(category: type[Warning]):
    """``warnings.catch_warnings()`` that ignores ``category``, one block at a time in the process:
    ``catch_warnings`` saves and restores the process-wide filter list, so two threads inside it at
    once (after-split steps run side by side) could drop or keep each other's filters. Keep the
    block short: other threads' blocks wait for it."""
    with _WARNINGS_LOCK, warnings.catch_warnings():
        warnings.simplefilter("ignore", category)
        yield
