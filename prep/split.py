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
from pathlib import Path

import numpy as np
import polars as pl

from prep.errors import DataError, InputError, PipelineError

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


# Two fractional remainders closer than this count as tied (YAML decimals such as 0.1 are not exact
# in binary, so 12 * 0.2 and 12 * 0.2 computed by different routes may differ in the last bit).
REMAINDER_TIE_TOLERANCE = 1e-9


def allocate_strata(sizes: Sequence[int], fractions: Sequence[float]) -> list[list[int]]:
    """Largest-remainder allocation of several strata at once, processed in the order given.

    Each stratum of ``n`` rows gets what :func:`allocate` would give it up to ties: every part
    first gets ``floor(n * f)``, and the rows left over go one each to the parts with the largest
    fractional remainders. Where remainders tie, the row goes to the part furthest below its
    overall target so far (its *running deficit*: ``f * rows seen so far`` minus the rows it has
    been given, this stratum's floors included), then by position. So with many equal-sized
    classes the extra rows alternate between the tied splits instead of always going to the
    first of them (three classes of 12 at 0.6/0.2/0.2 give validation 8 and test 7 rows, not 9 and 6).

    A part whose fraction is 0 never gets a row. The caller chooses the order; prep's splitter
    uses one that does not depend on class names (see :func:`_assign_units`).

    >>> allocate_strata([12, 12, 12], [0.6, 0.2, 0.2])
    [[7, 3, 2], [7, 2, 3], [7, 3, 2]]
    >>> allocate_strata([10], [0.8, 0.1, 0.1]) == [allocate(10, [0.8, 0.1, 0.1])]
    True
    """
    total = sum(fractions)
    share = [f / total for f in fractions]
    given = [0] * len(fractions)
    seen = 0
    result = []
    for n in sizes:
        if n < 0:
            raise ValueError("sizes must be >= 0")
        exact = [n * s for s in share]
        counts = [int(e) for e in exact]
        left = n - sum(counts)
        seen += n
        deficit = [seen * share[i] - (given[i] + counts[i]) for i in range(len(share))]
        order = sorted(
            (i for i in range(len(share)) if share[i] > 0),
            key=lambda i: (-round((exact[i] - counts[i]) / REMAINDER_TIE_TOLERANCE), -deficit[i], i),
        )
        for i in order[:left]:
            counts[i] += 1
        given = [g + c for g, c in zip(given, counts)]
        result.append(counts)
    return result


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
    links: Sequence[str] = (),
    history: pl.DataFrame | Path | None = None,
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

    ``links`` names further columns (such as the near-duplicate step's ``_cluster``) whose equal
    non-null values must also stay in one split: units are then the connected components of
    "same group value" or "same link value" (see :func:`linked_groups`).

    ``history`` (stable splits across versions): the previous version's assignment, as a frame of
    ``row_id`` and ``split`` or as the previous output folder (see :func:`load_split_history`).
    A row found there keeps its split; only new rows are allocated (see :func:`_assign_units`).
    """
    present = [c for c in links if c in table.columns and table.get_column(c).null_count() < table.height]
    if present:
        own_group = group
        # Counted before the links replace the group: a linked unit without a value is a row that
        # shares nothing, which also covers rows whose group value occurs once.
        own_missing = table.get_column(group).null_count() if group and group in table.columns else 0
        table = table.with_columns(linked_groups(table, [*([group] if group else []), *present]).alias(LINKED_GROUP))
        group = LINKED_GROUP
    wanted = _check_fractions(fractions)
    _check_table(table, stratify=stratify, group=group)

    rows = _row_frame(table, stratify=stratify, group=group, train_only=train_only)
    units = _unit_frame(rows, seed=seed, grouped=group is not None)
    if history is not None:
        units = _with_history(rows, units, history)
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
    if history is not None:
        notes += _history_notes(rows.with_columns(assigned), units, wanted, stratify=stratify)
    if present:
        # The linked units' "without a value" note counts rows that share nothing; it is replaced
        # (in place, or at the end when no such unit is left) by the count of the own group's nulls.
        ungrouped = f"without a `{LINKED_GROUP}` value were each treated as a group of their own."
        own_note = (f"{_rows(own_missing)} without a `{own_group}` value were each treated as a group of their "
                    "own, unless a near-duplicate cluster joined them to other rows.") if own_missing else None
        kept = []
        for note in notes:
            if ungrouped not in note:
                kept.append(note.replace(f"`{LINKED_GROUP}`", f"`{own_group}`" if own_group else "group"))
            elif own_note:
                kept.append(own_note)
                own_note = None
        notes = kept + ([own_note] if own_note else [])
    return SplitResult(assignment=assigned.alias("split"), notes=notes)


LINKED_GROUP = "_linked_group"


def linked_groups(table: pl.DataFrame, columns: Sequence[str]) -> pl.Series:
    """Per row, the connected component of "shares a non-null value in one of ``columns``".

    A component is named ``"link:" + its smallest row_id`` (string order), so the name does not
    depend on row order; a row that shares no value with another row gets null (a unit of its
    own, exactly as without links). Linear: a sparse rows-values graph and scipy's search.
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    n = table.height
    rows_parts, node_parts, offset = [], [], 0
    for k, column in enumerate(columns):  # one iteration per column
        values = table.get_column(column).cast(pl.String)
        codes = pl.DataFrame({"v": values}).select(pl.col("v").rank("dense")).to_series()
        ok = values.is_not_null().to_numpy()
        code = codes.to_numpy()[ok].astype(np.int64) - 1
        rows_parts.append(np.flatnonzero(ok))
        node_parts.append(n + offset + code)
        offset += int(code.max()) + 1 if code.size else 0
    r = np.concatenate(rows_parts)
    v = np.concatenate(node_parts)
    size = n + offset
    graph = coo_matrix((np.ones(r.size, dtype=np.int8), (r, v)), shape=(size, size))
    _, comp = connected_components(graph, directed=False)
    comp = comp[:n]
    frame = pl.DataFrame({"c": comp, "row_id": table.get_column("row_id")}).with_columns(
        pl.len().over("c").alias("n"), pl.col("row_id").min().over("c").alias("first")
    )
    return frame.select(
        pl.when(pl.col("n") > 1).then(pl.concat_str([pl.lit("link:"), pl.col("first")])).alias(LINKED_GROUP)
    ).to_series()


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


def check_split_columns(columns: Sequence[str], *, stratify: str | None, group: str | None) -> None:
    """Raise the pipeline error for a stratify or group column that ``columns`` lacks."""
    for role, column in (("stratify", stratify), ("group", group)):
        if column is not None and column not in columns:
            raise PipelineError(
                f"the {role} column `{column}` is not in the table; "
                f"the table has {', '.join(f'`{c}`' for c in columns)}.",
                key=f"split.{role}",
            )


def _check_table(table: pl.DataFrame, *, stratify: str | None, group: str | None) -> None:
    check_split_columns(table.columns, stratify=stratify, group=group)
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
    which is cut at the stratum's share of :func:`allocate_strata`; a unit goes to the split holding
    its midpoint (computed doubled, ``2 * start + size``, to stay in integers). A cut then lands at
    most half a unit away from its target, so each split is off by at most the largest unit, and a
    split with fraction 0 (an empty interval) never gets a unit. Train-only units go to train
    unallocated.

    Strata are allocated largest first, ties by the smallest unit key in the stratum: an order that
    depends on the seed and the row ids only, never on the class names (renaming invariance).

    With a split history (an ``_old`` column, see :func:`_with_history`), units that have an old
    split keep it, and only the new units are laid out: each split of a stratum gets the rows it
    lacks against the stratum's target (never fewer than 0), so the per-class counts come as close
    to the target as the kept rows allow.
    """
    if "_old" not in units.columns:
        units = units.with_columns(pl.lit(None, dtype=pl.String).alias("_old"))
    old = pl.col("_old").is_not_null()
    kept = units.filter(old).with_columns(pl.col("_old").alias("split"))
    only = units.filter(~old & pl.col("_train_only")).with_columns(pl.lit("train").alias("split"))
    free = units.filter(~old & ~pl.col("_train_only"))
    # Ties in `_key` are practically impossible (64 bits), but the unit identity breaks them so
    # the order is total and does not depend on input order.
    free = free.sort(["_stratum", "_key", "_unit_row", "_unit"])

    counted = pl.concat(
        [
            kept.filter(~pl.col("_train_only")).select("_stratum", "_size", "_key", "split"),
            free.select("_stratum", "_size", "_key", pl.lit(None, dtype=pl.String).alias("split")),
        ],
        how="vertical",
    )
    strata = (
        counted.group_by("_stratum")
        .agg(
            pl.col("_size").sum().alias("_rows"),
            pl.col("_key").min().alias("_first_key"),
            *[pl.col("_size").filter(pl.col("split") == name).sum().alias(f"_kept_{name}") for name in SPLITS],
        )
        .sort(["_rows", "_first_key"], descending=[True, False])
    )
    targets = allocate_strata([int(n) for n in strata.get_column("_rows")], wanted)
    bounds = []
    for record, target in zip(strata.iter_rows(named=True), targets):   # one iteration per class
        have = [int(record[f"_kept_{name}"]) for name in SPLITS]
        new = int(record["_rows"]) - sum(have)
        need = [max(0, t - h) for t, h in zip(target, have)]
        counts = need if sum(need) == new else (allocate(new, need) if new else [0, 0, 0])
        bounds.append((record["_stratum"], counts[0], counts[0] + counts[1]))
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
    return pl.concat([free, only, kept.select(free.columns)], how="vertical")


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


# --- stable splits across versions ---------------------------------------------------------------


def load_split_history(folder: Path, *, shown: str | None = None) -> pl.DataFrame:
    """``row_id`` and ``split`` of every row in a previous output folder's three split files.

    Raises :class:`InputError` naming the file when a split file is missing or unreadable, or
    when a row id appears in two splits (then it is not a prep output).
    """
    shown = shown or str(folder)
    parts = []
    for name in SPLITS:
        path = Path(folder) / f"{name}.parquet"
        where = f"{shown}/{name}.parquet"
        if not path.is_file():
            raise InputError(
                "the split history needs the previous output's three split files, and this one is missing.",
                file=where,
            )
        try:
            ids = pl.read_parquet(path, columns=["row_id"])
        except Exception as exc:  # polars/pyarrow errors: translated at the reading boundary
            raise InputError(
                f"cannot read the `row_id` column of this split file ({type(exc).__name__}).", file=where
            ) from exc
        parts.append(ids.select(pl.col("row_id").cast(pl.String), pl.lit(name).alias("split")))
    history = pl.concat(parts, how="vertical")
    repeated = history.height - history.get_column("row_id").n_unique()
    if repeated:
        raise InputError(f"{_rows(repeated)} of the split history appear in more than one split.", file=shown)
    return history


def _with_history(rows: pl.DataFrame, units: pl.DataFrame, history: pl.DataFrame | Path) -> pl.DataFrame:
    """Add ``_old``: the split a unit had in the previous version, or null for a new unit.

    A unit whose rows were in several splits before (possible only if the grouping changed) takes
    the split most of its old rows were in, ties in the order train, validation, test.
    """
    if not isinstance(history, pl.DataFrame):
        history = load_split_history(history)
    old = history.select(pl.col("row_id").cast(pl.String), pl.col("split").cast(pl.String).alias("_old_split"))
    ident = ["_unit_row", "_unit"]
    rank = pl.col("_old_split").replace_strict({n: i for i, n in enumerate(SPLITS)}, return_dtype=pl.UInt8)
    per_unit = (
        rows.select(*ident, "row_id")
        .join(old, on="row_id", how="inner")
        .group_by([*ident, "_old_split"])
        .agg(pl.len().alias("_n"))
        .with_columns(rank.alias("_rank"))
        .sort([*ident, "_n", "_rank"], descending=[False, False, True, False])
        .group_by(ident, maintain_order=True)
        .agg(pl.col("_old_split").first().alias("_old"))
    )
    return units.join(per_unit, on=ident, how="left", maintain_order="left")


def _history_notes(
    rows: pl.DataFrame, units: pl.DataFrame, wanted: list[float], *, stratify: str | None
) -> list[str]:
    """How a split with history went: rows kept, rows new, and the drift from the target proportions."""
    kept_units = units.filter(pl.col("_old").is_not_null()).select("_unit_row", "_unit")
    kept = rows.join(kept_units, on=["_unit_row", "_unit"], how="semi").height
    notes = [
        f"Stable split: {_rows(kept)} kept the split they had in the previous version; "
        f"{_rows(rows.height - kept)} are new and were allocated to bring each class towards its target."
    ]
    if not rows.height:
        return notes
    count_of = dict(rows.group_by("split").len().iter_rows())
    shares = ", ".join(
        f"{name} {count_of.get(name, 0) / rows.height:.1%} (target {f:.1%})" for name, f in zip(SPLITS, wanted)
    )
    notes.append(f"Stable split: the splits hold {shares} of the rows.")
    if stratify is None:
        return notes
    per_class = (
        rows.group_by("_class")
        .agg(pl.len().alias("_n"), *[(pl.col("split") == name).sum().alias(name) for name in SPLITS])
        .sort("_class", nulls_last=True)
    )
    worst = (-1.0, None, None)
    for record in per_class.iter_rows(named=True):   # one iteration per class
        for name, f in zip(SPLITS, wanted):
            off = abs(record[name] - record["_n"] * f)
            if off > worst[0] + 1e-9:
                worst = (off, record["_class"], name)
    who = f"class `{worst[1]}`" if worst[1] is not None else f"the rows without a `{stratify}` value"
    notes.append(
        f"Stable split: the largest drift of a class from its exact target is {worst[0]:.1f} rows "
        f"({who}, split `{worst[2]}`)."
    )
    return notes
