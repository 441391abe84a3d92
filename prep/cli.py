"""The `prep` command line. Thin: parse, call the library, print, map errors to exit codes.

Exit codes: 0 success; 1 a data problem or failed run; 2 a pipeline-file or usage error.
Errors print one line to stderr (``Error: …``); ``--debug`` adds the traceback and its cause.
"""

from __future__ import annotations

import sys
import traceback
from pathlib import Path
from typing import Any

import click

from prep import __version__
from prep.errors import PipelineError, PrepError


def _fail(exc: BaseException, debug: bool, code: int) -> None:
    if debug:
        traceback.print_exception(exc, file=sys.stderr)
    # An unexpected error's own text may quote data values or absolute paths: only --debug shows it.
    message = str(exc) if isinstance(exc, PrepError) else f"unexpected {type(exc).__name__} (details with --debug)."
    click.echo(f"Error: {message}", err=True)
    if not debug and not isinstance(exc, PrepError):
        click.echo("This is probably a bug in prep; run again with --debug to see the traceback.", err=True)
    sys.exit(code)


def _guard(debug: bool, fn, *args, **kwargs):
    try:
        return fn(*args, **kwargs)
    except PrepError as exc:
        _fail(exc, debug, exc.exit_code)
    except KeyboardInterrupt:
        click.echo("Interrupted; the previous output folder is unchanged.", err=True)
        sys.exit(130)
    except Exception as exc:  # anything else is a bug: one line, traceback with --debug
        _fail(exc, debug, 1)


class _Printer:
    """Prints progress lines to stderr as the runner reports them."""

    def __init__(self, quiet: bool) -> None:
        self.quiet = quiet

    def __call__(self, event: str, **data: Any) -> None:
        if self.quiet:
            return
        if event == "engine":
            click.echo(f"  engine {data['description']}", err=True)
        elif event == "read":
            extra = f" ({data['unreadable']:,} unreadable)" if data["unreadable"] else ""
            line = f"  read   {data['source']:<22} {data['rows']:>10,} rows{extra}"
            click.echo(f"{line:<66} {data['seconds']:7.2f} s", err=True)
        elif event == "step":
            line = f"  step   {data['step']:<22} {data['rows_in']:>10,} -> {data['rows_out']:,}"
            click.echo(f"{line:<66} {data['seconds']:7.2f} s", err=True)
        elif event == "split":
            rows = data["rows"]
            line = "  split  " + ", ".join(f"{k} {v:,}" for k, v in rows.items())
            click.echo(f"{line:<66} {data['seconds']:7.2f} s", err=True)
        elif event == "written":
            click.echo(f"  wrote  {data['output']}", err=True)


debug_option = click.option("--debug", is_flag=True, help="Show the full traceback and cause of an error.")


class _PathOrUrl(click.Path):
    """A local path (checked and converted as click.Path does) or an fsspec URL, kept as the string given."""

    def convert(self, value: Any, param: Any, ctx: Any) -> Any:
        from prep.read.urls import is_url

        return value if is_url(value) else super().convert(value, param, ctx)


def _local_only(value: Any, command: str, debug: bool) -> Path:
    """`prep clusters`, `card` and `compare` read and write local folders only: one line for a URL."""
    from prep.read.urls import is_url, shown_url

    if is_url(value):
        _fail(PipelineError(
            f"`prep {command}` works on a local output folder only, not on `{shown_url(value)}`; "
            "copy the folder to this machine first (e.g. with your storage's own command-line tool)."
        ), debug, 2)
    return value


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="prep")
def cli() -> None:
    """Turn raw ticket exports into clean, reproducible train/validation/test splits.

    A pipeline file (YAML) names the sources, the cleaning steps and the split; `prep run`
    writes Parquet splits, a ledger of every row set aside and why, and a data card.
    """


@cli.command()
@click.argument("pipeline", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out", type=_PathOrUrl(file_okay=False, path_type=Path), metavar="DIRECTORY|URL",
              help="Output folder (relative to the current folder) or fsspec URL such as s3://bucket/out "
              "(overrides `output` in the pipeline file, which is relative to the pipeline file).")
