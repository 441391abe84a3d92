"""The command line: exit codes 0/1/2, one-line messages, no traceback unless --debug."""

from __future__ import annotations

from pathlib import Path

import polars as pl

from prep.cli import cli


def invoke(runner, *args):
    return runner.invoke(cli, [str(a) for a in args], catch_exceptions=False)


def test_run_ok_prints_accounting_line(cli_runner, small_pipeline):
    result = invoke(cli_runner, "run", small_pipeline)
    assert result.exit_code == 0, result.output
    last = result.stdout.strip().splitlines()[-1]
    assert last.startswith("rows read ")
    out = small_pipeline.parent / "out"
    for name in ("train", "validation", "test", "set_aside"):
        assert (out / f"{name}.parquet").is_file()
    assert (out / "card.json").is_file() and (out / "card.md").is_file() and (out / "manifest.json").is_file()
    # The line's numbers add up and match the files.
    n = {name: pl.read_parquet(out / f"{name}.parquet").height for name in ("train", "validation", "test", "set_aside")}
    assert last == (
        f"rows read {sum(n.values()):,} = train {n['train']:,} + validation {n['validation']:,} + "
        f"test {n['test']:,} + set aside {n['set_aside']:,}"
    )


def test_quiet_prints_only_the_accounting_line(cli_runner, small_pipeline):
    result = invoke(cli_runner, "run", small_pipeline, "--quiet")
    assert result.exit_code == 0
    assert result.stderr == ""
    assert result.stdout.count("\n") == 1 and result.stdout.startswith("rows read ")


def test_out_overrides_output(cli_runner, small_pipeline, tmp_path):
    target = tmp_path / "elsewhere"
    result = invoke(cli_runner, "run", small_pipeline, "--out", target, "-q")
    assert result.exit_code == 0
    assert (target / "manifest.json").is_file()
    assert not (small_pipeline.parent / "out").exists()


def test_unknown_key_exit_2_names_key_and_line(cli_runner, small_pipeline):
    text = small_pipeline.read_text().replace("dataset: small\n", "dataset: small\ncolour: blue\n")
    small_pipeline.write_text(text)
    result = invoke(cli_runner, "run", small_pipeline)
    assert result.exit_code == 2
    assert result.stderr.strip() == (
        f"Error: {small_pipeline}, line 2: `colour`: unknown key (known keys: about, dataset, description, engine, label, "
        "on_unreadable, output, sources, split, steps, text)."
    )
    assert "Traceback" not in result.output


def test_missing_pipeline_file_exit_2(cli_runner, tmp_path):
    result = invoke(cli_runner, "check", tmp_path / "nope.yaml")
    assert result.exit_code == 2
    assert result.stderr.strip() == f"Error: {tmp_path / 'nope.yaml'}: pipeline file not found."


def test_missing_column_exit_2(cli_runner, small_pipeline):
    text = small_pipeline.read_text().replace("body: Text,", "body: Txt,")
    small_pipeline.write_text(text)
    for command in ("check", "run"):
        result = invoke(cli_runner, command, small_pipeline)
        assert result.exit_code == 2, command
        assert "`sources[0].columns.body`: column `Txt` is not in `desk.csv`" in result.stderr


def test_check_ok(cli_runner, small_pipeline):
    result = invoke(cli_runner, "check", small_pipeline)
    assert result.exit_code == 0
    assert result.stdout.strip().endswith("ok (2 sources, 4 steps)")


def test_schema_failure_exit_1_keeps_previous_output(cli_runner, small_pipeline):
    assert invoke(cli_runner, "run", small_pipeline, "-q").exit_code == 0
    out = small_pipeline.parent / "out"
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    schema = small_pipeline.parent / "strict.yaml"
    # A schema that every row fails: bodies must be at least 500 characters.
    import pandera.polars as pa
    from pandera.io import polars_io

    spec = pa.DataFrameSchema({"body": pa.Column(str, pa.Check.str_length(min_value=500), nullable=True)})
    schema.write_text(polars_io.to_yaml(spec))
    text = small_pipeline.read_text().replace(
        "  - rare_classes: {}\n", "  - rare_classes: {}\n  - schema: {file: strict.yaml, max_failure_share: 0.1}\n"
    )
    small_pipeline.write_text(text)
    result = invoke(cli_runner, "run", small_pipeline)
    assert result.exit_code == 1
    assert result.stderr.strip().splitlines()[-1].startswith("Error: ")
    assert "Traceback" not in result.output
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert (small_pipeline.parent / "out.schema_failures.parquet").is_file()


def test_non_prep_output_folder_refused(cli_runner, small_pipeline):
    out = small_pipeline.parent / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    result = invoke(cli_runner, "run", small_pipeline)
    assert result.exit_code == 1
    assert "not written by prep" in result.stderr
    assert (out / "notes.txt").read_text() == "mine"


def test_debug_shows_traceback(cli_runner, tmp_path):
    result = invoke(cli_runner, "run", tmp_path / "nope.yaml", "--debug")
    assert result.exit_code == 2
    assert "Traceback" in result.stderr


def test_python_dash_m(tmp_path):
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-m", "prep", "--version"], capture_output=True, text=True)
    assert done.returncode == 0 and done.stdout.startswith("prep, version ")
