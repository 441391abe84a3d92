"""Tests for the ``schema`` step and the shipped ``schemas/tickets.yaml``.

Reference: pandera's own lazy validation (``SchemaErrors.failure_cases``) run directly
in the test; the step must set aside exactly the rows pandera lists, with the checks
pandera names. Schema files are written into ``tmp_path``.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pandera.polars as pa
import polars as pl
import pytest
from pandera.config import ValidationDepth, config_context
from polars.testing import assert_frame_equal

from prep.config import ConfigError, build
from prep.errors import DataError, PipelineError
from prep.steps.schema import FAILURE_SCHEMA, NAME, OUTPUT_NAME, Config, apply, dump_schema, load_schema

REPO = Path(__file__).resolve().parents[2]


def small_schema() -> pa.DataFrameSchema:
    return pa.DataFrameSchema(
        {
            "row_id": pa.Column(pl.String, unique=True),
            "source_row": pa.Column(pl.Int64, checks=[pa.Check.ge(0)]),
            "body": pa.Column(pl.String, checks=[pa.Check.str_length(5, 40)]),
            "label": pa.Column(pl.String, nullable=True, checks=[pa.Check.str_length(min_value=1)]),
        },
        name="small",
    )


def write_schema(folder: Path, schema: pa.DataFrameSchema, name: str = "small.yaml") -> str:
    (folder / name).write_text(dump_schema(schema), encoding="utf-8")
    return name


def run(table, ctx, **config):
    return apply(table, build(Config, config, "schema"), ctx)


def pandera_failing_rows(schema: pa.DataFrameSchema, table: pl.DataFrame) -> dict[int, set[str]]:
    """Reference: row index -> {"column: check"} straight from pandera's failure cases."""
    try:
        schema.validate(table, lazy=True)
    except pa.errors.SchemaErrors as exc:
        out: dict[int, set[str]] = {}
        for column, check, index in exc.failure_cases.select("column", "check", "index").iter_rows():
            assert index is not None, "the reference expects row-level failures only"
            out.setdefault(index, set()).add(f"{column}: {check}")
        return out
    return {}


def assert_accounted(table: pl.DataFrame, result: pl.DataFrame, ledger: pl.DataFrame) -> None:
    ids = table.get_column("row_id").to_list()
    out_ids = result.get_column("row_id").to_list()
    led_ids = ledger.get_column("row_id").to_list()
    assert sorted(out_ids + led_ids) == sorted(ids)
    assert len(set(out_ids + led_ids)) == len(ids)


BODIES = [
    "Die App stürzt beim Entsperren ab.",     # ok
    "kurz",                                   # too short (4 < 5)
    None,                                     # body not nullable
    "Réclamation: facture en double, merci.",  # ok, non-ASCII
    "x" * 41,                                 # too long
    "",                                       # too short
    "Refund for ride 42 please",              # ok
    "Need help with my account",              # ok
]
LABELS = ["app", "billing", "", None, "damage", "app", "billing", "account"]


@pytest.fixture
def table(make_table):
    return make_table([{"body": b, "label": lab, "secret": "someone@example.com"} for b, lab in zip(BODIES, LABELS)])


def test_failing_rows_match_pandera_and_go_to_the_ledger(table, make_ctx):
    ctx = make_ctx(NAME)
    file = write_schema(ctx.pipeline_dir, small_schema())
    result = run(table, ctx, file=file, max_failure_share=0.8)

    # Reference: pandera's failure cases, computed here directly.
    expected_rows = pandera_failing_rows(small_schema(), table)
    assert sorted(expected_rows) == [1, 2, 4, 5]
    assert_frame_equal(result, table.filter(~pl.int_range(pl.len()).is_in(list(expected_rows))))

    ledger = ctx.ledger.frame()
    assert ledger.get_column("row_id").to_list() == [f"t:{i}" for i in sorted(expected_rows)]
    assert set(ledger.get_column("reason").to_list()) == {"schema"}
    assert ledger.get_column("detail").to_list() == [
        "; ".join(sorted(expected_rows[i])) for i in sorted(expected_rows)
    ]
    # The check names as pandera prints them, e.g. for the short body.
    assert ledger.get_column("detail").to_list()[0] == "body: str_length(5, 40)"
    assert "body: not_nullable" in ledger.get_column("detail").to_list()[1]
    assert ctx.facts["rows_failed"] == 4 and ctx.facts["rows_checked"] == 8
    assert_accounted(table, result, ledger)


