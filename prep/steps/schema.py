"""Step ``schema``: validate the table against a pandera schema kept in a YAML file.

The schema file holds a pandera polars ``DataFrameSchema`` in pandera's own
serialised form (what ``pandera.io.polars_io.serialize_schema`` produces, written as
YAML; ``schemas/tickets.yaml`` is the shipped example and :func:`dump_schema` writes
such files). The path is relative to the pipeline file.

Two kinds of failure:

- Schema-level (a required column is missing, a column has the wrong dtype, a check
  cannot run at all): the table as a whole is wrong, so the step raises
  :class:`~prep.errors.DataError` naming the schema file and the columns.
- Row-level (a value fails a check): the row goes to the ledger, reason ``schema``,
  with the failed checks as detail (``body: str_length(1, 20000)``), never the value.
  If the failing rows are more than ``max_failure_share`` of the table, the step
  raises :class:`~prep.errors.DataError` with the numbers instead: something upstream
  is wrong and setting aside that many rows would hide it.

In both cases and in the normal case the failure cases go to the extra output
``schema_failures`` with the columns of :data:`FAILURE_SCHEMA`: provenance, column and
check only, since the failing values may be personal data.

Invariants (tested): row order and all columns of the surviving rows are unchanged; a
row is either in the result or in the ledger, exactly once; the rows set aside are
exactly the rows pandera lists in its failure cases.
"""

from __future__ import annotations

import copy
import io
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandera.polars as pa
import polars as pl
from pandera.config import ValidationDepth, config_context
from pandera.errors import SchemaDefinitionError, SchemaErrors
from pandera.io import polars_io
from ruamel.yaml import YAML
from ruamel.yaml.error import YAMLError

from prep.config import ConfigValueError
from prep.errors import DataError, PipelineError
from prep.ledger import Reason
from prep.steps.base import RowPlan, StepContext
from prep.text import digest_exprs

NAME = "schema"

OUTPUT_NAME = "schema_failures"

FAILURE_SCHEMA: dict[str, pl.DataType] = {
    "row_id": pl.String(),      # null for schema-level failures
    "source": pl.String(),
    "source_row": pl.Int64(),
    "column": pl.String(),
    "check": pl.String(),
}

# pandera's check names for a column that is missing, or present but not in a strict schema.
COLUMN_NAME_CHECKS = ("column_in_dataframe", "column_in_schema")

# How many schema-level problems an error message lists before "and N more".
MAX_LISTED = 5


@dataclass(frozen=True)
class Config:
    """``schema`` settings: the schema file and the largest share of rows allowed to fail."""

    file: str
    max_failure_share: float = 0.05

    def check(self) -> None:
        if not self.file.strip():
            raise ConfigValueError("file", "must name a schema file (relative to the pipeline file)")
        if not 0.0 <= self.max_failure_share <= 1.0:
            raise ConfigValueError(
                "max_failure_share", f"must be between 0 and 1 (a share of rows), got {self.max_failure_share}"
            )


# ---------------------------------------------------------------------------------------
# Reading and writing schema files
# ---------------------------------------------------------------------------------------

def _yaml() -> YAML:
    yaml = YAML(typ="safe", pure=True)
    yaml.default_flow_style = False
    yaml.sort_base_mapping_type_on_output = False
    yaml.width = 4096  # do not fold long descriptions over several lines
    return yaml


def dump_schema(schema: pa.DataFrameSchema) -> str:
    """``schema`` as YAML text in pandera's serialised form.

    Same content as ``pandera.io.polars_io.to_yaml`` (``serialize_schema``, minimal), but
    written with ruamel.yaml, which prep already depends on, instead of PyYAML.
    """
    buf = io.StringIO()
    _yaml().dump(polars_io.serialize_schema(schema), buf)
    return buf.getvalue()


