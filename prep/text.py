"""Small text helpers shared by the steps and the card (polars series in, series out).

Polars' regex ``replace_all`` rebuilds every string it is given, even where nothing matches
(measured here: about 2.5 s for 150k ticket texts of ~300 characters, while a ``contains`` test on
the same texts takes about 0.2 s). The helpers below therefore test first and rewrite only the
rows that need it; their results equal the plain expressions (tests/test_text.py).
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import TypeVar

import polars as pl

# Below this many rows a series is processed in one piece (threads would cost more than they save).
PARALLEL_FROM_ROWS = 50_000
SeriesOrFrame = TypeVar("SeriesOrFrame", pl.Series, pl.DataFrame)

# Seeds of the two 64-bit hashes in :func:`digest_exprs`.
DIGEST_SEEDS = (0x5A17_E0D1, 0x0DD5_EED5)


def digest_exprs(columns: list[str], name: str) -> list[pl.Expr]:
    """Two seeded 64-bit polars hashes of the values of ``columns`` taken together (one struct per
    row), named ``{name}0`` and ``{name}1``: 128 bits that stand for the values in a keyed step's
    keys (exact duplicates, near-duplicate texts, schema uniqueness). Two different values share
    both with probability about 2^-128, n^2 / 2^129 for n rows (1.5e-27 for a million); equal
    values, nulls included, always share them. Polars' seeded hash is the same in every process of
    one polars version: the Dask engine refuses workers that run another (dask_engine._check_versions)."""
    value = pl.struct(columns)
    return [value.hash(seed).alias(f"{name}{j}") for j, seed in enumerate(DIGEST_SEEDS)]


#: The characters with the Unicode property White_Space (PropList.txt; the same set as the regex
#: class ``\s`` of polars' regex engine, which tests/test_text.py checks over every code point),
#: the space itself left out.
OTHER_WHITE_SPACE = "[\t\n\x0b\x0c\r\x85\xa0\u1680\u2000-\u200a\u2028\u2029\u202f\u205f\u3000]"

# A row needs collapsing when it holds white space other than U+0020, or two spaces in a row.
_NEEDS_COLLAPSE = OTHER_WHITE_SPACE + "|  "
# One white-space character, as ``\s``, spelled out: measured about 25% faster than the Unicode class.
_WHITE = "(?:" + OTHER_WHITE_SPACE + "| )"
# The maximal runs of white space that are not a single U+0020: a run that starts with other white
# space, or a space followed by more. (A match starts at the first character of such a run, and
# the greedy tail takes the rest of it; a single space never matches.) Replacing these by one space
# equals replacing every ``\s+`` run, without rewriting each single space by itself, which cost most
# of the time (measured: 2.5-2.9 s -> 0.45 s on 329k raw ticket bodies of the 1M demo).
_RUN = OTHER_WHITE_SPACE + _WHITE + "*| " + _WHITE + "+"


def collapse_whitespace(series: pl.Series) -> pl.Series:
    """Runs of white space (``\\s+``) as one space, ends trimmed of spaces; null stays null.

    Equal to ``series.str.replace_all(r"\\s+", " ").str.strip_chars(" ")``.
    """
    rows = series.str.contains(_NEEDS_COLLAPSE).arg_true()
    if rows.len():
        series = series.scatter(rows, series.gather(rows).str.replace_all(_RUN, " "))
    return series.str.strip_chars(" ")


def normalize_unicode(series: pl.Series, form: str) -> pl.Series:
    """Unicode normalisation (UAX #15) of the rows holding a non-ASCII character (ASCII text is in
    every form already); null stays null. Python's ``unicodedata`` does the work: measured 2.5
    times faster than polars' ``str.normalize`` on 130k ticket texts, and the same result."""
    import unicodedata

    def _normalise(rows: pl.Series) -> pl.Series:
        return pl.Series(rows.name, [unicodedata.normalize(form, s) for s in rows.to_list()], dtype=pl.String)

    return rewrite_where(series, r"[^\x00-\x7F]", _normalise)


def rewrite_where(series: pl.Series, pattern: str, rewrite) -> pl.Series:
    """``rewrite(rows)`` applied only to the rows that contain ``pattern`` (a regex); others kept."""
    rows = series.str.contains(pattern).arg_true()
    if rows.len():
        series = series.scatter(rows, rewrite(series.gather(rows)))
    return series


def usable_cores() -> int:
    """The cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def by_slices(data: SeriesOrFrame, function: Callable[[SeriesOrFrame], SeriesOrFrame]) -> SeriesOrFrame:
    """``function`` (row by row in effect: each output row depends on its input row only; it may
    drop rows, never reorder them) applied to consecutive row slices of ``data`` (a Series or a
    DataFrame) on one thread per usable core, the slices' results put back in order.

    Polars releases the GIL while it works, so this uses both cores for a chain of string
    operations that polars runs on one (measured: normalising 1M ticket bodies took 18.9 s in one
    piece and 8.7 s in two slices on two threads, the same result).
    """
    parts = usable_cores()
    if parts == 1 or len(data) < PARALLEL_FROM_ROWS:
        return function(data)
    step = -(-len(data) // parts)
    with ThreadPoolExecutor(max_workers=parts) as pool:
        pieces = list(pool.map(function, [data.slice(i, step) for i in range(0, len(data), step)]))
    joined = pl.concat(pieces)
    return joined.alias(data.name) if isinstance(data, pl.Series) else joined
