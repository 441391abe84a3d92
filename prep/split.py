"""Stratified, group-aware splitting into train/validation/test.

The method, in one paragraph: rows are gathered into *units* (a group of rows with the same
group value, or a single row), every unit gets a stable pseudo-random key from
``blake2b(f"{seed}\\x1f{unit}")``, units are put in key order within their *stratum* (the value
of the stratify column; for a group, the class most of its rows carry), and each stratum's rows
are laid out along a line in that order. The line is cut at the integer sizes :func:`allocate`
gives for the stratum, and each unit goes to the split in which its midpoint falls. For
one-row units the midpoint rule is exactly "the first ``n_train`` rows in key order go to train,
the next ``n_validation`` to validation, the rest to test", so without groups every class is
split into exactly the counts :func:`allocate` gives it.

Invariants (each has a test in ``tests/test_split.py``):

- every input row lands in exactly one split; rows sharing a group value land in the same split;
- the assignment depends only on the seed, the row ids, the group values and the partition of
  rows into classes: shuffling the rows, or renaming the classes by any one-to-one mapping,
  leaves every row's split unchanged;
- without groups, the per-class counts of the three splits equal ``allocate(class size, fractions)``;
- with groups, a stratum's split sizes differ from ``allocate`` by at most the size of its
  largest group (each of the two cuts moves at most half a group; see :func:`_assign_units`).

Rows whose ``_train_only`` column is true go to train outside the allocation (a group with such a
row goes to train whole, so that groups are never cut).
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import polars as pl

from prep.errors import DataError, PipelineError

SPLITS: tuple[str, str, str] = ("train", "validation", "test")

# A split whose share of the allocated rows is off its fraction by more than this gets a note in
# the card. Common practice, no source: a few percentage points is where people start to ask.
DEVIATION_NOTE_SHARE = 0.03

# Tolerance for "the fractions sum to 1": YAML decimals such as 0.7 + 0.2 + 0.1 do not sum to
# exactly 1.0 in binary floating point.
FRACTION_SUM_TOLERANCE = 1e-6

# BLAKE2b with an 8-byte digest (RFC 7693; digest size is a parameter of the hash, so this is not
# a truncation of BLAKE2b-512), read as a big-endian unsigned 64-bit integer.
KEY_DIGEST_SIZE = 8


def allocate(n: int, fractions: Sequence[float]) -> list[int]:
    """Split ``n`` items into parts proportional to ``fractions`` by the largest-remainder method.

    Each part first gets ``floor(n * f)``; the items left over go one each to the parts with the
    largest fractional remainders, ties broken by position (train before validation before test).
    The result always sums to ``n``, and a part whose fraction is 0 always gets 0.

    >>> allocate(10, [0.8, 0.1, 0.1])
    [8, 1, 1]
    >>> allocate(7, [0.8, 0.1, 0.1])
    [5, 1, 1]
    """
    if n < 0:
        raise ValueError("n must be >= 0")
    total = sum(fractions)
    exact = [n * f / total for f in fractions]
    counts = [int(e) for e in exact]
    left = n - sum(counts)
    # Sort by remainder descending, then by position: deterministic tie-breaking.
    order = sorted(range(len(fractions)), key=lambda i: (-(exact[i] - counts[i]), i))
    for i in order[:left]:
        counts[i] += 1
    return counts


def min_rows_for_all_splits(fractions: Sequence[float]) -> int:
    """Smallest class size for which :func:`allocate` gives every non-empty split at least one row.

    >>> min_rows_for_all_splits([0.8, 0.1, 0.1])
    7
    """
    wanted = [f > 0 for f in fractions]
    n = sum(wanted)
    while True:
        counts = allocate(n, fractions)
        if all(c >= 1 for c, w in zip(counts, wanted) if w):
            return n
        n += 1


@dataclass
class SplitResult:
    """The outcome of :func:`assign_splits`.

    ``assignment`` is a String series named ``split``, one of ``"train"``, ``"validation"``,
    ``"test"`` per input row, in the input table's row order. ``notes`` says in words what the
    splitter could not honour (for the card); notes hold counts, column names and class names,
    never other values from the data.
    """

    assignment: pl.Series
    notes: list[str] = field(default_factory=list)


def stable_keys(values: pl.Series, *, seed: int) -> pl.Series:
    """UInt64 sort keys ``blake2b(f"{seed}\\x1f{value}", digest_size=8)``, big-endian, one per value.

    Stable across polars, numpy and Python versions (hashlib's BLAKE2b, RFC 7693), unlike
    ``polars.Expr.hash``. ``values`` must be a String series without nulls.

    Cost: about 1.2 to 1.5 s per million values on one core here (a Python loop over hashlib, with the
    seed prefix hashed once and copied); the rest of the splitter is polars work.
    """
    if values.null_count():
        raise ValueError("stable_keys needs values without nulls.")
    prefix = hashlib.blake2b(f"{seed}\x1f".encode(), digest_size=KEY_DIGEST_SIZE)
    digests = []
    append = digests.append
    for value in values.to_list():
        h = prefix.copy()
        h.update(value.encode())
        append(h.digest())
    keys = np.frombuffer(b"".join(digests), dtype=">u8").astype(np.uint64)
    return pl.Series(values.name, keys, dtype=pl.UInt64)


def assign_splits(
    table: pl.DataFrame,
    *,
    fractions: Mapping[str, float],
    seed: int,
    stratify: str | None,
    group: str | None,
    train_only: str | None = "_train_only",
) -> SplitResult:
    """Assign every row of ``table`` to train, validation or test.

    ``fractions`` has the keys ``train``, ``validation`` and ``test``, each >= 0, summing to 1
    (a 0 gives an empty split). ``stratify`` names the column whose classes are split in
    proportion (``None``: all rows form one stratum; a missing value forms a stratum of its own).
    ``group`` names a column whose equal values must stay in one split (a row without a value is
    a group of its own). Rows whose ``train_only`` column is true go to train outside the
    allocation; a missing ``train_only`` column means no such rows.

    The table needs a unique, non-null String ``row_id`` column. See the module docstring for the
    method and its invariants.
    """
    wanted = _check_fractions(fractions)
    _check_table(table, stratify=stratify, group=group)

    rows = _row_frame(table, stratify=stratify, group=group, train_only=train_only)
    units = _unit_frame(rows, seed=seed, grouped=group is not None)
    units = _assign_units(units, wanted)

    assigned = (
        rows.join(units.select("_unit_row", "_unit", "split"), on=["_unit_row", "_unit"], how="left",
                  maintain_order="left")
        .sort("_pos")
        .get_column("split")
    )

    notes = _notes(
        rows.with_columns(assigned), units, wanted, stratify=stratify, group=group, train_only=train_only
    )
    return SplitResult(assignment=assigned.alias("split"), notes=notes)


def split_tables(table: pl.DataFrame, result: SplitResult) -> dict[str, pl.DataFrame]:
    """The rows of each split, in the table's row order, without helper columns (names starting with ``_``).

    Always returns the three keys ``train``, ``validation``, ``test``; a split may be an empty frame.
    """
    if result.assignment.len() != table.height:
        raise ValueError(
            f"The split assignment has {result.assignment.len()} entries but the table has "
            f"{table.height} rows; assign the splits on this same table."
        )
    keep = [c for c in table.columns if not c.startswith("_")]
    return {name: table.filter(result.assignment == name).select(keep) for name in SPLITS}


# --- checks --------------------------------------------------------------------------------------


def _check_fractions(fractions: Mapping[str, float]) -> list[float]:
    """The fractions as a list in SPLITS order, after checking keys, signs and sum."""
    if set(fractions) != set(SPLITS):
        raise PipelineError(
            f"the split fractions must be given for exactly train, validation and test; "
            f"got {', '.join(sorted(map(str, fractions))) or 'none'}.",
            key="split",
        )
    wanted = [float(fractions[name]) for name in SPLITS]
    for name, f in zip(SPLITS, wanted):
        if not (f >= 0 and np.isfinite(f)):
            raise PipelineError(f"the fraction must be a number >= 0; got {f}.", key=f"split.{name}")
    if abs(sum(wanted) - 1.0) > FRACTION_SUM_TOLERANCE:
        raise PipelineError(
            f"the fractions of train, validation and test must sum to 1; they sum to {sum(wanted):g}.",
            key="split",
        )
    return wanted


def _check_table(table: pl.DataFrame, *, stratify: str | None, group: str | None) -> None:
    for role, column in (("stratify", stratify), ("group", group)):
        if column is not None and column not in table.columns:
            raise PipelineError(
                f"the {role} column `{column}` is not in the table; "
                f"the table has {', '.join(f'`{c}`' for c in table.columns)}.",
                key=f"split.{role}",
            )
    if "row_id" not in table.columns:
        raise DataError("The splitter needs a `row_id` column, and the table has none.")
    ids = table.get_column("row_id")
    if ids.dtype != pl.String:
        raise DataError(f"The splitter needs `row_id` of type String; it is {ids.dtype}.")
    if ids.null_count():
        raise DataError(f"The splitter found {_rows(ids.null_count())} without a `row_id`.")
    duplicates = table.height - ids.n_unique()
    if duplicates:
        raise DataError(
            f"The splitter found {duplicates} repeated `row_id` values; row ids must be unique "
            "for the split to be reproducible."
        )


# --- the method ----------------------------------------------------------------------------------


def _row_frame(
    table: pl.DataFrame, *, stratify: str | None, group: str | None, train_only: str | None
) -> pl.DataFrame:
    """One line per input row: position, stratum, unit identity, train-only flag.

    ``_stratum`` is an integer id (0 = missing value). It is only used to tell classes apart,
    never to order them, so renaming classes cannot change the assignment. ``_class`` keeps the
    value itself for the notes.
    """
    if stratify is None:
        klass = pl.lit(None, dtype=pl.String)
        stratum = pl.lit(1, dtype=pl.UInt32)
    else:
        klass = pl.col(stratify).cast(pl.String)
        stratum = klass.rank("dense").cast(pl.UInt32).fill_null(0)
    if group is None:
        unit_row = pl.lit(True)
        unit = pl.col("row_id")
    else:
        # A row without a group value is a group of its own; `_unit_row` keeps such a row apart
        # from a group whose value happens to equal its row id.
        unit_row = pl.col(group).is_null()
        unit = pl.coalesce(pl.col(group).cast(pl.String), pl.col("row_id"))
    if train_only is not None and train_only in table.columns:
        if table.schema[train_only] != pl.Boolean:
            raise DataError(
                f"The splitter needs the column `{train_only}` to be Boolean; it is {table.schema[train_only]}."
            )
        only = pl.col(train_only).fill_null(False)
    else:
        only = pl.lit(False)
    return table.select(
        pl.int_range(pl.len(), dtype=pl.UInt64).alias("_pos"),
        "row_id",
        klass.alias("_class"),
        stratum.alias("_stratum"),
        unit_row.alias("_unit_row"),
        unit.alias("_unit"),
        only.alias("_train_only"),
    )


def _unit_frame(rows: pl.DataFrame, *, seed: int, grouped: bool) -> pl.DataFrame:
    """One line per unit: identity, size, stratum, key, and whether it must go to train.

    A group's stratum is the class most of its rows carry. Ties go to the class of the tied
    rows' smallest ``row_id`` (string order), which does not depend on the class names, so
    renaming classes keeps every group in the same stratum. (The brief suggested "smallest
    label"; that would break the renaming invariant.)
    """
    ident = ["_unit_row", "_unit"]
    if not grouped:
        units = rows.select(*ident, "_stratum", "_train_only", pl.lit(1, dtype=pl.UInt64).alias("_size"))
    else:
        per_class = rows.group_by([*ident, "_stratum"]).agg(
            pl.len().cast(pl.UInt64).alias("_n"),
            pl.col("row_id").min().alias("_first_id"),
            pl.col("_train_only").any(),
        )
        units = (
            per_class.sort([*ident, "_n", "_first_id"], descending=[False, False, True, False])
            .group_by(ident, maintain_order=True)
            .agg(
                pl.col("_stratum").first(),
                pl.col("_train_only").any(),
                pl.col("_n").sum().alias("_size"),
            )
        )
    return units.with_columns(stable_keys(units.get_column("_unit"), seed=seed).alias("_key"))


def _assign_units(units: pl.DataFrame, wanted: list[float]) -> pl.DataFrame:
    """Add a ``split`` column to the units.

    Within a stratum, units are laid out in key order along a line of the stratum's row count,
    which is cut at ``allocate(rows, wanted)``; a unit goes to the split holding its midpoint
    (computed doubled, ``2 * start + size``, to stay in integers). A cut then lands at most half a
    unit away from its target, so each split is off by at most the largest unit, and a split with
    fraction 0 (an empty interval) never gets a unit. Train-only units go to train unallocated.
    """
    only = units.filter(pl.col("_train_only")).with_columns(pl.lit("train").alias("split"))
    free = units.filter(~pl.col("_train_only"))
    # Ties in `_key` are practically impossible (64 bits), but the unit identity breaks them so
    # the order is total and does not depend on input order.
    free = free.sort(["_stratum", "_key", "_unit_row", "_unit"])

    totals = free.group_by("_stratum", maintain_order=True).agg(pl.col("_size").sum().alias("_rows"))
    bounds = []
    for stratum, n in totals.iter_rows():   # one iteration per class, not per row
        n_train, n_validation, _ = allocate(int(n), wanted)
        bounds.append((stratum, n_train, n_train + n_validation))
    bounds_frame = pl.DataFrame(
        bounds, schema={"_stratum": pl.UInt32, "_cut1": pl.UInt64, "_cut2": pl.UInt64}, orient="row"
    )

    mid2 = 2 * (pl.col("_size").cum_sum().over("_stratum") - pl.col("_size")) + pl.col("_size")
    free = (
        free.join(bounds_frame, on="_stratum", how="left", maintain_order="left")
        .with_columns(
            pl.when(mid2 < 2 * pl.col("_cut1"))
            .then(pl.lit("train"))
            .when(mid2 < 2 * pl.col("_cut2"))
            .then(pl.lit("validation"))
            .otherwise(pl.lit("test"))
            .alias("split")
        )
        .drop("_cut1", "_cut2")
    )
    return pl.concat([free, only], how="vertical")


# --- notes for the card --------------------------------------------------------------------------


def _notes(
    rows: pl.DataFrame,
    units: pl.DataFrame,
    wanted: list[float],
    *,
    stratify: str | None,
    group: str | None,
    train_only: str | None,
) -> list[str]:
    """What the card should say the split could not honour. Counts and class names only."""
    notes: list[str] = []
    if rows.height == 0:
        return ["The table has no rows, so every split is empty."]

    if stratify is not None:
        missing = rows.get_column("_class").null_count()
        if missing:
            notes.append(
                f"{_rows(missing)} without a `{stratify}` value were split as a stratum of their own."
            )
    if group is not None:
        ungrouped = int(rows.get_column("_unit_row").sum())
        if ungrouped:
            notes.append(f"{_rows(ungrouped)} without a `{group}` value were each treated as a group of their own.")
        if stratify is not None:
            unit_stratum = units.select("_unit_row", "_unit", pl.col("_stratum").alias("_unit_stratum"))
            off = rows.join(unit_stratum, on=["_unit_row", "_unit"], how="left").filter(
                pl.col("_stratum") != pl.col("_unit_stratum")
            ).height
            if off:
                notes.append(
                    f"{_rows(off)} sit in a group whose most common `{stratify}` class is not theirs; "
                    "they follow their group, so per-class proportions are approximate."
                )

    only = rows.filter(pl.col("_train_only"))
    if only.height:
        notes.append(f"{_rows(only.height)} marked `{train_only}` went to train outside the allocation.")
        if group is not None:
            pulled = units.filter(pl.col("_train_only")).get_column("_size").sum() - only.height
            if pulled:
                notes.append(
                    f"{_rows(pulled)} went to train with their group, which holds a row marked `{train_only}`."
                )

    counts = rows.group_by("split").len()
    count_of = dict(counts.iter_rows())
    for name, f in zip(SPLITS, wanted):
        if f > 0 and not count_of.get(name):
            notes.append(
                f"Split `{name}` is empty although its fraction is {f:g}: there are too few rows"
                + (" or groups." if group is not None else ".")
            )

    allocated = rows.filter(~pl.col("_train_only"))
    if allocated.height:
        alloc_of = dict(allocated.group_by("split").len().iter_rows())
        for name, f in zip(SPLITS, wanted):
            share = alloc_of.get(name, 0) / allocated.height
            # An empty split already has its own note above.
            if abs(share - f) > DEVIATION_NOTE_SHARE and alloc_of.get(name):
                notes.append(
                    f"Split `{name}` holds {share:.1%} of the {allocated.height} allocated rows, "
                    f"against {f:.1%} asked for"
                    + (" (groups are kept whole)." if group is not None else " (rounding per class).")
                )

    if stratify is not None:
        notes.extend(_class_notes(rows, wanted, stratify=stratify))
    return notes


def _class_notes(rows: pl.DataFrame, wanted: list[float], *, stratify: str) -> list[str]:
    """One note per class that some split with a positive fraction did not get any row of."""
    table = (
        rows.group_by("_class")
        .agg(
            pl.len().alias("_n"),
            *[(pl.col("split") == name).sum().alias(name) for name in SPLITS],
        )
        .sort("_class", nulls_last=True)
    )
    notes = []
    for record in table.iter_rows(named=True):   # one iteration per class
        lacking = [name for name, f in zip(SPLITS, wanted) if f > 0 and record[name] == 0]
        if not lacking:
            continue
        who = (
            f"class `{record['_class']}` has {_rows(record['_n'])}"
            if record["_class"] is not None
            else f"{_rows(record['_n'])} without a `{stratify}` value"
        )
        notes.append(f"{who}: {' and '.join(lacking)} get{'s' if len(lacking) == 1 else ''} none.")
    return notes


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"