def parse_schema(serialised: Any) -> pa.DataFrameSchema:
    """A pandera polars schema from its serialised mapping (as :func:`dump_schema` writes it).

    pandera 0.35's ``deserialize_schema`` imports pandas whenever a column has both a dtype
    and a check (to convert datetime statistics), and prep does not depend on pandas. So
    the dtypes are taken out, the rest deserialised by pandera, and the dtypes put back
    with pandera's own dtype parser. Check statistics are therefore kept as written:
    checks comparing Datetime columns with a datetime value are not supported.
    """
    if not isinstance(serialised, dict):
        raise SchemaDefinitionError("the file must hold a mapping (the serialised schema)")
    serialised = dict(serialised)
    columns = serialised.get("columns")
    dtypes: dict[str, Any] = {}
    if columns is not None:
        if not isinstance(columns, dict):
            raise SchemaDefinitionError("`columns` must be a mapping of column name to column spec")
        stripped = {}
        for name, spec in columns.items():
            spec = dict(spec or {})
            if spec.get("dtype") is not None:
                dtypes[name] = spec.pop("dtype")
            stripped[name] = spec
        serialised["columns"] = stripped
    schema = polars_io.deserialize_schema(serialised)
    if dtypes:
        schema = schema.update_columns(
            {name: {"dtype": polars_io._deserialize_dtype(dtype)} for name, dtype in dtypes.items()}
        )
    return schema


def load_schema(path: Path, *, shown_as: str) -> pa.DataFrameSchema:
    """Read the schema file at ``path``; errors name it as ``shown_as`` (the path as configured)."""
    key = f"{NAME}.file"
    if not path.is_file():
        raise PipelineError(
            f"the schema file `{shown_as}` does not exist (paths are relative to the pipeline file).", key=key
        )
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise PipelineError(f"the schema file `{shown_as}` cannot be read as UTF-8 text: {exc}.", key=key) from exc
    try:
        serialised = _yaml().load(text)
    except YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark is not None else ""
        raise PipelineError(f"the schema file `{shown_as}` is not valid YAML{where}.", key=key) from exc
    try:
        return parse_schema(serialised)
    except (SchemaDefinitionError, TypeError, ValueError, KeyError, AttributeError) as exc:
        raise PipelineError(
            f"the schema file `{shown_as}` is not a pandera polars schema ({exc}).",
            key=key,
            hint="Write it with prep.steps.schema.dump_schema or pandera's to_yaml.",
        ) from exc


# ---------------------------------------------------------------------------------------
# The step
# ---------------------------------------------------------------------------------------

def failure_cases(schema: pa.DataFrameSchema, table: pl.DataFrame) -> pl.DataFrame:
    """pandera's failure cases for ``table`` (empty when it passes), validating every row.

    Validation is forced on and to full depth, whatever ``PANDERA_VALIDATION_*`` says in the
    environment: the pipeline asked for this check.
    """
    with config_context(validation_enabled=True, validation_depth=ValidationDepth.SCHEMA_AND_DATA):
        try:
            schema.validate(table, lazy=True)
        except SchemaErrors as exc:
            return exc.failure_cases
    return pl.DataFrame(schema={"column": pl.String, "check": pl.String, "index": pl.Int64})


def _describe_table_failure(column: str | None, check: str | None) -> str:
    """A schema-level failure in words, from pandera's column and check name (never a value)."""
    if check == "column_in_dataframe":
        return f"column `{column}` is missing"
    if check == "column_in_schema":
        return f"column `{column}` is not in the schema, which allows no other columns"
    if check and check.startswith("dtype("):
        wanted = check[len("dtype(") : -1].strip("'\"")   # dtype('Int64') -> Int64
        return f"column `{column}` does not have the dtype {wanted}"
    return f"column `{column}` cannot be checked with {check}"


def _pct(part: int, whole: int) -> str:
    return f"{100.0 * part / whole:.1f}%" if whole else "0.0%"


