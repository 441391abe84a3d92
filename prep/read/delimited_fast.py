"""The fast path for delimited files: find the records with numpy, parse the good ones with polars.

1. :func:`scan` finds the structure of the file with whole-array operations on its UTF-8 bytes: where
   each record starts and ends, its first line number, and how many fields it has. With quoting, a
   delimiter or line break is structural when an even number of double quotes precedes it (a doubled
   quote adds two, so it never changes that parity).
2. That parity rule agrees with the record-by-record parser of :mod:`prep.read.delimited_slow` exactly
   when the quoting is well formed: every opening quote starts a field (or directly follows a closing
   quote, making a doubled quote) and every closing quote is followed by a delimiter, a line break, the
   end of the file or another quote. :func:`scan` checks that for every quote and returns ``None`` when
   any quote breaks it, or when a quote is never closed; the caller then takes the careful path.
3. Records whose field count differs from the header's are left out of the bytes handed to polars, so
   polars only ever sees well-formed records (polars pads short rows with nulls silently, which is
   why the count is checked here and not left to it).

Only ASCII bytes are compared, and in UTF-8 no byte of a multi-byte character is ASCII, so the scan is
exact on any UTF-8 text.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl

from prep.read.dialect import Dialect

LF, CR, QUOTE = 0x0A, 0x0D, 0x22


@dataclass(frozen=True)
class Layout:
    """Non-blank records of a file, in order: byte span [start, end), first line (1-based), field count."""

    starts: np.ndarray
    ends: np.ndarray
    lines: np.ndarray
    fields: np.ndarray


def _quotes_well_formed(a: np.ndarray, quotes: np.ndarray, sep: int) -> bool:
    n = a.size
    if quotes.size % 2:
        return False  # a quote is never closed
    if not quotes.size:
        return True
    openers, closers = quotes[0::2], quotes[1::2]
    # Opening quote: at the start of the file, or after a delimiter, a LF, or a closing quote ("").
    before = a[np.maximum(openers - 1, 0)]
    ok_open = (openers == 0) | (before == sep) | (before == LF) | (before == QUOTE)
    # Closing quote: at the end, or before a delimiter, a LF, another quote, or a CR that ends the line.
    after = a[np.minimum(closers + 1, n - 1)]
    after2 = a[np.minimum(closers + 2, n - 1)]
    ok_close = (
        (closers == n - 1)
        | (after == sep)
        | (after == LF)
        | (after == QUOTE)
        | ((after == CR) & ((closers + 2 >= n) | (after2 == LF)))
    )
    return bool(ok_open.all() and ok_close.all())


def scan(data: bytes, dialect: Dialect) -> Layout | None:
    """The record layout of ``data``, or ``None`` when its quoting needs the careful parser."""
    a = np.frombuffer(data, dtype=np.uint8)
    n = a.size
    sep = ord(dialect.separator)
    all_lf = np.flatnonzero(a == LF)
    lf = all_lf
    seps = np.flatnonzero(a == sep)
    if dialect.quoting:
        quotes = np.flatnonzero(a == QUOTE)
        if not _quotes_well_formed(a, quotes, sep):
            return None
        if quotes.size:
            lf = lf[(np.searchsorted(quotes, lf) & 1) == 0]
            seps = seps[(np.searchsorted(quotes, seps) & 1) == 0]
    # polars drops a CR that ends an unquoted field before a delimiter; by the rules that CR is text.
    if seps.size and np.any(a[np.maximum(seps - 1, 0)][seps > 0] == CR):
        return None
    ends = lf if (lf.size and lf[-1] == n - 1) or n == 0 else np.append(lf, n)
    starts = np.concatenate(([0], lf + 1))[: ends.size]
    length = ends - starts
    first = a[np.minimum(starts, max(n - 1, 0))] if n else np.zeros(0, dtype=np.uint8)
    blank = (length == 0) | ((length == 1) & (first == CR))
    keep = ~blank
    starts, ends = starts[keep], ends[keep]
    fields = np.searchsorted(seps, ends) - np.searchsorted(seps, starts) + 1
    lines = np.searchsorted(all_lf, starts) + 1
    return Layout(starts.astype(np.int64), ends.astype(np.int64), lines.astype(np.int64), fields.astype(np.int64))


def join_records(data: bytes, layout: Layout, chosen: np.ndarray) -> bytes:
    """The bytes of the chosen records (indices into ``layout``), each ending with a LF.

    Records that follow each other directly in the file are copied as one slice, so a file with no
    bad or blank records costs a single copy.
    """
    if chosen.size == 0:
        return b""
    starts, ends = layout.starts[chosen], layout.ends[chosen]
    joined = starts[1:] == ends[:-1] + 1
    breaks = np.flatnonzero(~joined)
    run_first = np.concatenate(([0], breaks + 1))
    run_last = np.concatenate((breaks, [chosen.size - 1]))
    view = memoryview(data)
    parts = [view[s:e] for s, e in zip(starts[run_first].tolist(), ends[run_last].tolist())]
    parts.append(b"")  # so that the join ends with a LF without copying the result again
    return b"\n".join(parts)


def parse(body: bytes, dialect: Dialect, *, width: int, columns: list[int]) -> pl.DataFrame:
    """Parse well-formed records with polars; all values String; ``columns`` are 0-based positions.

    Raises polars' own errors; the caller treats any of them as "take the careful path".
    """
    if not body:
        return pl.DataFrame(schema={f"column_{i}": pl.String for i in columns})
    frame = pl.read_csv(
        body,
        has_header=False,
        separator=dialect.separator,
        quote_char='"' if dialect.quoting else None,
        comment_prefix=None,
        infer_schema=False,
        columns=columns if len(columns) < width else None,
        empty_string_is_null=True,
        raise_if_empty=False,
        truncate_ragged_lines=False,
        eol_char="\n",
    )
    return frame
