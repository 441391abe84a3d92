"""`prep check`: the pipeline file is valid and every mapped column exists, reading headers only."""

from __future__ import annotations

from prep.errors import PipelineError
from prep.pipeline import Pipeline


def check_sources(pipeline: Pipeline) -> list[str]:
    """One line per source saying what was found; raises PipelineError for a missing column."""
    from prep.read import read_columns

    lines = []
    for i, source in enumerate(pipeline.sources):
        columns = read_columns(source)
        present = set(columns)
        for canon, column in source.columns.items():
            if column not in present:
                have = ", ".join(f"`{c}`" for c in columns)
                raise PipelineError(
                    f"column `{column}` is not in `{source.path_text}` (its columns: {have}).",
                    file=str(pipeline.path),
                    key=f"sources[{i}].columns.{canon}",
                )
        lines.append(f"  source {source.name}: {source.path_text} ({source.format}), {len(source.columns)} of {len(columns)} columns mapped")
    return lines