def apply(table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.DataFrame:
    """Set aside rows failing the schema's checks; raise DataError if the table as a whole fails."""
    schema = load_schema(ctx.pipeline_dir / config.file, shown_as=config.file)
    failed = _conclude(_cases(failure_cases(schema, table)), table, config, ctx)
    return table.filter(~failed)


def _cases(raw: pl.DataFrame) -> pl.DataFrame:
    """pandera's failure cases as (column, check, index); never a failing value."""
    # For "column missing" and "column not in schema" (strict) failures pandera puts the
    # schema's name in `column` and the column's name in `failure_case`: use the latter.
    # Otherwise `failure_case` is never read, since it may hold a value from the data.
    names_column = pl.col("check").is_in(list(COLUMN_NAME_CHECKS)) & pl.col("index").is_null()
    if "failure_case" in raw.columns:
        column = pl.when(names_column).then(pl.col("failure_case").cast(pl.String)).otherwise(pl.col("column"))
    else:
        column = pl.col("column")
    return raw.select(
        column.cast(pl.String).alias("column"),
        pl.col("check").cast(pl.String),
        pl.col("index").cast(pl.Int64),
    )


def _conclude(cases: pl.DataFrame, table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.Series:
    """From the failure cases of the whole table (``table`` holds its provenance columns): the
    failure-cases output, the facts, the ledger rows, and the mask of failing rows; DataError when
    the table as a whole fails or too many rows do."""
    # Schema-level failures have no row index.
    table_level = cases.filter(pl.col("index").is_null()).unique(maintain_order=True)
    row_level = (
        cases.filter(pl.col("index").is_not_null())
        .unique(maintain_order=True)
        .sort(["index", "column", "check"], maintain_order=True)
    )

    provenance = table.select(
        pl.int_range(pl.len(), dtype=pl.Int64).alias("index"),
        pl.col("row_id").cast(pl.String, strict=False),
        pl.col("source").cast(pl.String, strict=False),
        pl.col("source_row").cast(pl.Int64, strict=False),
    )
    failures = pl.concat(
        [
            table_level.select(
                pl.lit(None, pl.String).alias("row_id"),
                pl.lit(None, pl.String).alias("source"),
                pl.lit(None, pl.Int64).alias("source_row"),
                "column",
                "check",
            ),
            row_level.join(provenance, on="index", how="left", maintain_order="left").select(list(FAILURE_SCHEMA)),
        ],
        how="vertical",
    ).cast(FAILURE_SCHEMA)
    ctx.add_output(OUTPUT_NAME, failures)

    if table_level.height:
        listed = [_describe_table_failure(c, k) for c, k in table_level.select("column", "check").iter_rows()]
        more = f" and {len(listed) - MAX_LISTED} more" if len(listed) > MAX_LISTED else ""
        raise DataError(
            f"The table does not match the schema in {config.file}: {'; '.join(listed[:MAX_LISTED])}{more}. "
            f"Failure cases are in {OUTPUT_NAME}.parquet.",
            hint="Check the column mapping in the pipeline file or the schema.",
        )

    # One detail per failing row: its failed checks, sorted, e.g. "body: str_length(1, 20000)".
    per_row = (
        row_level.with_columns(pl.format("{}: {}", "column", "check").alias("what"))
        .group_by("index", maintain_order=True)
        .agg(pl.col("what").unique().sort().str.join("; ").alias("detail"))
        .sort("index")
    )
    n_rows = table.height
    n_failed = per_row.height
    ctx.report("file", config.file)
    ctx.report("rows_checked", n_rows)
    ctx.report("rows_failed", n_failed)
    ctx.report("max_failure_share", config.max_failure_share)
    ctx.report(
        "failures_by_check",
        {
            what: int(n)
            for what, n in row_level.select(pl.format("{}: {}", "column", "check").alias("what"))
            .group_by("what")
            .len()
            .sort("what")
            .iter_rows()
        },
    )

    if n_rows and n_failed / n_rows > config.max_failure_share:
        raise DataError(
            f"The schema check failed for {n_failed:,} of {n_rows:,} rows ({_pct(n_failed, n_rows)}), "
            f"above the allowed {100.0 * config.max_failure_share:.1f}%. Failure cases are in {OUTPUT_NAME}.parquet.",
            hint=f"See which checks fail there, and fix the data or the schema in {config.file}.",
        )

    failed = pl.int_range(0, n_rows, dtype=pl.Int64, eager=True).is_in(per_row.get_column("index").implode())
    ctx.set_aside(table.filter(failed), Reason.SCHEMA, detail=per_row.get_column("detail"))
    return failed


# ---------------------------------------------------------------------------------------
# The step from keys (the Dask engine; see prep.steps.base)
# ---------------------------------------------------------------------------------------

KEYED = True  # when :func:`can_key`: the Dask engine decides on the client from the keys alone

CASE_TYPE = pl.List(pl.Struct({"column": pl.String, "check": pl.String}))


def _split_schema(schema: pa.DataFrameSchema) -> tuple[pa.DataFrameSchema, list[tuple[str | None, list[str], str]]]:
    """(the schema without its uniqueness constraints: every other check looks at one row,
    the uniqueness constraints as (pandera's column label, columns, pandera's check name))."""
    element = copy.deepcopy(schema)
    uniques: list[tuple[str | None, list[str], str]] = []
    for name, column in element.columns.items():
        if column.unique:
            uniques.append((name, [name], "field_uniqueness"))
            column.unique = False
    if element.unique:
        # pandera labels these failures with the schema's name (null without one).
        uniques.append((element.name, list(element.unique), "multiple_fields_uniqueness"))
        element.unique = None
    return element, uniques


def can_key(config: Config, ctx: StepContext) -> bool:
    """Whether the keys reproduce pandera exactly: not when a uniqueness constraint compares values
    that pandera first coerces (digests are taken of the values as they are)."""
    schema = load_schema(ctx.pipeline_dir / config.file, shown_as=config.file)
    _, uniques = _split_schema(schema)
    compared = {c for _, columns, _ in uniques for c in columns}
    return not (compared and (schema.coerce or any(schema.columns[c].coerce for c in compared if c in schema.columns)))


def keys(part: pl.DataFrame, config: Config, ctx: StepContext, *, compact: bool) -> pl.DataFrame:
    """Row-local: provenance; ``_fails``, the (column, check) pairs a row fails among the checks
    that look at one row (pandera on this partition); ``_table_fails``, the failures of the
    table as a whole (the same in every partition: missing columns, dtypes), on every row; and
    per uniqueness constraint k two 64-bit digests ``_u{k}_0``, ``_u{k}_1`` of its values (nulls
    included: pandera counts equal nulls as duplicates)."""
    schema = load_schema(ctx.pipeline_dir / config.file, shown_as=config.file)
    element, uniques = _split_schema(schema)
    cases = _cases(failure_cases(element, part))
    table_level = cases.filter(pl.col("index").is_null()).unique(maintain_order=True).select("column", "check")
    per_row = (
        cases.filter(pl.col("index").is_not_null())
        .group_by("index", maintain_order=True)
        .agg(pl.struct("column", "check").alias("_fails"))
    )
    out = part.select(
        pl.col("row_id").cast(pl.String, strict=False),
        pl.col("source").cast(pl.String, strict=False),
        pl.col("source_row").cast(pl.Int64, strict=False),
        pl.int_range(pl.len(), dtype=pl.Int64).alias("index"),
    )
    out = out.join(per_row, on="index", how="left", maintain_order="left").drop("index")
    out = out.with_columns(pl.col("_fails").fill_null(pl.lit([], dtype=CASE_TYPE)).cast(CASE_TYPE))
    whole = table_level.to_dicts() if table_level.height else None
    out = out.with_columns(pl.lit(whole, dtype=CASE_TYPE).alias("_table_fails"))
    for k, (_, columns, _) in enumerate(uniques):
        if all(c in part.columns for c in columns):
            out = out.with_columns(part.select(digest_exprs(columns, f"_u{k}_")).get_columns())
    return out


def decide(keys: pl.DataFrame, config: Config, ctx: StepContext) -> RowPlan:
    """The whole table's failure cases from its :func:`keys`, then exactly what :func:`apply` does."""
    schema = load_schema(ctx.pipeline_dir / config.file, shown_as=config.file)
    _, uniques = _split_schema(schema)
    table_level = keys.get_column("_table_fails").drop_nulls().head(1).explode().struct.unnest() if keys.height else None
    parts = []
    if table_level is not None and table_level.height:
        parts.append(table_level.select("column", "check", pl.lit(None, dtype=pl.Int64).alias("index")))
    rows = keys.select(pl.int_range(pl.len(), dtype=pl.Int64).alias("index"), "_fails").explode("_fails").drop_nulls("_fails")
    parts.append(rows.select(pl.col("_fails").struct.field("column"), pl.col("_fails").struct.field("check"), "index"))
    for k, (label, _, check) in enumerate(uniques):
        digests = [f"_u{k}_0", f"_u{k}_1"]
        if all(d in keys.columns for d in digests):
            dup = keys.select(pl.int_range(pl.len(), dtype=pl.Int64).alias("index"), pl.struct(digests).is_duplicated().alias("dup"))
            parts.append(dup.filter("dup").select(
                pl.lit(label, dtype=pl.String).alias("column"), pl.lit(check, dtype=pl.String).alias("check"), "index"
            ))
    cases = pl.concat([p.cast({"column": pl.String, "check": pl.String, "index": pl.Int64}) for p in parts], how="vertical")
    failed = _conclude(cases, keys, config, ctx)
    return RowPlan(keep=~failed)
