"""Step ``rare_classes``: deal with classes too small to appear in every split.

A class is rare when it has fewer than ``min_rows`` rows. By default ``min_rows`` is
:func:`prep.split.min_rows_for_all_splits` of the pipeline's split fractions: the
smallest class size for which the splitter can give every non-empty split a row
(7 for 0.8/0.1/0.1). Null labels are not a class: those rows are left alone.

Policies:

- ``set_aside``: rows of rare classes go to the ledger (reason ``rare_class``).
- ``merge``: rows of rare classes are relabelled ``merge_into``. If the merged class
  is still below ``min_rows`` that is reported, not repaired (no second round).
- ``train_only``: a Boolean column ``_train_only`` marks rows of rare classes (True) and
  all others (False); the splitter puts marked rows in train and the runner drops
  the column before writing. An existing ``_train_only`` column is kept and OR-ed.

Invariants (tested): row order and every other column are unchanged; a row is either
in the result or in the ledger, exactly once; class counts are taken once, before
any change (so the outcome does not depend on the order of classes).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import polars as pl

from prep.config import ConfigValueError
from prep.errors import PipelineError
from prep.ledger import Reason
from prep.split import min_rows_for_all_splits
from prep.steps.base import RowPlan, StepContext

NAME = "rare_classes"

TRAIN_ONLY_COLUMN = "_train_only"   # read by prep.split, dropped by the runner


@dataclass(frozen=True)
class Config:
    """``rare_classes`` settings; see the module docstring for their meaning."""

    min_rows: int | None = None          # None: the smallest size that reaches every split
    policy: Literal["set_aside", "merge", "train_only"] = "set_aside"
    merge_into: str | None = None        # the class that takes rare rows under `merge`

    def check(self) -> None:
        if self.min_rows is not None and self.min_rows < 1:
            raise ConfigValueError("min_rows", f"must be at least 1, got {self.min_rows}")
        if self.policy == "merge" and self.merge_into is None:
            raise ConfigValueError("merge_into", "is required with `policy: merge`: name the class that takes the rows")
        if self.policy != "merge" and self.merge_into is not None:
            raise ConfigValueError("merge_into", "is only used with `policy: merge`; remove it or set the policy")


KEYED = True  # see prep.steps.base: the Dask engine decides on the client from the keys alone


def apply(table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.DataFrame:
    """Set aside, merge or mark the rows of rare classes; see the module docstring."""
    return decide(keys(table, config, ctx, compact=False), config, ctx).carry_out(table)


def keys(table: pl.DataFrame, config: Config, ctx: StepContext, *, compact: bool) -> pl.DataFrame:
    """Row-local: provenance, the label as text and, when the table has one, ``_train_only``."""
    if ctx.label not in table.columns:
        raise PipelineError(f"the label column `{ctx.label}` is not in the table.", key="label")
    marked = [TRAIN_ONLY_COLUMN] if TRAIN_ONLY_COLUMN in table.columns else []
    return table.select("row_id", "source", "source_row", pl.col(ctx.label).cast(pl.String).alias("_label"), *marked)


def decide(keys: pl.DataFrame, config: Config, ctx: StepContext) -> RowPlan:
    """The whole table's decision from its :func:`keys`: ledger rows and facts."""
    min_rows = config.min_rows
    if min_rows is None:
        min_rows = min_rows_for_all_splits(list(ctx.split_fractions.values()))

    label = pl.col("_label")
    counts = (
        keys.select(label.alias("class"))
        .filter(pl.col("class").is_not_null())
        .group_by("class")
        .len()
        .rename({"len": "rows"})
        .sort("class")
    )
    rare = counts.filter(pl.col("rows") < min_rows)
    rare_names = rare.get_column("class")
    class_rows = pl.len().over("_label")
    is_rare = label.is_in(rare_names.implode()).fill_null(False)

    classes: list[dict] = []
    plan = RowPlan()
    if config.policy == "set_aside":
        mask = keys.select(is_rare).to_series()
        aside = keys.filter(mask)
        detail = aside.select(
            pl.format("class has {} rows, fewer than {}", class_rows, pl.lit(min_rows))
        ).to_series()
        ctx.set_aside(aside, Reason.RARE_CLASS, detail=detail)
        plan = RowPlan(keep=~mask)
        classes = [{"class": c, "rows": n, "action": "set_aside"} for c, n in rare.iter_rows()]
    elif config.policy == "merge":
        target = config.merge_into
        moved = rare.filter(pl.col("class") != target)
        merged = keys.select(
            pl.when(is_rare).then(pl.lit(target, dtype=pl.String)).otherwise(label).alias(ctx.label)
        ).to_series()
        plan = RowPlan(columns=(merged,))
        rows_after = int((merged == target).sum())
        classes = [
            {"class": c, "rows": n, "action": "merge_target" if c == target else "merged"} for c, n in rare.iter_rows()
        ]
        ctx.report(
            "merge",
            {
                "into": target,
                "from": moved.get_column("class").to_list(),
                "rows_moved": int(moved.get_column("rows").sum()),
                "rows_after": rows_after,
                "below_min_rows": rows_after < min_rows,
            },
        )
    else:  # train_only
        mark = is_rare
        if TRAIN_ONLY_COLUMN in keys.columns:
            mark = pl.col(TRAIN_ONLY_COLUMN).fill_null(False) | is_rare
        plan = RowPlan(columns=(keys.select(mark.cast(pl.Boolean).alias(TRAIN_ONLY_COLUMN)).to_series(),))
        classes = [{"class": c, "rows": n, "action": "train_only"} for c, n in rare.iter_rows()]

    ctx.report("min_rows", min_rows)
    ctx.report("policy", config.policy)
    ctx.report("classes", [{"class": c["class"], "rows": int(c["rows"]), "action": c["action"]} for c in classes])
    return plan
