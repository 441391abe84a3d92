"""What every reader returns, and the shared bookkeeping of unreadable records.

Invariants of a :class:`ReadResult`:

* ``rows_read == table.height + unreadable.height``;
* the ``source_row`` values of ``table`` and ``unreadable`` together are exactly ``0 .. rows_read - 1``,
  each once, and each frame is in ascending ``source_row`` order (file order);
* every column of ``table`` except ``source_row`` (Int64) is String;
* ``unreadable.detail`` never contains a value from the data: only counts, positions and fixed wording.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import polars as pl

from prep.errors import InputError

SOURCE_ROW = "source_row"
SET_ASIDE = "set_aside"
STOP = "stop"
ON_UNREADABLE = (SET_ASIDE, STOP)

UNREADABLE_SCHEMA: dict[str, pl.DataType] = {
    SOURCE_ROW: pl.Int64(),
    "line": pl.Int64(),
    "detail": pl.String(),
}


@dataclass
class ReadResult:
    """The records of one source file: readable ones as a table, unreadable ones as a list of where and why."""

    table: pl.DataFrame
    unreadable: pl.DataFrame
    rows_read: int
    encoding: str | None


def check_on_unreadable(on_unreadable: str) -> None:
    if on_unreadable not in ON_UNREADABLE:
        raise ValueError(f"on_unreadable must be one of {ON_UNREADABLE}, got {on_unreadable!r}.")


class Unreadable:
    """Collects unreadable records; in ``stop`` mode the first one raises instead.

    Readers call :meth:`add` in file order.
    """

    def __init__(self, source: Any, on_unreadable: str) -> None:
        check_on_unreadable(on_unreadable)
        self._source = source
        self._stop = on_unreadable == STOP
        self.rows: list[int] = []
        self.lines: list[int | None] = []
        self.details: list[str] = []

    def add(self, source_row: int, line: int | None, detail: str) -> None:
        if self._stop:
            raise InputError(
                f"record {source_row} (0-based) cannot be read: {detail}",
                file=self._source.path_text,
                line=line,
                hint="Fix the file, or let the pipeline set unreadable records aside.",
            )
        self.rows.append(source_row)
        self.lines.append(line)
        self.details.append(detail)

    def __len__(self) -> int:
        return len(self.rows)

    def frame(self) -> pl.DataFrame:
        return frame_of(self.rows, self.lines, self.details)


def frame_of(rows: Sequence[int], lines: Sequence[int | None], details: Sequence[str]) -> pl.DataFrame:
    return pl.DataFrame(
        {SOURCE_ROW: list(rows), "line": list(lines), "detail": list(details)}, schema=UNREADABLE_SCHEMA
    )


def string_frame(columns: Sequence[pl.Series], names: Sequence[str]) -> pl.DataFrame:
    """A frame of String columns named exactly ``names``.

    Built positionally because polars renames a series with an empty name to ``column_0``, and an
    empty header name is a name as written like any other.
    """
    frame = pl.DataFrame([c.cast(pl.String) for c in columns]) if columns else pl.DataFrame()
    if columns:
        frame.columns = list(names)
    return frame


def with_source_row(table: pl.DataFrame, source_rows: pl.Series | Sequence[int]) -> pl.DataFrame:
    """``table`` with ``source_row`` (Int64) as its first column."""
    if SOURCE_ROW in table.columns:
        # The caller made sure a file column of that name is not used (see check_no_clash).
        table = table.drop(SOURCE_ROW)
    rows = pl.Series(SOURCE_ROW, source_rows, dtype=pl.Int64)
    return table.insert_column(0, rows)


def check_no_clash(source: Any, columns: Sequence[str]) -> None:
    """A file column named ``source_row`` would be shadowed by the provenance column: refuse it."""
    if SOURCE_ROW in columns:
        raise InputError(
            f"the file has a column named `{SOURCE_ROW}`, which prep uses for the record index.",
            file=source.path_text,
            column=SOURCE_ROW,
            hint="Rename that column in the export, or leave it unmapped.",
        )


def wanted_columns(source: Any, available: Sequence[str]) -> list[str]:
    """The file columns to return: the mapped ones (mapping order) if all exist, else all of them.

    With no mapping at all, every column is returned.

    Returning every column when a mapped one is missing lets the caller name the columns the file does
    have in its error message; the caller (not the reader) decides that a missing column is an error.
    """
    mapped = list(dict.fromkeys((source.columns or {}).values()))
    present = set(available)
    if mapped and all(c in present for c in mapped):
        check_no_clash(source, mapped)
        return mapped
    if not mapped:
        check_no_clash(source, available)
        return list(available)
    # A mapped column is missing and the caller will say so; list the others, minus a clashing name.
    return [c for c in available if c != SOURCE_ROW]