def test_ledger_detail_and_failure_output_hold_no_values(table, make_ctx):
    ctx = make_ctx(NAME)
    file = write_schema(ctx.pipeline_dir, small_schema())
    run(table, ctx, file=file, max_failure_share=0.8)
    failures = ctx.outputs[OUTPUT_NAME]
    assert failures.schema == pl.Schema(FAILURE_SCHEMA)
    text = failures.write_csv() + ctx.ledger.frame().write_csv()
    for value in ("kurz", "x" * 41, "Die App", "example.com"):
        assert value not in text
    # One failure-case row per (row, column, check), in table order; reference: pandera.
    reference = pandera_failing_rows(small_schema(), table)
    expected = sorted((f"t:{i}", what) for i, whats in reference.items() for what in whats)
    got = [(r, f"{c}: {k}") for r, c, k in failures.select("row_id", "column", "check").iter_rows()]
    assert got == expected


def test_two_failures_on_one_row_are_both_named(make_table, make_ctx):
    table = make_table([{"body": "tiny", "label": ""}, {"body": "long enough", "label": "ok"}])
    ctx = make_ctx(NAME)
    file = write_schema(ctx.pipeline_dir, small_schema())
    run(table, ctx, file=file, max_failure_share=1.0)
    assert ctx.ledger.frame().get_column("detail").to_list() == [
        "body: str_length(5, 40); label: str_length(1, None)"
    ]


def test_duplicate_row_ids_fail_uniqueness(make_table, make_ctx):
    table = make_table([{"body": "fine body"}] * 3).with_columns(
        pl.Series("row_id", ["a", "b", "a"]), pl.lit("x").alias("label")
    )
    ctx = make_ctx(NAME)
    file = write_schema(ctx.pipeline_dir, small_schema())
    result = run(table, ctx, file=file, max_failure_share=1.0)
    # pandera reports every copy of a duplicated value (reference: its failure cases).
    assert sorted(pandera_failing_rows(small_schema(), table)) == [0, 2]
    assert result.get_column("source_row").to_list() == [1]


@pytest.mark.parametrize(("share", "raises"), [(0.5, False), (0.49, True)])
def test_share_threshold(table, make_ctx, share, raises):
    # 4 of 8 rows fail: 50% is allowed by 0.5 (not above), refused by 0.49.
    ctx = make_ctx(NAME)
    file = write_schema(ctx.pipeline_dir, small_schema())
    if not raises:
        assert run(table, ctx, file=file, max_failure_share=share).height == 4
        return
    with pytest.raises(DataError) as err:
        run(table, ctx, file=file, max_failure_share=share)
    assert str(err.value).startswith(
        "The schema check failed for 4 of 8 rows (50.0%), above the allowed 49.0%. "
        "Failure cases are in schema_failures.parquet."
    )
    assert len(ctx.ledger) == 0
    reference = pandera_failing_rows(small_schema(), table)
    assert ctx.outputs[OUTPUT_NAME].height == sum(len(v) for v in reference.values())

def test_share_message_uses_thousands_separators(make_table, make_ctx):
    table = make_table([{"body": "tiny" if i % 7 == 0 else "long enough", "label": "a"} for i in range(2950)])
    ctx = make_ctx(NAME)
    file = write_schema(ctx.pipeline_dir, small_schema())
    with pytest.raises(DataError, match=r"failed for 422 of 2,950 rows \(14\.3%\), above the allowed 5\.0%"):
        run(table, ctx, file=file)


@pytest.mark.parametrize(
    ("change", "column"),
    [
        (lambda t: t.drop("body"), "body"),                                  # a column is missing
        (lambda t: t.with_columns(pl.col("source_row").cast(pl.String)), "source_row"),  # wrong dtype
    ],
)
def test_schema_level_failure_raises_naming_file_and_column(table, make_ctx, change, column):
    ctx = make_ctx(NAME)
    file = write_schema(ctx.pipeline_dir, small_schema())
    with pytest.raises(DataError) as err:
        run(change(table), ctx, file=file, max_failure_share=1.0)
    message = str(err.value)
    assert "small.yaml" in message and f"`{column}`" in message
    assert "example.com" not in message
    assert len(ctx.ledger) == 0


