"""Reading Parquet sources with polars.

A Parquet file is read whole or not at all: a damaged file is an :class:`InputError`, never a partial
table, so there are no unreadable records (``unreadable`` is always empty). Typed columns become
strings by the rules of :mod:`prep.read.strings`; the encoding reported is ``None`` (Parquet stores
strings as UTF-8 by its specification).

A source given as an fsspec URL is read through fsspec: its footer alone for the column names
(pyarrow reads it from the seekable file object), the whole file into memory for the data.
"""

from __future__ import annotations

import io
from typing import Any

import polars as pl
import pyarrow

from prep.errors import InputError
from prep.read import urls
from prep.read.rawbytes import check_compression, load_bytes, open_binary
from prep.read.result import ReadResult, frame_of, string_frame, wanted_columns, with_source_row
from prep.read.strings import NotText, series_to_string

# What polars and pyarrow raise for a file that is not (or no longer) valid Parquet.
_PARQUET_ERRORS = (pl.exceptions.PolarsError, pyarrow.ArrowException, OSError, ValueError)


def _broken(source: Any, exc: BaseException) -> InputError:
    if isinstance(exc, FileNotFoundError):
        return InputError("the file does not exist.", file=source.path_text)
    return InputError(
        "the file cannot be read as Parquet (damaged, truncated, or not Parquet).",
        file=source.path_text,
        hint="Export the file again, or check its `format` in the pipeline file.",
    )


def read_columns(source: Any) -> list[str]:
    """Column names from the Parquet footer, without reading any data."""
    check_compression(source)
    if urls.is_url(source.path):
        return _url_columns(source)
    try:
        return list(pl.read_parquet_schema(source.path).keys())
    except _PARQUET_ERRORS as exc:
        raise _broken(source, exc) from exc


def _url_columns(source: Any) -> list[str]:
    import pyarrow.parquet as pq

    with open_binary(source) as handle:
        try:
            return list(pq.ParquetFile(handle).schema_arrow.names)
        except _PARQUET_ERRORS as exc:
            raise _broken(source, exc) from exc


def read_parquet(source: Any, *, on_unreadable: str) -> ReadResult:
    names = read_columns(source)
    wanted = wanted_columns(source, names)
    where = io.BytesIO(load_bytes(source)) if urls.is_url(source.path) else source.path
    try:
        frame = pl.read_parquet(where, columns=wanted, use_pyarrow=False)
    except _PARQUET_ERRORS as exc:
        raise _broken(source, exc) from exc
    columns = []
    for name in wanted:
        try:
            columns.append(series_to_string(frame.get_column(name)))
        except NotText as exc:
            raise InputError(f"{exc}.", file=source.path_text, column=name) from exc
    table = with_source_row(string_frame(columns, wanted), range(frame.height))
    return ReadResult(table, frame_of([], [], []), frame.height, None)
