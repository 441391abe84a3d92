"""`prep clusters OUTPUT_DIR`: the duplicate clusters of an output folder, largest first.

Reads ``duplicates.parquet`` and the three split files of a folder that ``prep run`` wrote. Texts
are taken from the splits only, so a text the pipeline redacted is shown redacted (the splits
hold what the pipeline wrote); a member that was set aside has no text in the outputs and is
shown as such. Nothing is read from the input files.
"""

from __future__ import annotations

from pathlib import Path

import polars as pl

from prep.errors import InputError

SPLITS = ("train", "validation", "test")
# Characters of each member's text shown per line (the rest is cut with an ellipsis).
TEXT_WIDTH = 70


def _read(folder: Path, name: str) -> pl.DataFrame:
    path = folder / name
    if not path.is_file():
        raise InputError(f"`{name}` not found; is this an output folder of `prep run` with a duplicate step?", file=str(folder))
    try:
        return pl.read_parquet(path)
    except Exception as exc:  # pyarrow/polars errors: translate at the boundary
        raise InputError("cannot be read as Parquet.", file=str(path)) from exc


def cluster_lines(folder: Path, text_columns: list[str] | None = None, *, limit: int = 10, kind: str | None = None) -> list[str]:
    """Lines describing the ``limit`` largest clusters (ties: lower cluster_id first)."""
    folder = Path(folder)
    dup = _read(folder, "duplicates.parquet")
    if kind is not None:
        dup = dup.filter(pl.col("kind") == kind)
    texts = []
    for name in SPLITS:
        split = _read(folder, f"{name}.parquet")
        cols = text_columns or [c for c in ("title", "body", "text") if c in split.columns]
        cols = [c for c in cols if c in split.columns]
        text = pl.concat_str([pl.col(c) for c in cols], separator=" | ", ignore_nulls=True) if cols else pl.lit(None, pl.String)
        texts.append(split.select("row_id", text.alias("_text"), pl.lit(name).alias("_split")))
    texts = pl.concat(texts)
    sizes = dup.group_by("cluster_id").agg(pl.len().alias("size"), pl.col("kind").first()).sort(
        ["size", "cluster_id"], descending=[True, False]
    )
    total = sizes.height
    lines = [f"{total} clusters ({dup.height} rows) in {folder.name}/duplicates.parquet; largest first."]
    members = dup.join(texts, on="row_id", how="left", maintain_order="left")
    for cluster_id, size, ckind in sizes.head(limit).iter_rows():  # one iteration per shown cluster
        lines.append("")
        lines.append(f"cluster {cluster_id} ({ckind}, {size} rows)")
        rows = members.filter(pl.col("cluster_id") == cluster_id)
        for r in rows.iter_rows(named=True):  # members of one shown cluster
            where = r["_split"] or "set aside"
            sim = "" if r["similarity_to_kept"] is None else f"{r['similarity_to_kept']:.2f}"
            text = r["_text"] if r["_text"] is not None else "(set aside: text not in the outputs)"
            if len(text) > TEXT_WIDTH:
                text = text[: TEXT_WIDTH - 1] + "…"
            mark = "kept" if r["kept"] else "    "
            lines.append(f"  {mark} {r['row_id']:<18} {where:<10} {sim:>5}  {str(r['label']):<18} {text}")
    if total > limit:
        lines.append("")
        lines.append(f"... {total - limit} more clusters (use --limit).")
    return lines
