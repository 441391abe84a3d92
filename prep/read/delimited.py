"""Reading CSV and TSV sources: the header, the records, and which path parses them.

The rules are in :mod:`prep.read.dialect`. Two paths implement them and give identical results
(tested on hand-written and on generated files):

* fast: :mod:`prep.read.delimited_fast`, numpy finds the records, polars parses the good ones;
* careful: :mod:`prep.read.delimited_slow`, a record-by-record parser in Python.

``engine="auto"`` takes the fast path and falls back to the careful one only when the file's quoting
is malformed somewhere or polars disagrees with the scan; ``"fast"`` and ``"slow"`` force one path
(for tests and benchmarks; ``"fast"`` raises :class:`FastPathUnavailable` where it cannot decide).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import polars as pl

from prep.errors import InputError
from prep.read.delimited_fast import join_records, parse, scan
from prep.read.delimited_slow import Record, iter_records, iter_spans
from prep.read.dialect import Dialect, dialect_for, field_count
from prep.read.encoding import decode
from prep.read.rawbytes import PREFIX_BYTES, Prefix, load_bytes
from prep.read.result import ReadResult, Unreadable, string_frame, wanted_columns, with_source_row

ENGINES = ("auto", "fast", "slow")


class FastPathUnavailable(Exception):
    """``engine="fast"`` was forced on a file that only the careful path can read."""


def _empty(source: Any) -> InputError:
    return InputError("the file is empty: it has no header line.", file=source.path_text)


def _header(source: Any, record: Record) -> list[str]:
    """Column names from the header record; refuses malformed or duplicated names."""
    if record.problem:
        raise InputError(f"the header cannot be read: {record.problem}.", file=source.path_text, line=record.line)
    names = ["" if name is None else name for name in record.fields]
    seen: set[str] = set()
    for name in names:
        if name in seen:
            raise InputError(
                "the header has this column name twice.",
                file=source.path_text,
                line=record.line,
                column=name,
                hint="Rename one of them in the export; prep needs unique column names.",
            )
        seen.add(name)
    return names


def read_columns(source: Any) -> list[str]:
    """The header of a CSV/TSV source, reading only as much of the file as the header needs."""
    dialect = dialect_for(source)
    size = PREFIX_BYTES
    with Prefix(source) as prefix:
        while True:
            raw = prefix.take(size)
            text = decode(source, raw, final=prefix.complete).text
            first = next(iter_spans(text, dialect), None)
            if first is None and prefix.complete:
                raise _empty(source)
            # The header is whole once its closing LF is in the prefix, or once the prefix is the file.
            if first is not None and (first[1] < len(text) or prefix.complete):
                return _header(source, first[0])
            size *= 4


def read_delimited(source: Any, *, on_unreadable: str, engine: str = "auto") -> ReadResult:
    """Read a CSV or TSV source (see the module docstring for ``engine``)."""
    if engine not in ENGINES:
        raise ValueError(f"engine must be one of {ENGINES}, got {engine!r}.")
    dialect = dialect_for(source)
    decoded = decode(source, load_bytes(source))
    if engine != "slow":
        layout = scan(decoded.data, dialect)
        if layout is not None:
            result = _fast(source, decoded.data, layout, dialect, on_unreadable)
            if result is not None:
                return ReadResult(result[0], result[1], result[2], decoded.encoding)
        if engine == "fast":
            raise FastPathUnavailable(source.path_text)
    table, unreadable, rows_read = _slow(source, decoded.text, dialect, on_unreadable)
    return ReadResult(table, unreadable, rows_read, decoded.encoding)


def _fast(source: Any, data: bytes, layout: Any, dialect: Dialect, on_unreadable: str):
    if layout.starts.size == 0:
        raise _empty(source)
    header_text = data[layout.starts[0] : layout.ends[0]].decode("utf-8")
    header_record = next(iter_records(header_text, dialect))
    header = _header(source, Record(int(layout.lines[0]), header_record.fields, header_record.problem))
    width = len(header)
    fields = layout.fields[1:]
    good = fields == width
    unreadable = Unreadable(source, on_unreadable)
    for i in np.flatnonzero(~good).tolist():
        unreadable.add(i, int(layout.lines[i + 1]), field_count(int(fields[i]), width))
    chosen = np.flatnonzero(good) + 1
    wanted = wanted_columns(source, header)
    positions = sorted(header.index(name) for name in wanted)
    body = join_records(data, layout, chosen)
    try:
        parsed = parse(body, dialect, width=width, columns=positions)
    except pl.exceptions.PolarsError:
        return None  # polars disagrees with the scan: the careful path decides
    if parsed.height != chosen.size or parsed.width != len(positions):
        return None
    parsed = parsed.rename({f"column_{i}": header[i] for i in positions}).select(wanted)
    table = with_source_row(parsed, chosen - 1)
    return table, unreadable.frame(), int(fields.size)


def _slow(source: Any, text: str, dialect: Dialect, on_unreadable: str):
    records = iter_records(text, dialect)
    first = next(records, None)
    if first is None:
        raise _empty(source)
    header = _header(source, first)
    width = len(header)
    wanted = wanted_columns(source, header)
    positions = [header.index(name) for name in wanted]
    columns: list[list[str | None]] = [[] for _ in positions]
    rows: list[int] = []
    unreadable = Unreadable(source, on_unreadable)
    index = -1
    for index, record in enumerate(records):
        if record.problem:
            unreadable.add(index, record.line, record.problem)
        elif len(record.fields) != width:
            unreadable.add(index, record.line, field_count(len(record.fields), width))
        else:
            rows.append(index)
            for values, position in zip(columns, positions):
                values.append(record.fields[position])
    table = string_frame([pl.Series(values, dtype=pl.String) for values in columns], wanted)
    return with_source_row(table, rows), unreadable.frame(), index + 1
