"""Step ``near_duplicates``: find rows whose texts are nearly the same, keep one per cluster.

The compared text is the configured columns (default: the text columns) joined by a space,
lowercased, punctuation turned into spaces (``punctuation: space``; or ``remove``, ``keep``) and
whitespace collapsed. Two rows are near duplicates when the Jaccard similarity of their shingle
sets (character n-grams, default n=5, or word n-grams) is at least ``threshold`` (default 0.8),
or, with ``similarity: edit``, when rapidfuzz's normalised Indel similarity is.

``method: minhash_lsh`` (default) finds candidate pairs with MinHash (``signing: one_permutation``,
the default, or ``permutations``; see :mod:`prep.neardup.minhash`) and LSH banding, b and r
chosen so that a pair exactly at the threshold becomes a candidate with probability >=
``target_recall`` (0.99), and verifies every candidate exactly: no reported pair is below the
threshold. ``method: exhaustive`` compares all pairs (at most
:data:`prep.neardup.EXHAUSTIVE_MAX_ROWS` rows). See :mod:`prep.neardup`.

Clusters are the connected components of the verified pairs. ``keep`` chooses the row kept in
each cluster: ``first`` (table order), ``earliest`` / ``latest`` by ``time_column`` (parsed as in
``exact_duplicates``; unparseable times sort last), or ``longest`` (most characters of compared
text; ties by table order). Label conflicts (a cluster whose non-null labels differ) follow
``conflicts`` exactly as in ``exact_duplicates``: ``majority``, ``set_aside`` or ``keep_first``.

``action: set_aside`` puts the other members in the ledger (``near_duplicate``, with
``kept_row_id`` and ``similarity`` = the exact similarity to the kept row, which may be below
the threshold for a member linked through others). ``action: mark`` keeps every row. Either way
the step adds a String column ``_cluster`` (null outside clusters) that the splitter treats as a
link, so a cluster never spans two splits; the runner drops ``_`` columns before writing.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import polars as pl

from prep.config import ConfigValueError
from prep.errors import DataError
from prep.ledger import Reason
from prep.neardup import EXHAUSTIVE_MAX_ROWS, Settings, find, normalise_texts, similarity_of
from prep.neardup.report import DUPLICATES_SCHEMA
from prep.neardup.search import Texts, text_digests
from prep.steps.base import RowPlan, StepContext
from prep.steps.exact_duplicates import _check_columns, _times

NAME = "near_duplicates"
CLUSTER_COLUMN = "_cluster"

# This step's clusters as duplicates.parquet holds them, less the `kind` the runner adds.
CLUSTER_SCHEMA: dict[str, pl.DataType] = {k: v for k, v in DUPLICATES_SCHEMA.items() if k != "kind"}


@dataclass(frozen=True)
class Config:
    """``near_duplicates`` settings; see the module docstring."""

    columns: list[str] | None = None
    shingles: Literal["char", "word"] = "char"
    n: int | None = None                      # default 5 for char, 3 for word
    punctuation: Literal["space", "remove", "keep"] = "space"
    threshold: float = 0.8
    permutations: int = 128
    signing: Literal["one_permutation", "permutations"] = "one_permutation"
    bands: int | None = None
    rows: int | None = None
    target_recall: float = 0.99
    method: Literal["minhash_lsh", "exhaustive"] = "minhash_lsh"
    similarity: Literal["jaccard", "edit"] = "jaccard"
    action: Literal["set_aside", "mark"] = "set_aside"
    keep: Literal["first", "earliest", "latest", "longest"] = "first"
    time_column: str | None = None
    conflicts: Literal["majority", "set_aside", "keep_first"] = "majority"

    def check(self) -> None:
        if self.columns is not None and not self.columns:
            raise ConfigValueError("columns", "must name at least one column (or be left out to use the text columns)")
        if not 0.0 < self.threshold <= 1.0:
            raise ConfigValueError("threshold", f"must be greater than 0 and at most 1, got {self.threshold}")
        if self.n is not None and self.n < 1:
            raise ConfigValueError("n", f"must be at least 1, got {self.n}")
        if self.permutations < 1:
            raise ConfigValueError("permutations", f"must be at least 1, got {self.permutations}")
        if not 0.0 < self.target_recall < 1.0:
            raise ConfigValueError("target_recall", f"must be between 0 and 1, got {self.target_recall}")
        if (self.bands is None) != (self.rows is None):
            raise ConfigValueError("bands" if self.bands is None else "rows", "pin both `bands` and `rows`, or neither")
        if self.bands is not None and self.rows is not None:
            if self.bands < 1 or self.rows < 1 or self.bands * self.rows > self.permutations:
                raise ConfigValueError(
                    "bands", f"bands x rows must be between 1 and permutations ({self.permutations}); got {self.bands} x {self.rows}"
                )
        if self.keep in ("earliest", "latest") and self.time_column is None:
            raise ConfigValueError("time_column", f"is required when `keep` is {self.keep!r}: name the column holding the time")
        if self.keep not in ("earliest", "latest") and self.time_column is not None:
            raise ConfigValueError("time_column", "is only used with `keep: earliest` or `keep: latest`; remove it")

    def settings(self) -> Settings:
        return Settings(
            threshold=self.threshold, shingles=self.shingles, n=self.n, permutations=self.permutations,
            bands=self.bands, rows=self.rows, target_recall=self.target_recall, method=self.method,
            similarity=self.similarity, signing=self.signing,
        )


def _preference(keys: pl.DataFrame, config: Config) -> np.ndarray:
    """Global order of preference for keeping (0 = most preferred), per row."""
    n = keys.height
    pos = np.arange(n)
    if config.keep == "first":
        return pos
    if config.keep == "longest":
        length = keys.get_column("_len").to_numpy()
        order = np.lexsort((pos, -length))
    else:
        times = keys.get_column("_time")
        t = times.dt.epoch("us").to_numpy()
        missing = times.is_null().to_numpy()
        t = np.where(missing, 0, t).astype(np.int64)
        key = -t if config.keep == "latest" else t
        order = np.lexsort((pos, key, missing))
    pref = np.empty(n, dtype=np.int64)
    pref[order] = pos
    return pref


def sign_ahead(part: pl.DataFrame, config: Config, text_columns: list[str]) -> tuple | None:
    """The band keys and sketches of a partition's compared texts (:func:`prep.neardup.search.sign`),
    for an engine that signs on its workers before the table reaches this step (the step then looks
    them up: the same result). None when there is nothing to sign ahead (exhaustive method, or a
    compared column not in the partition yet)."""
    from prep.neardup.search import sign

    columns = list(config.columns) if config.columns is not None else list(text_columns)
    if config.method != "minhash_lsh" or any(c not in part.columns for c in columns):
        return None
    return sign(normalise_texts(part, columns, config.punctuation), config.settings())


KEYED = True  # see prep.steps.base: the Dask engine decides on the client from the keys alone
FETCHES_TEXTS = True  # ``decide`` takes ``fetch``: the texts of the rows whose pairs it verifies


def apply(table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.DataFrame:
    """Mark near-duplicate clusters and set aside all but one row of each; see the module docstring."""
    return decide(keys(table, config, ctx, compact=False), config, ctx).carry_out(table)


def keys(table: pl.DataFrame, config: Config, ctx: StepContext, *, compact: bool) -> pl.DataFrame:
    """Row-local: provenance, two 64-bit digests of the compared text (``_d0``, ``_d1``; see
    :func:`prep.neardup.search.text_digests`), ``_nonempty``, ``_label``, what ``keep`` needs
    (``_len`` in characters, ``_time``) and, unless ``compact``, the compared text (``_text``)."""
    columns = list(config.columns) if config.columns is not None else list(ctx.text)
    _check_columns(table, columns, f"{NAME}.columns")
    _check_columns(table, [ctx.label], "label")
    if config.time_column is not None:
        _check_columns(table, [config.time_column], f"{NAME}.time_column")
    texts = normalise_texts(table, columns, config.punctuation).fill_null("")
    out = table.select("row_id", "source", "source_row", pl.col(ctx.label).cast(pl.String).alias("_label"))
    out = out.with_columns(*text_digests(texts).get_columns(), (texts.str.len_bytes() > 0).alias("_nonempty"))
    if config.keep == "longest":
        out = out.with_columns(texts.str.len_chars().alias("_len"))
    if config.time_column is not None:
        out = out.with_columns(_times(table, config.time_column).alias("_time"))
    return out if compact else out.with_columns(texts.alias("_text"))


def fetch_texts(part: pl.DataFrame, config: Config, ctx: StepContext, rows) -> pl.Series:
    """The compared texts of ``rows`` (positions in ``part``), as :func:`keys` sees them."""
    columns = list(config.columns) if config.columns is not None else list(ctx.text)
    return normalise_texts(part[rows], columns, config.punctuation).fill_null("")


def decide(keys: pl.DataFrame, config: Config, ctx: StepContext, fetch=None) -> RowPlan:
    """The whole table's decision from its :func:`keys`: ledger rows, cluster table, facts, the
    ``_cluster`` column. ``fetch(rows)`` gives the compared texts of the given rows (positions)
    when ``keys`` does not hold them (``compact``): only rows in pairs verified exactly are fetched."""
    columns = list(config.columns) if config.columns is not None else list(ctx.text)
    table = keys  # provenance for the ledger and the cluster table
    if config.method == "exhaustive" and keys.height > EXHAUSTIVE_MAX_ROWS:
        raise DataError(
            f"`{NAME}.method: exhaustive` compares all pairs and accepts at most {EXHAUSTIVE_MAX_ROWS:,} rows; "
            f"the table has {keys.height:,}. Use `method: minhash_lsh`."
        )
    digests = keys.select("_d0", "_d1")
    nonempty = keys.get_column("_nonempty").to_numpy()
    if "_text" in keys.columns:
        texts = Texts(digests, nonempty, keys.get_column("_text").gather)
    else:
        texts = Texts(digests, nonempty, fetch)
    settings = config.settings()
    # Band keys signed ahead (the Dask engine signs on the workers) are looked up; the runner's
    # audit then reuses this search's keys and pairs.
    found = find(texts, settings, reuse_keys=True, remember_keys=True)
    cluster = found.cluster
    in_cluster = cluster >= 0

    labels = keys.get_column("_label")
    pref = _preference(keys, config)
    work = pl.DataFrame({
        "_pos": np.arange(table.height, dtype=np.int64),
        "_c": cluster,
        "_label": labels,
        "_pref": pref,
    }).filter(pl.col("_c") >= 0)

    g = "_c"
    n_labels = pl.col("_label").drop_nulls().n_unique().over(g)
    label_count = pl.when(pl.col("_label").is_not_null()).then(pl.len().over([g, "_label"]))
    work = work.with_columns((n_labels > 1).alias("_conflict"), label_count.alias("_lc")).with_columns(
        pl.col("_lc").max().over(g).alias("_top")
    )
    n_top = pl.when(pl.col("_lc") == pl.col("_top")).then(pl.col("_label")).drop_nulls().n_unique().over(g)
    work = work.with_columns((pl.col("_conflict") & (n_top > 1)).alias("_tied"))
    if config.conflicts == "majority":
        candidate = pl.col("_lc") == pl.col("_top")
        whole_aside = pl.col("_tied")
    else:
        candidate = pl.col("_label").is_not_null()
        whole_aside = pl.col("_conflict") if config.conflicts == "set_aside" else pl.lit(False)
    candidate = pl.when(pl.col("_top").is_null()).then(True).otherwise(candidate.fill_null(False))
    work = work.with_columns(
        pl.when(candidate).then(pl.col("_pref")).min().over(g).alias("_kept_pref"),
        whole_aside.alias("_aside_conflict"),
    ).with_columns(
        pl.col("_pos").filter(pl.col("_pref") == pl.col("_kept_pref")).first().over(g).alias("_kept_pos"),
    ).with_columns(
        (~pl.col("_aside_conflict") & (pl.col("_pos") == pl.col("_kept_pos"))).alias("_kept"),
    ).sort("_pos")

    members = work.get_column("_pos").to_numpy()
    kept_pos = work.get_column("_kept_pos").to_numpy()
    others = members != kept_pos
    sim = np.ones(members.size, dtype=np.float64)
    sim[others] = similarity_of(found, texts, members[others], kept_pos[others], settings)
    work = work.with_columns(pl.Series("_sim", sim))

    row_ids = table.get_column("row_id")
    aside_dup = (~work.get_column("_kept") & ~work.get_column("_aside_conflict")).to_numpy()
    aside_conflict = work.get_column("_aside_conflict").to_numpy()
    keep_mask = np.ones(table.height, dtype=bool)
    if config.action == "set_aside":
        dup_pos = members[aside_dup]
        what = "Jaccard similarity of shingle sets" if config.similarity == "jaccard" else "edit similarity"
        ctx.set_aside(
            table[dup_pos],
            Reason.NEAR_DUPLICATE,
            detail=f"near duplicate of the kept row ({what} >= {config.threshold:g} through its cluster)",
            kept_row_id=row_ids.gather(kept_pos[aside_dup]),
            similarity=pl.Series(sim[aside_dup]),
        )
        conflict_pos = members[aside_conflict]
        ctx.set_aside(
            table[conflict_pos],
            Reason.LABEL_CONFLICT,
            detail="near-duplicate cluster with different labels"
            + (", tied labels: no majority" if config.conflicts == "majority" else ""),
        )
        keep_mask[dup_pos] = False
        keep_mask[conflict_pos] = False

    # Cluster table for duplicates.parquet (members in table order).
    clusters = pl.DataFrame({
        "cluster_id": work.get_column("_c"),
        "row_id": row_ids.gather(members),
        "source": table.get_column("source").gather(members),
        "source_row": table.get_column("source_row").gather(members),
        "kept": work.get_column("_kept"),
        "similarity_to_kept": pl.Series(np.where(aside_conflict, np.nan, sim)).fill_nan(None),
        "label": work.get_column("_label"),
    }).cast(CLUSTER_SCHEMA)
    ctx.add_output("near_duplicate_clusters", clusters)

    # Facts (counts only).
    per_cluster = work.group_by("_c").agg(pl.len().alias("size"), pl.col("_conflict").first())
    sizes = per_cluster.group_by("size").len().sort("size")
    facts = dict(found.facts)
    facts.pop("similarity", None)
    ctx.report("method", facts["method"])
    ctx.report("columns", columns)
    ctx.report("shingles", facts["shingles"])
    ctx.report("punctuation", config.punctuation)
    ctx.report("similarity", config.similarity)
    ctx.report("threshold", config.threshold)
    if config.method == "minhash_lsh":
        for key in ("permutations", "signing", "bands", "rows", "expected_recall_at_threshold", "large_buckets"):
            ctx.report(key, facts[key])
    ctx.report("candidates", facts["candidates"])
    ctx.report("verified_pairs", facts["verified_pairs"] + facts["identical_copies"])
    ctx.report("clusters", per_cluster.height)
    ctx.report("rows_in_clusters", int(in_cluster.sum()))
    ctx.report("rows_set_aside", int((~keep_mask).sum()))
    ctx.report("label_conflicts", int(per_cluster.get_column("_conflict").sum()) if per_cluster.height else 0)
    ctx.report("cluster_sizes", [{"size": int(s), "clusters": int(c)} for s, c in sizes.iter_rows()])
    ctx.report("action", config.action)
    ctx.report("keep", config.keep)
    ctx.report("conflicts", config.conflicts)

    c = pl.Series("c", cluster)
    cluster_col = pl.select(
        pl.when(c >= 0).then(pl.concat_str([pl.lit("near:"), c.cast(pl.String)])).alias(CLUSTER_COLUMN)
    ).to_series()
    return RowPlan(keep=pl.Series(keep_mask) if config.action == "set_aside" else None, columns=(cluster_col,))
