"""Step ``missing``: find missing values, fill them where asked, set aside rows that cannot be used.

Which cells are missing. In the text columns, the label column and every column named in
``columns``, a cell is missing when it is null, empty, only white space (Unicode White_Space
and the zero-width characters U+200B..U+200D, U+2060, U+FEFF), or equal to one of ``tokens``
after trimming, compared case-insensitively (polars ``str.to_lowercase`` on both sides).
Those cells become null; every other cell keeps its value byte for byte.

What happens then, in this order (each row is set aside at most once, under the first reason
that applies):

1. Fills. ``{fill: VALUE}`` puts VALUE into the missing cells of that column;
   ``{fill_from: OTHER}`` puts OTHER's value there where OTHER is not missing. Every
   ``fill_from`` reads OTHER as it was before any fill of this step, so the order of the
   ``columns`` mapping never matters and two columns may fill from each other.
2. ``empty_text`` (default ``set_aside``): a row whose text columns are all missing is set aside
   with reason ``empty_text``. This comes before the per-column reasons because a row
   without text is useless whatever else it lacks.
3. Per-column ``set_aside``: the label column first (reason ``missing_label``), then the other
   columns in the order of the ``columns`` mapping (reason ``missing_value``); the ledger
   detail names the column. The label column's policy is ``set_aside`` unless ``columns``
   says otherwise. ``keep`` keeps the nulls.

Invariants: every input row is either in the output or in the ledger, exactly once; the output
keeps the input's row order and all its columns. Facts reported hold counts only:
``columns`` = {column: {"missing", "filled", "set_aside"}} and ``empty_text`` = rows set aside
for having no text.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal, Union

import polars as pl

from prep.config import ConfigValueError
from prep.errors import DataError
from prep.ledger import Reason
from prep.steps.base import StepContext
from prep.steps.normalise import ZERO_WIDTH

NAME = "missing"

# Spellings of "no value" seen in spreadsheet and database exports (common practice, no source).
DEFAULT_TOKENS: tuple[str, ...] = (
    "n/a", "na", "null", "none", "nil", "-", "--", "?", "nan", "(blank)", "(none)", "#n/a",
)  # fmt: skip

# Trimmed before the emptiness and token tests: Unicode White_Space (PropList.txt, from memory)
# and the zero-width characters that the `normalise` step removes, in case it did not run first.
WHITE_SPACE = "\t\n\x0b\x0c\r \x85\xa0\u1680" + "".join(map(chr, range(0x2000, 0x200B))) + "\u2028\u2029\u202f\u205f\u3000"
_BLANK = WHITE_SPACE + ZERO_WIDTH


@dataclass(frozen=True)
class FillSpec:
    """Fill missing cells: ``{fill: VALUE}`` with a fixed value, or ``{fill_from: OTHER}`` with
    another column's value in the same row. Exactly one of the two keys.

    One dataclass rather than two because :func:`prep.config.build` picks the first union
    member whose shape matches, and every dataclass matches every mapping.
    """

    fill: str | None = None
    fill_from: str | None = None

    def check(self) -> None:
        if (self.fill is None) == (self.fill_from is None):
            raise ConfigValueError("", "give exactly one of `fill` (a value) or `fill_from` (a column name).")


ColumnPolicy = Union[Literal["set_aside", "keep"], FillSpec]


@dataclass(frozen=True)
class Config:
    """``missing`` options; ``columns`` maps a canonical column to its policy."""

    tokens: list[str] = field(default_factory=lambda: list(DEFAULT_TOKENS))
    columns: dict[str, ColumnPolicy] = field(default_factory=dict)
    empty_text: Literal["set_aside", "keep"] = "set_aside"

    def check(self) -> None:
        for column, policy in self.columns.items():
            if isinstance(policy, FillSpec) and policy.fill_from == column:
                raise ConfigValueError(
                    "columns",
                    f"column `{column}` cannot be filled from itself; name another column in `fill_from`.",
                )


def _missing(expr: pl.Expr, tokens: list[str]) -> pl.Expr:
    """True where the cell is null, blank, or a token (case-insensitive, after trimming)."""
    trimmed = expr.str.strip_chars(_BLANK)
    # Lower-casing never shortens a string, so a cell longer than the longest token cannot match
    # one; cutting cells to that length + 1 first keeps lower-casing cheap on long texts.
    longest = max((len(t) for t in tokens), default=0)
    head = trimmed.str.slice(0, longest + 1).str.to_lowercase()
    return expr.is_null() | (trimmed == "") | head.is_in(tokens)


def _check_columns(table: pl.DataFrame, columns: list[str]) -> None:
    absent = [c for c in columns if c not in table.columns]
    if absent:
        names = ", ".join(f"`{c}`" for c in absent)
        raise DataError(
            f"Step `{NAME}`: column(s) {names} named in its config are not in the table.",
            hint="Use the canonical column names from the pipeline file's `columns` mappings.",
        )


def apply(table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.DataFrame:
    """Null out missing cells, fill, then set aside rows (empty text, then per column)."""
    policies: dict[str, object] = {ctx.label: "set_aside"}
    policies.update(config.columns)
    sources = [p.fill_from for p in policies.values() if isinstance(p, FillSpec) and p.fill_from is not None]
    _check_columns(table, [*ctx.text, ctx.label, *config.columns, *sources])

    # Columns cleaned, in a stable order without repeats.
    cleaned = list(dict.fromkeys([*ctx.text, ctx.label, *config.columns]))
    # Tokens get the same trimming and lower-casing as the cells (polars on both sides, so the
    # lower-case mapping cannot differ between Python and Rust).
    tokens = (
        pl.Series("t", list(config.tokens), dtype=pl.String)
        .str.strip_chars(_BLANK)
        .str.to_lowercase()
        .to_list()
    )
    # Columns as they are before any fill (missing -> null); fill_from reads these.
    nulled_frame = table.select(
        pl.when(~_missing(pl.col(c), tokens)).then(pl.col(c)).alias(c) for c in dict.fromkeys([*cleaned, *sources])
    )
    nulled = {c: nulled_frame.get_column(c) for c in nulled_frame.columns}
    found = {c: nulled[c].null_count() for c in cleaned}

    new: dict[str, pl.Series] = {}
    filled: dict[str, int] = {}
    for c in cleaned:
        policy = policies.get(c, "keep")
        series = nulled[c]
        if isinstance(policy, FillSpec) and policy.fill is not None:
            series = series.fill_null(policy.fill)
        elif isinstance(policy, FillSpec) and policy.fill_from is not None:
            series = series.fill_null(nulled[policy.fill_from])
        filled[c] = found[c] - series.null_count()
        new[c] = series
    result = table.with_columns(list(new.values()))

    # Set-aside reasons in order; `taken` marks rows already set aside by an earlier reason.
    taken = pl.repeat(False, table.height, dtype=pl.Boolean, eager=True)
    set_aside: dict[str, int] = {c: 0 for c in cleaned}
    empty_text = 0
    if config.empty_text == "set_aside" and ctx.text:
        no_text = pl.repeat(True, table.height, dtype=pl.Boolean, eager=True)
        for c in ctx.text:
            no_text = no_text & new[c].is_null()
        empty_text = int(no_text.sum())
        names = ", ".join(f"`{c}`" for c in ctx.text)
        ctx.set_aside(table.filter(no_text), Reason.EMPTY_TEXT, detail=f"all text columns ({names}) are missing")
        taken = taken | no_text
    order = [ctx.label] + [c for c in config.columns if c != ctx.label]
    for c in order:
        if policies.get(c) != "set_aside":
            continue
        hit = new[c].is_null() & ~taken
        set_aside[c] = int(hit.sum())
        if c == ctx.label:
            ctx.set_aside(table.filter(hit), Reason.MISSING_LABEL, detail=f"label column `{c}` is missing")
        else:
            ctx.set_aside(table.filter(hit), Reason.MISSING_VALUE, detail=f"column `{c}` is missing")
        taken = taken | hit

    ctx.report(
        "columns",
        {c: {"missing": found[c], "filled": filled[c], "set_aside": set_aside[c]} for c in sorted(cleaned)},
    )
    ctx.report("empty_text", empty_text)
    return result.filter(~taken)
