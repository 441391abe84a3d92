"""What the runner asks of the near-duplicate package: the combined cluster table and the audit."""

from __future__ import annotations

from typing import Any

import polars as pl

from prep.neardup.audit import leakage_audit
from prep.neardup.search import Settings

# duplicates.parquet: one row per member of every exact and near-duplicate cluster.
DUPLICATES_SCHEMA: dict[str, pl.DataType] = {
    "cluster_id": pl.Int64(),
    "row_id": pl.String(),
    "source": pl.String(),
    "source_row": pl.Int64(),
    "kept": pl.Boolean(),
    "similarity_to_kept": pl.Float64(),
    "label": pl.String(),
    "kind": pl.String(),
}


def combine_duplicates(outputs: dict[str, pl.DataFrame]) -> None:
    """Replace the steps' ``exact_duplicate_clusters`` and ``near_duplicate_clusters`` outputs by one
    ``duplicates`` table (exact clusters first, then near ones, numbered on from them)."""
    exact = outputs.pop("exact_duplicate_clusters", None)
    near = outputs.pop("near_duplicate_clusters", None)
    if exact is None and near is None:
        return
    parts, offset = [], 0
    if exact is not None:
        parts.append(exact.with_columns(
            # An exact copy is identical to the kept row; a group set aside whole has no kept row.
            pl.when(pl.col("kept").any().over("cluster_id")).then(1.0).otherwise(None)
            .cast(pl.Float64).alias("similarity_to_kept"),
            pl.lit("exact").alias("kind"),
        ))
        offset = int(exact.get_column("cluster_id").max()) + 1 if exact.height else 0
    if near is not None:
        parts.append(near.with_columns((pl.col("cluster_id") + offset).alias("cluster_id"), pl.lit("near").alias("kind")))
    table = pl.concat([p.select(list(DUPLICATES_SCHEMA)).cast(DUPLICATES_SCHEMA) for p in parts], how="vertical")
    outputs["duplicates"] = table


def audit(pipeline: Any, splits: dict[str, pl.DataFrame]) -> dict[str, Any]:
    """The leakage audit with the settings of the pipeline's ``near_duplicates`` step, or defaults."""
    columns, settings, punctuation = list(pipeline.text), Settings(), "space"
    for spec in pipeline.steps:
        if spec.name == "near_duplicates":
            config = spec.config
            if config.columns is not None:
                columns = list(config.columns)
            settings, punctuation = config.settings(), config.punctuation
    return leakage_audit(splits, columns, settings, punctuation)


def resolve_kept_chains(ledger: pl.DataFrame) -> pl.DataFrame:
    """Point every ``kept_row_id`` at a row that is still kept.

    A row kept by ``exact_duplicates`` can later be set aside by ``near_duplicates`` as a near
    duplicate of another row; its exact copies then follow the chain to that row. Their
    similarity becomes the smallest along the chain (an exact copy of A has A's similarity to
    the new kept row, since their compared texts are equal). A chain ending at a row set aside
    without a kept row (a label conflict) is left as it is. At most a few hops (one per
    duplicate step); each hop is one join.
    """
    if ledger.height == 0 or ledger.get_column("kept_row_id").null_count() == ledger.height:
        return ledger
    hop = ledger.filter(pl.col("kept_row_id").is_not_null()).select(
        pl.col("row_id").alias("kept_row_id"), pl.col("kept_row_id").alias("_next"), pl.col("similarity").alias("_s")
    )
    for _ in range(8):  # one iteration per hop; chains are at most as long as the duplicate steps
        joined = ledger.join(hop, on="kept_row_id", how="left", maintain_order="left")
        if joined.get_column("_next").null_count() == joined.height:
            break
        ledger = joined.select(
            *[c for c in ledger.columns if c not in ("kept_row_id", "similarity")],
            pl.coalesce("_next", "kept_row_id").alias("kept_row_id"),
            pl.when(pl.col("_next").is_not_null()).then(pl.min_horizontal("similarity", "_s")).otherwise(pl.col("similarity")).alias("similarity"),
        ).select(ledger.columns)
    return ledger
