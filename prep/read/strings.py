"""Every value a reader returns is a string (or null). This module turns typed values into strings.

The string forms, one rule per type, the same for Parquet and JSON sources:

=====================  ==========================================================================
type                   string form
=====================  ==========================================================================
string                 unchanged
integer                decimal digits, ``42``, ``-7``
float                  as polars casts a Float64 to String (``0.1``, ``1e+20``)
boolean                ``true`` / ``false`` (the JSON spelling, RFC 8259 section 3)
date                   ISO 8601 calendar date ``2024-01-02``
datetime               ISO 8601 ``2024-01-02T03:04:05.120`` (fraction only if non-zero),
                       with ``+01:00`` style offset when the column has a time zone
time                   ISO 8601 ``03:04:05``
duration               ISO 8601 duration ``PT3.5S``
decimal, categorical   as polars casts them to String
nested (list, object)  compact JSON text: ``{"a":1,"b":[1,2]}``, keys in their original order,
                       non-ASCII characters kept as they are
null                   null
=====================  ==========================================================================

JSON sources never hold NaN or infinity: the JSON reader refuses those tokens (RFC 8259 section 6).
"""

from __future__ import annotations

import datetime as dt
import decimal
import json
from collections.abc import Sequence
from typing import Any

import polars as pl

# ISO 8601 extended format; polars' "%.f" prints the fraction only when it is not zero.
DATETIME_FORMAT = "%Y-%m-%dT%H:%M:%S%.f"
DATETIME_TZ_FORMAT = "%Y-%m-%dT%H:%M:%S%.f%:z"


class NotText(ValueError):
    """A column holds values that have no string form (raw bytes that are not UTF-8, Python objects)."""


def _json_default(value: Any) -> Any:
    if isinstance(value, (dt.datetime, dt.date, dt.time)):
        return value.isoformat()
    if isinstance(value, dt.timedelta):
        return pl.Series([value]).dt.to_string("iso")[0]
    if isinstance(value, decimal.Decimal):
        return str(value)
    if isinstance(value, bytes):
        return value.decode("utf-8")
    raise TypeError(type(value).__name__)


def json_text(value: Any) -> str:
    """Compact JSON text of a nested value, keys in their original order."""
    return json.dumps(value, ensure_ascii=False, separators=(",", ":"), default=_json_default)


def series_to_string(series: pl.Series) -> pl.Series:
    """``series`` as a String series following the table in the module docstring."""
    dtype = series.dtype
    if dtype == pl.String:
        return series
    if dtype == pl.Datetime:
        fmt = DATETIME_TZ_FORMAT if getattr(dtype, "time_zone", None) else DATETIME_FORMAT
        return series.dt.to_string(fmt)
    if dtype == pl.Duration:
        return series.dt.to_string("iso")
    if isinstance(dtype, (pl.List, pl.Array, pl.Struct)):
        try:
            values = [None if v is None else json_text(v) for v in series.to_list()]
        except (TypeError, UnicodeDecodeError, ValueError) as exc:
            raise NotText(f"the nested values of type {dtype} have no JSON form") from exc
        return pl.Series(series.name, values, dtype=pl.String)
    if dtype == pl.Object:
        raise NotText("the column holds Python objects")
    try:
        return series.cast(pl.String, strict=True)
    except (pl.exceptions.PolarsError, TypeError) as exc:
        raise NotText(f"values of type {dtype} cannot be turned into text") from exc


def values_to_string(name: str, values: Sequence[Any]) -> pl.Series:
    """Parsed JSON values (str, int, float, bool, None, dict, list) as a String series named ``name``.

    Fast when every value is already a string or null, which is the common case for ticket exports;
    otherwise each value is converted by the rules above (floats through polars, so that JSON and
    Parquet sources spell the same float the same way).
    """
    try:
        return pl.Series(name, values, dtype=pl.String, strict=True)
    except (TypeError, pl.exceptions.PolarsError):
        pass
    out: list[str | None] = list(values)
    float_at: list[int] = []
    for i, value in enumerate(values):
        kind = type(value)
        if value is None or kind is str:
            continue
        if kind is bool:
            out[i] = "true" if value else "false"
        elif kind is int:
            out[i] = str(value)
        elif kind is float:
            float_at.append(i)
        else:
            out[i] = json_text(value)
    if float_at:
        floats = pl.Series([values[i] for i in float_at], dtype=pl.Float64).cast(pl.String).to_list()
        for i, text in zip(float_at, floats):
            out[i] = text
    return pl.Series(name, out, dtype=pl.String)
