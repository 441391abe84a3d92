"""`prep check`: the pipeline file is valid and every mapped column exists, reading headers only."""

from __future__ import annotations

from prep.errors import PipelineError
from prep.pipeline import Pipeline, Source


def require_columns(pipeline: Pipeline, index: int, source: Source, names: list[str]) -> None:
    """Raise the one error for a mapped column that the file does not have (used by run and check)."""
    from prep.read.names import column_hint, describe_columns, shown_name

    present = set(names)
    for canon, column in source.columns.items():
        if column not in present:
            raise PipelineError(
                f"column {shown_name(column)} is not in `{source.path_text}` (its columns: {describe_columns(names)}).",
                file=str(pipeline.path),
                key=f"sources[{index}].columns.{canon}",
                hint=column_hint(names, column, file_format=source.format),
            )


def check_sources(pipeline: Pipeline) -> list[str]:
    """One line per source saying what was found; raises PipelineError for a missing column."""
    from prep.read import read_columns

    lines = []
    for i, source in enumerate(pipeline.sources):
        columns = read_columns(source)
        require_columns(pipeline, i, source, columns)
        lines.append(f"  source {source.name}: {source.path_text} ({source.format}), {len(source.columns)} of {len(columns)} columns mapped")
    return lines
