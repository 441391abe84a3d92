"""Step ``exact_duplicates``: keep one row of each group of rows with identical text.

Rows are duplicates when the chosen columns (default: the text columns) are equal,
a null compared as the empty string, and, unless ``case_sensitive``, after
``str.to_lowercase()``. That is Unicode lowercasing, not full case folding: "ß" and
"SS" stay different. Whitespace is not touched here: the ``normalise`` step runs
earlier and already collapsed it.

Rows whose chosen columns are all null or empty are never duplicates of each other:
they carry no text to compare, and setting them aside is the ``missing`` step's job.

Which row is kept (``keep``):

- ``first``: the first in table order (sources in pipeline order, then file order);
- ``earliest`` / ``latest``: by ``time_column``, parsed with :data:`TIME_FORMATS`;
  an unparseable or missing time sorts last for both; ties go to table order.

Label conflicts (a group whose non-null labels take more than one value, compared
exactly as they are) follow ``conflicts``:

- ``majority``: keep the preferred row among those carrying the most frequent label;
  the rest are ``exact_duplicate`` of it. If the top count is tied, the whole group is
  set aside as ``label_conflict`` (no kept row).
- ``set_aside``: the whole conflicting group is set aside as ``label_conflict``.
- ``keep_first``: the conflict is ignored; the group is treated like any other.

In every policy a row with a null label is kept only when no row of its group has a
label: a labelled copy of the same text is worth more than an unlabelled one.

Invariants (tested): every input row is either in the result (in its original order,
with all its columns unchanged) or in the ledger, exactly once; each group keeps at
most one row; every ``exact_duplicate`` ledger row names a kept row of its own group.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import polars as pl

from prep.config import ConfigValueError
from prep.errors import PipelineError
from prep.ledger import Reason
from prep.steps.base import RowPlan, StepContext
from prep.text import digest_exprs

NAME = "exact_duplicates"

# Time formats tried in this order (chrono/strftime syntax as polars reads it). The
# first that parses wins; all are anchored, so at most one can match a given string.
# Formats with an offset (``Z`` or ``+01:00``) are converted to UTC; the others carry
# no zone and are taken to be UTC as well (an assumption: exports rarely say).
# Slash dates are read day first (04/03/2025 = 4 March 2025), as in most of Europe;
# month-first slash dates are not supported because they cannot be told apart.
# ISO 8601 forms: ISO 8601-1:2019, section 5.4 (from memory).
TIME_FORMATS_WITH_OFFSET: tuple[str, ...] = (
    "%Y-%m-%dT%H:%M:%S%.f%#z",   # 2025-03-04T10:22:00Z, 2025-03-04T10:22:00.5+01:00
    "%Y-%m-%d %H:%M:%S%.f%#z",   # 2025-03-04 10:22:00.000000+00:00 (polars' own text form)
    "%Y-%m-%dT%H:%M%#z",         # 2025-03-04T10:22Z
)
TIME_FORMATS_NAIVE: tuple[str, ...] = (
    "%Y-%m-%dT%H:%M:%S%.f",      # 2025-03-04T10:22:00
    "%Y-%m-%d %H:%M:%S%.f",      # 2025-03-04 10:22:00
    "%Y-%m-%dT%H:%M",            # 2025-03-04T10:22
    "%Y-%m-%d %H:%M",            # 2025-03-04 10:22
    "%Y-%m-%d",                  # 2025-03-04
    "%d/%m/%Y %H:%M:%S",         # 04/03/2025 10:22:00
    "%d/%m/%Y %H:%M",            # 04/03/2025 10:22
    "%d/%m/%Y",                  # 04/03/2025
    "%d.%m.%Y %H:%M:%S",         # 04.03.2025 10:22:00
    "%d.%m.%Y %H:%M",            # 04.03.2025 10:22
    "%d.%m.%Y",                  # 04.03.2025
)
TIME_FORMATS: tuple[str, ...] = TIME_FORMATS_WITH_OFFSET + TIME_FORMATS_NAIVE

# Cluster table written for the later duplicates.parquet.
CLUSTER_SCHEMA: dict[str, pl.DataType] = {
    "cluster_id": pl.Int64(),
    "row_id": pl.String(),
    "source": pl.String(),
    "source_row": pl.Int64(),
    "kept": pl.Boolean(),
    "label": pl.String(),
}


@dataclass(frozen=True)
class Config:
    """``exact_duplicates`` settings; see the module docstring for their meaning."""

    columns: list[str] | None = None            # None: the pipeline's text columns
    case_sensitive: bool = False
    keep: Literal["first", "earliest", "latest"] = "first"
    time_column: str | None = None
    conflicts: Literal["majority", "set_aside", "keep_first"] = "majority"

    def check(self) -> None:
        if self.columns is not None and not self.columns:
            raise ConfigValueError("columns", "must name at least one column (or be left out to use the text columns)")
        if self.keep in ("earliest", "latest") and self.time_column is None:
            raise ConfigValueError(
                "time_column", f"is required when `keep` is {self.keep!r}: name the column holding the time"
            )
        if self.keep == "first" and self.time_column is not None:
            raise ConfigValueError("time_column", "is only used with `keep: earliest` or `keep: latest`; remove it")


def _parse_with(text: pl.Expr, fmt: str) -> pl.Expr:
    parsed = text.str.to_datetime(fmt, strict=False, time_unit="us")
    if fmt in TIME_FORMATS_WITH_OFFSET:
        parsed = parsed.dt.convert_time_zone("UTC").dt.replace_time_zone(None)
    return parsed


def parse_times(values: pl.Series) -> pl.Series:
    """``values`` (strings in mixed formats) as naive UTC datetimes (µs); null where no format fits.

    Same result as ``pl.coalesce`` over one non-strict ``str.to_datetime`` per format in
    :data:`TIME_FORMATS` order, but each format only sees the values the earlier ones
    left unparsed: real exports use one or two formats, so most passes are nearly empty.
    """
    n = values.len()
    text = values.cast(pl.String).str.strip_chars()
    result = pl.repeat(None, n, dtype=pl.Datetime("us"), eager=True).alias(values.name)
    todo = pl.DataFrame({"i": pl.int_range(0, n, dtype=pl.Int64, eager=True), "t": text}).filter(
        pl.col("t").is_not_null() & (pl.col("t") != "")
    )
    for fmt in TIME_FORMATS:
        if todo.height == 0:
            break
        parsed = todo.select(_parse_with(pl.col("t"), fmt)).to_series()
        ok = parsed.is_not_null()
        if ok.any():
            result = result.scatter(todo.get_column("i").filter(ok), parsed.filter(ok))
            todo = todo.filter(~ok)
    return result


def _times(table: pl.DataFrame, column: str) -> pl.Series:
    dtype = table.schema[column]
    values = table.get_column(column)
    if isinstance(dtype, pl.Datetime):  # a reader that kept the type: use it as is, in UTC
        values = values.dt.cast_time_unit("us")
        if dtype.time_zone is not None:
            values = values.dt.convert_time_zone("UTC").dt.replace_time_zone(None)
        return values
    if dtype == pl.Date:
        return values.cast(pl.Datetime("us"))
    return parse_times(values)


def _key_exprs(columns: list[str], *, case_sensitive: bool) -> list[pl.Expr]:
    """The compared values, one expression per column: null as "", lowercased unless case-sensitive.

    Rows are grouped on these columns together (not on one concatenated string), so
    no choice of separator can make two different rows collide.
    """
    keys = []
    for i, c in enumerate(columns):
        value = pl.col(c).cast(pl.String).fill_null("")
        if not case_sensitive:
            value = value.str.to_lowercase()
        keys.append(value.alias(f"_k{i}"))
    return keys


def _check_columns(table: pl.DataFrame, needed: list[str], key: str) -> None:
    missing = [c for c in needed if c not in table.columns]
    if missing:
        names = ", ".join(f"`{c}`" for c in missing)
        raise PipelineError(
            f"the column {names} is not in the table; the table has: {', '.join(table.columns)}.",
            key=key,
        )


KEYED = True  # see prep.steps.base: the Dask engine decides on the client from the keys alone


def apply(table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.DataFrame:
    """Set aside all but one row of each group of identical rows; see the module docstring."""
    return decide(keys(table, config, ctx, compact=False), config, ctx).carry_out(table)


def keys(table: pl.DataFrame, config: Config, ctx: StepContext, *, compact: bool) -> pl.DataFrame:
    """Row-local: provenance, the compared values (``_k0`` …; with ``compact`` two 64-bit digests
    of them instead of the texts), ``_empty``, ``_label`` and, with a time column, ``_time``."""
    columns = list(config.columns) if config.columns is not None else list(ctx.text)
    _check_columns(table, columns, f"{NAME}.columns")
    _check_columns(table, [ctx.label], "label")
    if config.time_column is not None:
        _check_columns(table, [config.time_column], f"{NAME}.time_column")
    out = table.select(
        "row_id",
        "source",
        "source_row",
        *_key_exprs(columns, case_sensitive=config.case_sensitive),
        pl.col(ctx.label).cast(pl.String).alias("_label"),
        *([_times(table, config.time_column).alias("_time")] if config.time_column else []),
    )
    names = [f"_k{i}" for i in range(len(columns))]
    out = out.with_columns(pl.all_horizontal([pl.col(k) == "" for k in names]).alias("_empty"))
    if compact:  # the values lowercased once, above, then hashed (prep.text.digest_exprs)
        out = out.with_columns(digest_exprs(names, "_d")).drop(names).rename({"_d0": "_k0", "_d1": "_k1"})
    return out


def decide(keys: pl.DataFrame, config: Config, ctx: StepContext) -> RowPlan:
    """The whole table's decision from its :func:`keys`: ledger rows, cluster table, facts."""
    columns = list(config.columns) if config.columns is not None else list(ctx.text)
    key_names = [c for c in keys.columns if c.startswith("_k")]
    table = keys  # provenance for the ledger and the cluster table
    work = keys.select(
        pl.int_range(pl.len(), dtype=pl.Int64).alias("_pos"),
        *key_names,
        "_empty",
        "_label",
        *(["_time"] if "_time" in keys.columns else []),
    )
    # `_key`: the group of a row as the position of its group's first row (an integer, so
    # the windows below are cheap, and ordering by it orders groups by first appearance).
    work = work.with_columns(pl.col("_pos").min().over(key_names).alias("_key")).drop(key_names)

    # `_pref`: the global order of preference for keeping (0 = most preferred).
    if config.keep == "first":
        work = work.with_columns(pl.col("_pos").alias("_pref"))
    else:
        work = (
            work.sort(
                [pl.col("_time").is_null(), "_time", "_pos"],
                descending=[False, config.keep == "latest", False],
                maintain_order=True,
            )
            .with_columns(pl.int_range(pl.len(), dtype=pl.Int64).alias("_pref"))
            .sort("_pos")
        )

    g = "_key"
    size = pl.len().over(g)
    n_labels = pl.col("_label").drop_nulls().n_unique().over(g)
    label_count = pl.when(pl.col("_label").is_not_null()).then(pl.len().over([g, "_label"]))
    work = work.with_columns(
        ((size > 1) & ~pl.col("_empty")).alias("_dup_group"),
        (n_labels > 1).alias("_conflict"),
        label_count.alias("_lc"),
    ).with_columns(
        pl.col("_lc").max().over(g).alias("_top"),
    )
    n_top_labels = pl.when(pl.col("_lc") == pl.col("_top")).then(pl.col("_label")).drop_nulls().n_unique().over(g)
    work = work.with_columns(
        (pl.col("_conflict") & (n_top_labels > 1)).alias("_tied"),
    )

    # Candidates for keeping: rows with the top label under `majority`, else rows with any
    # label; a group without labels keeps from all its rows.
    if config.conflicts == "majority":
        candidate = pl.col("_lc") == pl.col("_top")
    else:
        candidate = pl.col("_label").is_not_null()
    candidate = pl.when(pl.col("_top").is_null()).then(True).otherwise(candidate.fill_null(False))
    kept_pref = pl.when(candidate).then(pl.col("_pref")).min().over(g)
    if config.conflicts == "majority":
        whole_group_aside = pl.col("_tied")
    elif config.conflicts == "set_aside":
        whole_group_aside = pl.col("_conflict")
    else:
        whole_group_aside = pl.lit(False)

    work = work.with_columns(
        (pl.col("_dup_group") & whole_group_aside).alias("_aside_conflict"),
        kept_pref.alias("_kept_pref"),
    ).with_columns(
        (pl.col("_dup_group") & ~pl.col("_aside_conflict") & (pl.col("_pref") != pl.col("_kept_pref"))).alias(
            "_aside_dup"
        ),
        (pl.col("_dup_group") & ~pl.col("_aside_conflict") & (pl.col("_pref") == pl.col("_kept_pref"))).alias(
            "_kept"
        ),
        pl.col("_pos").filter(pl.col("_pref") == pl.col("_kept_pref")).first().over(g).alias("_kept_pos"),
    )

    flags = work.select("_pos", "_dup_group", "_conflict", "_tied", "_aside_conflict", "_aside_dup", "_kept",
                        "_kept_pos", "_key")
    row_ids = table.get_column("row_id")

    # Duplicates of a kept row.
    dup_mask = flags.get_column("_aside_dup")
    dup_rows = table.filter(dup_mask)
    kept_ids = row_ids.gather(flags.filter(dup_mask).get_column("_kept_pos"))
    how = "case-sensitive" if config.case_sensitive else "ignoring case"
    ctx.set_aside(
        dup_rows,
        Reason.EXACT_DUPLICATE,
        detail=f"same {', '.join(columns)} as the kept row ({how})",
        kept_row_id=kept_ids,
        similarity=1.0,
    )

    # Whole groups set aside for conflicting labels.
    conflict_mask = flags.get_column("_aside_conflict")
    conflict_detail = (
        "duplicate group with different labels, tied labels: no majority"
        if config.conflicts == "majority"
        else "duplicate group with different labels"
    )
    ctx.set_aside(table.filter(conflict_mask), Reason.LABEL_CONFLICT, detail=conflict_detail)

    # Cluster table: every row of every group of >1 rows, in table order; cluster ids
    # count groups in table order of their first row, from 0.
    clusters = (
        flags.with_columns(row_ids, table.get_column("source"), table.get_column("source_row"),
                           work.get_column("_label").alias("label"))
        .filter(pl.col("_dup_group"))
        .with_columns(
            (pl.col("_key").rank("dense") - 1).cast(pl.Int64).alias("cluster_id"),
            pl.col("_kept").alias("kept"),
        )
        .select(list(CLUSTER_SCHEMA))
        .cast(CLUSTER_SCHEMA)
    )
    ctx.add_output("exact_duplicate_clusters", clusters)

    # Facts for the card: counts only.
    groups = flags.filter(pl.col("_dup_group")).group_by("_key").agg(
        pl.len().alias("rows"), pl.col("_conflict").first(), pl.col("_aside_conflict").first()
    )
    sizes = (
        groups.group_by("rows").len().sort("rows")
        if groups.height
        else pl.DataFrame(schema={"rows": pl.UInt32, "len": pl.UInt32})
    )
    n_dup = int(dup_mask.sum())
    n_conflict_rows = int(conflict_mask.sum())
    ctx.report("columns", columns)
    ctx.report("case_sensitive", config.case_sensitive)
    ctx.report("keep", config.keep)
    ctx.report("conflicts", config.conflicts)
    ctx.report("groups", groups.height)
    ctx.report("rows_removed", n_dup + n_conflict_rows)
    ctx.report("exact_duplicate_rows", n_dup)
    ctx.report("label_conflicts", int(groups.get_column("_conflict").sum()))
    ctx.report("label_conflict_groups_set_aside", int(groups.get_column("_aside_conflict").sum()))
    ctx.report("label_conflict_rows", n_conflict_rows)
    ctx.report("clusters", [{"size": int(s), "clusters": int(n)} for s, n in sizes.iter_rows()])
    if config.time_column is not None:
        ctx.report("unparsed_times", int(work.get_column("_time").null_count()))

    return RowPlan(keep=~dup_mask & ~conflict_mask)