@click.option("--quiet", "-q", is_flag=True, help="Print only the final accounting line.")
@click.option(
    "--force",
    is_flag=True,
    help="Replace the output folder even if it is not empty and prep did not write it (everything in it is deleted). "
    "A folder holding an input file, the pipeline file or the current folder is refused even then.",
)
@click.option(
    "--engine",
    type=click.Choice(["local", "dask"]),
    default=None,
    help="local: one process (the default); dask: the row-local steps and the near-duplicate signing run per "
    "partition on a Dask cluster, and the duplicate, schema and rare-class steps and the split decide from keys "
    'the workers send (needs the `dask` extra: pip install "prep[dask]", or pip install -e ".[dask]" in a clone). '
    "Overrides `engine` in the pipeline file.",
)
@click.option(
    "--scheduler",
    metavar="ADDRESS",
    default=None,
    help="With --engine dask (or `engine: dask` in the pipeline file): the address of a running Dask scheduler "
    "(tcp://host:8786); without it a local cluster is started and closed again.",
)
@debug_option
def run(
    pipeline: Path, out: Path | None, quiet: bool, force: bool, engine: str | None, scheduler: str | None, debug: bool
) -> None:
    """Run PIPELINE end to end and write the outputs.

    Ends with the accounting line: rows read = train + validation + test + set aside.
    Exit codes: 0 ok, 1 data problem, 2 pipeline-file or usage error.
    """
    from prep.pipeline import load_pipeline
    from prep.run import run_pipeline

    loaded = _guard(debug, load_pipeline, pipeline)
    if not quiet:
        click.echo(f"prep {__version__}: {loaded.dataset} ({pipeline})", err=True)
    if scheduler is not None and not scheduler.strip():
        _fail(PipelineError("--scheduler needs an address such as tcp://host:8786."), debug, 2)
    if scheduler is not None and (engine or loaded.engine.name) != "dask":
        _fail(PipelineError("--scheduler needs the Dask engine: add --engine dask."), debug, 2)
    result = _guard(
        debug, run_pipeline, loaded, out=out, report=_Printer(quiet), force=force, engine=engine, scheduler=scheduler
    )
    if not quiet:
        click.echo(f"  done in {result.seconds:.1f} s", err=True)
    click.echo(result.accounting_line())


@cli.command()
@click.argument("pipeline", type=click.Path(dir_okay=False, path_type=Path))
@debug_option
def check(pipeline: Path, debug: bool) -> None:
    """Validate PIPELINE and the columns of every source, without running.

    Reads only file headers (or Parquet schemas). Exit 0 if the run could start, 2 otherwise.
    """
    from prep.pipeline import load_pipeline
    from prep.check import check_sources

    loaded = _guard(debug, load_pipeline, pipeline)
    lines = _guard(debug, check_sources, loaded)
    for line in lines:
        click.echo(line)
    click.echo(f"{pipeline}: ok ({len(loaded.sources)} sources, {len(loaded.steps)} steps)")


@cli.command()
@click.argument("output_dir", type=_PathOrUrl(file_okay=False, path_type=Path))
@click.option("--limit", default=10, show_default=True, type=click.IntRange(min=1), help="Clusters to show.")
@click.option("--kind", type=click.Choice(["exact", "near"]), help="Only exact or only near-duplicate clusters.")
@debug_option
def clusters(output_dir: Path, limit: int, kind: str | None, debug: bool) -> None:
    """Show the duplicate clusters of OUTPUT_DIR (written by `prep run`), largest first.

    Members are listed side by side with their split, similarity to the kept row, label and
    text as written in the splits (redacted where the pipeline redacted).
    """
    from prep.inspect import cluster_lines

    output_dir = _local_only(output_dir, "clusters", debug)
    for line in _guard(debug, cluster_lines, output_dir, limit=limit, kind=kind):
        click.echo(line)


@cli.command()
@click.argument("output_dir", type=_PathOrUrl(file_okay=False, path_type=Path))
@debug_option
def card(output_dir: Path, debug: bool) -> None:
    """Render card.md, card.html and croissant.json of OUTPUT_DIR again from its card.json.

    Edit a hand-written field in card.json (purpose, license, maintainer, …), then run this;
    the pipeline does not run again. Refuses a folder that is not a finished prep output.
    """
    from prep.card_command import render_again

    output_dir = _local_only(output_dir, "card", debug)
    written = _guard(debug, render_again, output_dir)
    click.echo(f"{output_dir}: rendered {', '.join(written)} from card.json")


@cli.command()
@click.argument("old_output", type=_PathOrUrl(file_okay=False, path_type=Path))
@click.argument("new_output", type=_PathOrUrl(file_okay=False, path_type=Path))
@click.option("--out", "out", type=_PathOrUrl(file_okay=False, path_type=Path), default=Path("."), show_default=True,
              help="Folder for compare.json and compare.html.")
@debug_option
def compare(old_output: Path, new_output: Path, out: Path, debug: bool) -> None:
    """Compare two versions of a prepared data set (two `prep run` output folders).

    Prints a short summary and writes compare.json and compare.html: class and language shift
    (Jensen-Shannon distance), text length shift, rows whose split changed, and new validation
    or test rows that near-duplicate an old train row.
    """
    from prep.compare import compare as compare_versions, summary_lines, write

    old_output, new_output, out = (_local_only(v, "compare", debug) for v in (old_output, new_output, out))
    result = _guard(debug, compare_versions, old_output, new_output)
    for line in summary_lines(result):
        click.echo(line)
    written = _guard(debug, write, result, out)
    click.echo(f"wrote {', '.join(str(p) for p in written)}", err=True)


def main() -> None:
    cli(prog_name="prep")


if __name__ == "__main__":
    main()
