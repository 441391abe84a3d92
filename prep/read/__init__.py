"""Input readers: one source file in, its records as a table of strings out.

Public API::

    read_source(source, *, on_unreadable="set_aside") -> ReadResult
    read_columns(source) -> list[str]
    ReadResult(table, unreadable, rows_read, encoding)

``source`` is any object with the attributes of the pipeline's source model: ``name``, ``path``
(resolved; or an fsspec URL as a string, opened through :mod:`prep.read.urls`), ``path_text`` (as written; the only path that messages show), ``format`` (csv, tsv, jsonl,
json, parquet), ``compression`` (gzip or None), ``encoding`` (``auto`` or a codec name),
``encoding_fallback``, ``delimiter`` and ``columns`` (canonical name -> column in the file).

Invariants (each has a test):

* ``table`` holds the readable records in file order: ``source_row`` (Int64, the 0-based index of the
  data record in the file, header excluded) first, then the mapped file columns in mapping order (all
  columns in file order when there is no mapping, or when a mapped column is missing, so that the caller
  can name what the file has), every one of them String;
* ``unreadable`` has one row per record a reader could not parse: ``source_row``, ``line`` (1-based
  physical line where the record starts; null for Parquet and JSON arrays) and ``detail`` (fixed wording
  and counts, never a value from the data); unreadable records consume a ``source_row`` index too;
* ``rows_read == table.height + unreadable.height``;
* with ``on_unreadable="stop"`` the first unreadable record raises :class:`~prep.errors.InputError`
  naming the file and line instead;
* every failure of the OS, gzip, a codec, polars, pyarrow or JSON leaves as an ``InputError`` naming
  ``path_text`` (and the line where known), with the original exception as ``__cause__``;
* the same bytes give the same table.

The format rules are documented where they are implemented: :mod:`prep.read.dialect` (CSV, TSV),
:mod:`prep.read.jsonfile` (JSON Lines, JSON), :mod:`prep.read.parquet`, :mod:`prep.read.encoding`,
:mod:`prep.read.strings` (how typed values become strings).
"""

from __future__ import annotations

from typing import Any

from prep.errors import InputError
from prep.read import delimited, jsonfile, parquet
from prep.read.result import UNREADABLE_SCHEMA, ReadResult, check_on_unreadable

__all__ = ["FORMATS", "UNREADABLE_SCHEMA", "ReadResult", "read_columns", "read_source"]

FORMATS = ("csv", "tsv", "jsonl", "json", "parquet")


def _unknown_format(source: Any) -> InputError:
    return InputError(
        f"the format `{source.format}` is not one prep reads.",
        file=source.path_text,
        hint=f"Use one of: {', '.join(FORMATS)}.",
    )


def read_source(source: Any, *, on_unreadable: str = "set_aside") -> ReadResult:
    """Read every record of ``source``; see the module docstring for what comes back."""
    check_on_unreadable(on_unreadable)
    fmt = source.format
    if fmt in ("csv", "tsv"):
        return delimited.read_delimited(source, on_unreadable=on_unreadable)
    if fmt == "jsonl":
        return jsonfile.read_jsonl(source, on_unreadable=on_unreadable)
    if fmt == "json":
        return jsonfile.read_json(source, on_unreadable=on_unreadable)
    if fmt == "parquet":
        return parquet.read_parquet(source, on_unreadable=on_unreadable)
    raise _unknown_format(source)


def read_columns(source: Any) -> list[str]:
    """The column names of ``source`` in file order, as cheaply as the format allows.

    CSV/TSV read the header only, Parquet its footer. JSON has no header: every object is parsed and
    the keys are listed in order of first appearance.
    """
    fmt = source.format
    if fmt in ("csv", "tsv"):
        return delimited.read_columns(source)
    if fmt in ("jsonl", "json"):
        return jsonfile.read_keys(source)
    if fmt == "parquet":
        return parquet.read_columns(source)
    raise _unknown_format(source)
