"""The set-aside ledger: one row for every input row that does not reach a split, and why.

Columns (in this order, these types)::

    row_id       str      provenance of the set-aside row
    source       str
    source_row   int64    0-based data record index in its source file
    step         str      the step that set it aside (``read`` for unreadable records)
    reason       str      a stable reason code, see :class:`Reason`
    detail       str|null human-readable detail; never contains values from the data
    kept_row_id  str|null for duplicates: the row that was kept in its place
    similarity   f64|null for duplicates: similarity to the kept row (1.0 for exact)

Invariant (checked by :func:`check_accounting` at the end of every run):
rows read = rows in the splits + rows in the ledger, and no row_id appears twice.
"""

from __future__ import annotations

import enum
from collections.abc import Iterable

import polars as pl

from prep.errors import PrepError

LEDGER_SCHEMA: dict[str, pl.DataType] = {
    "row_id": pl.String(),
    "source": pl.String(),
    "source_row": pl.Int64(),
    "step": pl.String(),
    "reason": pl.String(),
    "detail": pl.String(),
    "kept_row_id": pl.String(),
    "similarity": pl.Float64(),
}

PROVENANCE = ("row_id", "source", "source_row")


class Reason(str, enum.Enum):
    """Stable reason codes. Their string values appear in the ledger and the card; never rename one."""

    UNREADABLE = "unreadable"
    EMPTY_TEXT = "empty_text"
    MISSING_LABEL = "missing_label"
    MISSING_VALUE = "missing_value"
    EXACT_DUPLICATE = "exact_duplicate"
    LABEL_CONFLICT = "label_conflict"
    NEAR_DUPLICATE = "near_duplicate"
    SCHEMA = "schema"
    RARE_CLASS = "rare_class"
    LANGUAGE = "language"
    UNSPLITTABLE = "unsplittable"
    SUSPECT_LABEL = "suspect_label"

    def __str__(self) -> str:
        return self.value


def empty_ledger() -> pl.DataFrame:
    return pl.DataFrame(schema=LEDGER_SCHEMA)


def _as_column(value, name: str, height: int, dtype: pl.DataType) -> pl.Series:
    if isinstance(value, pl.Series):
        if value.len() != height:
            raise ValueError(f"ledger column {name} has {value.len()} values for {height} rows")
        return value.cast(dtype).alias(name)
    return pl.Series(name, [value] * height, dtype=dtype)


class Ledger:
    """Accumulates set-aside rows. Append-only; :meth:`frame` returns them in insertion order."""

    def __init__(self) -> None:
        self._parts: list[pl.DataFrame] = []

    def add(
        self,
        rows: pl.DataFrame,
        *,
        step: str,
        reason: Reason | str,
        detail: str | pl.Series | None = None,
        kept_row_id: str | pl.Series | None = None,
        similarity: float | pl.Series | None = None,
    ) -> None:
        """Record ``rows`` (which must hold the provenance columns) as set aside.

        ``detail``, ``kept_row_id`` and ``similarity`` are either one value for all rows
        or a Series aligned with ``rows``.
        """
        if rows.height == 0:
            return
        n = rows.height
        part = pl.DataFrame(
            [
                rows.get_column("row_id").cast(pl.String),
                rows.get_column("source").cast(pl.String),
                rows.get_column("source_row").cast(pl.Int64),
                _as_column(step, "step", n, pl.String()),
                _as_column(str(reason), "reason", n, pl.String()),
                _as_column(detail, "detail", n, pl.String()),
                _as_column(kept_row_id, "kept_row_id", n, pl.String()),
                _as_column(similarity, "similarity", n, pl.Float64()),
            ]
        )
        self._parts.append(part)

    def extend(self, frame: pl.DataFrame) -> None:
        """Append rows already in ledger shape."""
        if frame.height:
            self._parts.append(frame.select(list(LEDGER_SCHEMA)).cast(LEDGER_SCHEMA))

    def frame(self) -> pl.DataFrame:
        if not self._parts:
            return empty_ledger()
        return pl.concat(self._parts, how="vertical")

    def __len__(self) -> int:
        return sum(p.height for p in self._parts)

    def counts(self, step: str | None = None) -> dict[str, int]:
        """Rows set aside per reason (optionally for one step), reasons sorted by name."""
        out: dict[str, int] = {}
        for part in self._parts:
            if step is not None:
                part = part.filter(pl.col("step") == step)
            for reason, n in part.group_by("reason").len().iter_rows():
                out[reason] = out.get(reason, 0) + n
        return dict(sorted(out.items()))


class AccountingError(PrepError):
    """Rows were lost or counted twice: a bug in prep, never the user's fault."""


def check_accounting(rows_read: int, splits: Iterable[pl.DataFrame], ledger: pl.DataFrame) -> None:
    """Assert rows read = rows in splits + rows in the ledger, with every row_id exactly once."""
    ids = [s.get_column("row_id") for s in splits] + [ledger.get_column("row_id")]
    all_ids = pl.concat(ids) if ids else pl.Series("row_id", [], dtype=pl.String)
    if all_ids.len() != rows_read:
        raise AccountingError(
            f"Accounting failed: {rows_read} rows read but {all_ids.len()} rows in the splits and the ledger. "
            "This is a bug in prep; please report it with the pipeline file."
        )
    dup = all_ids.len() - all_ids.n_unique()
    if dup:
        raise AccountingError(
            f"Accounting failed: {dup} rows appear twice across the splits and the ledger. "
            "This is a bug in prep; please report it with the pipeline file."
        )
