"""Step ``language``: add a ``language`` column (ISO 639-1, ``und`` when it cannot be told).

Options: ``columns`` (default: the pipeline's text columns; their non-null values are joined
with a space, in order, into one text per row), ``backend`` (``cld2``, the default, or
``langdetect``; see :mod:`prep.lang`), ``min_chars`` (default ``MIN_CHARS`` = 20: a text with
fewer letters -- Unicode category L -- gets ``und`` without asking the backend), ``prefix_chars``
(default ``PREFIX_CHARS`` = 200: only the first characters of a text are read), ``keep`` (a list
of codes; rows whose language is not listed are set aside with reason ``language``; list ``und``
to keep texts that could not be told; default: keep everything, only report) and ``workers``
(default: the usable cores).

Each distinct prefix is identified once, in parallel, and the answer depends on the prefix
only, so reruns, worker counts and PYTHONHASHSEED do not change the column. Why CLD2 and 200
characters: ``tests/bench/bench_language.py`` measures speed and agreement with langdetect.

Facts reported: ``column``, ``backend``, ``min_chars``, ``prefix_chars``, ``counts`` ({code:
rows}, ``und`` included), ``too_short`` (rows under ``min_chars``), ``distinct_texts``,
``keep``, ``rows_set_aside``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import polars as pl

from prep.config import ConfigValueError
from prep.errors import DataError
from prep.lang import UNDETERMINED, identify
from prep.ledger import Reason
from prep.steps.base import StepContext

NAME = "language"
COLUMN = "language"
# Below about 20 letters, character n-gram identifiers disagree with each other and with people
# often (common practice, no source); such texts get `und`.
MIN_CHARS = 20
# Measured on the demo (tests/bench/bench_language.py): 200 characters keep agreement with
# untruncated langdetect at the level of the full text, and bound the time a long text costs.
PREFIX_CHARS = 200
# The regex engine refuses very large repetition counts; more letters than this is no longer "short".
MAX_MIN_CHARS = 1000


@dataclass(frozen=True)
class Config:
    """``language`` options. ``columns: null`` means the pipeline's text columns; ``keep: null`` keeps every row."""

    columns: list[str] | None = None
    backend: Literal["cld2", "langdetect"] = "cld2"
    min_chars: int = MIN_CHARS
    prefix_chars: int = PREFIX_CHARS
    keep: list[str] | None = None
    workers: int | None = None

    def check(self) -> None:
        if self.columns is not None and not self.columns:
            raise ConfigValueError("columns", "must name at least one column (or be left out to use the text columns)")
        if not 0 <= self.min_chars <= MAX_MIN_CHARS:
            raise ConfigValueError("min_chars", f"must be between 0 and {MAX_MIN_CHARS}")
        if self.prefix_chars < 1:
            raise ConfigValueError("prefix_chars", "must be 1 or more")
        if self.keep is not None:
            if not self.keep:
                raise ConfigValueError("keep", "must list at least one language code (or be left out to keep every row)")
            bad = [c for c in self.keep if c != c.strip().lower() or not c.isalpha() or not 2 <= len(c) <= 3]
            if bad:
                raise ConfigValueError("keep", f"{bad[0]!r} is not an ISO 639 code in lower case (e.g. en, de, und)")
        if self.workers is not None and self.workers < 1:
            raise ConfigValueError("workers", "must be 1 or more")


def detect_languages(texts: pl.Series, config: Config) -> tuple[pl.Series, int, int]:
    """The language of every text (null counts as ""), rows under ``min_chars``, distinct prefixes identified."""
    texts = texts.fill_null("")
    # "At least N letters" as one regex test: polars' contains runs a DFA, about 50 times faster
    # here than counting the matches of \p{L} (measured on the demo).
    short = ~texts.str.contains(rf"(?:\p{{L}}\P{{L}}*){{{config.min_chars}}}") if config.min_chars else pl.repeat(False, texts.len(), eager=True)
    prefixes = texts.str.slice(0, config.prefix_chars)
    # Distinct prefixes in order of first appearance: deterministic, and the answer for a prefix does
    # not depend on its position. (Sorting them, as before, cost ~1 s per 350k rows and made the
    # lookup below slower; measured on the 1M demo's desk source.)
    distinct = prefixes.filter(~short).unique(maintain_order=True)
    codes = identify(distinct.to_list(), config.backend, config.workers)
    known = prefixes.replace_strict(distinct, pl.Series(codes, dtype=pl.String), default=UNDETERMINED, return_dtype=pl.String)
    language = pl.select(pl.when(short).then(pl.lit(UNDETERMINED)).otherwise(known)).to_series().alias(COLUMN)
    return language, int(short.sum()), distinct.len()


def apply(table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.DataFrame:
    """Add the ``language`` column; with ``keep``, set other languages aside. Row order kept."""
    columns = list(ctx.text) if config.columns is None else list(config.columns)
    missing = [c for c in columns if c not in table.columns]
    if missing:
        names = ", ".join(f"`{c}`" for c in missing)
        raise DataError(f"Step `{NAME}`: column(s) {names} not in the table.", hint="Check `columns` against the canonical columns.")
    if COLUMN in table.columns:
        raise DataError(
            f"Step `{NAME}`: the table already has a column `{COLUMN}`.", hint="Map that source column to another canonical name."
        )
    texts = table.select(pl.concat_str([pl.col(c) for c in columns], separator=" ", ignore_nulls=True)).to_series()
    language, too_short, distinct = detect_languages(texts, config)
    out = table.with_columns(language)

    counts = language.value_counts(name="n").sort(COLUMN)
    set_aside = 0
    if config.keep is not None:
        drop = ~language.is_in(config.keep)
        set_aside = int(drop.sum())
        if set_aside:
            gone = out.filter(drop)
            detail = pl.format("language {} is not in `keep`", gone.get_column(COLUMN))
            ctx.set_aside(gone, Reason.LANGUAGE, detail=gone.select(detail).to_series())
            out = out.filter(~drop)

    ctx.report("column", COLUMN)
    ctx.report("backend", config.backend)
    ctx.report("min_chars", config.min_chars)
    ctx.report("prefix_chars", config.prefix_chars)
    ctx.report("counts", dict(zip(counts[COLUMN].to_list(), counts["n"].to_list())))
    ctx.report("too_short", too_short)
    ctx.report("distinct_texts", distinct)
    ctx.report("keep", None if config.keep is None else list(config.keep))
    ctx.report("rows_set_aside", set_aside)
    return out