def test_validation_is_forced_to_full_depth(table, make_ctx):
    ctx = make_ctx(NAME)
    file = write_schema(ctx.pipeline_dir, small_schema())
    with config_context(validation_depth=ValidationDepth.SCHEMA_ONLY):
        run(table, ctx, file=file, max_failure_share=1.0)
    assert len(ctx.ledger) == 4


def test_schema_file_errors(table, make_ctx):
    ctx = make_ctx(NAME)
    with pytest.raises(PipelineError, match="does not exist"):
        run(table, ctx, file="nope.yaml")
    (ctx.pipeline_dir / "bad.yaml").write_text("columns: [unclosed\n", encoding="utf-8")
    with pytest.raises(PipelineError, match="not valid YAML"):
        run(table, ctx, file="bad.yaml")
    (ctx.pipeline_dir / "pandas.yaml").write_text("schema_type: dataframe\ncolumns: {}\n", encoding="utf-8")
    with pytest.raises(PipelineError, match="not a pandera polars schema"):
        run(table, ctx, file="pandas.yaml")


def test_path_is_relative_to_the_pipeline_dir(table, make_ctx, tmp_path):
    (tmp_path / "schemas").mkdir()
    write_schema(tmp_path / "schemas", small_schema())
    (tmp_path / "demo").mkdir()
    ctx = make_ctx(NAME)
    # Set after creation: make_ctx(..., pipeline_dir=...) collides with the fixture's own
    # pipeline_dir argument (reported to the conftest's author).
    ctx.pipeline_dir = tmp_path / "demo"
    run(table, ctx, file="../schemas/small.yaml", max_failure_share=1.0)
    assert ctx.facts["file"] == "../schemas/small.yaml"


def test_yaml_round_trip_keeps_the_schema(tmp_path):
    # Reference: the pandera schema object itself; a changed schema must compare unequal,
    # so the equality below can fail.
    path = tmp_path / "s.yaml"
    path.write_text(dump_schema(small_schema()), encoding="utf-8")
    loaded = load_schema(path, shown_as="s.yaml")
    assert loaded == small_schema()
    changed = small_schema().update_column("body", checks=[pa.Check.str_length(5, 41)])
    assert loaded != changed


def test_config_checks():
    assert build(Config, {"file": "s.yaml"}, "x") == Config(file="s.yaml", max_failure_share=0.05)
    with pytest.raises(ConfigError):
        build(Config, {}, "x")
    for bad in (-0.1, 1.5):
        with pytest.raises(ConfigError) as err:
            build(Config, {"file": "s.yaml", "max_failure_share": bad}, "steps[2].schema")
        assert err.value.path == "steps[2].schema.max_failure_share"


# ---------------------------------------------------------------------------------------
# The shipped schemas/tickets.yaml
# ---------------------------------------------------------------------------------------

def _generator():
    spec = importlib.util.spec_from_file_location("make_tickets_schema", REPO / "schemas" / "make_tickets_schema.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_tickets_yaml_is_the_generated_file():
    gen = _generator()
    committed = (REPO / "schemas" / "tickets.yaml").read_text(encoding="utf-8")
    assert committed == gen.HEADER + dump_schema(gen.tickets_schema())
    assert load_schema(REPO / "schemas" / "tickets.yaml", shown_as="tickets.yaml") == gen.tickets_schema()


def test_tickets_schema_on_a_canonical_table(make_table, make_ctx):
    rows = [
        {"ticket_id": "D-1", "title": "Dock 7 won't release", "body": "The bike is stuck.", "label": "dock",
         "opened": "2025-03-04 10:22"},
        {"ticket_id": None, "title": None, "body": "Cobro doble en mi tarjeta.", "label": "billing", "opened": None},
        {"ticket_id": "D-3", "title": "Leer", "body": "", "label": "app", "opened": None},        # empty body
        {"ticket_id": "D-4", "title": "x", "body": "Hallo", "label": None, "opened": None},        # no label
    ]
    table = make_table(rows)   # no customer/channel: optional columns
    ctx = make_ctx(NAME)
    ctx.pipeline_dir = REPO   # see test_path_is_relative_to_the_pipeline_dir
    result = run(table, ctx, file="schemas/tickets.yaml", max_failure_share=0.5)
    assert result.get_column("row_id").to_list() == ["t:0", "t:1"]
    assert ctx.ledger.frame().get_column("detail").to_list() == [
        "body: str_length(1, 20000)",
        "label: not_nullable",
    ]
