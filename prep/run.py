"""The runner: reads every source, applies the steps in order, splits, and writes the outputs.

It owns the ledger, the timings and the progress events; steps only transform the table.
Every row read ends in exactly one split or in the ledger (checked before anything is written).
"""

from __future__ import annotations

import datetime as _dt
import os
import time
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import polars as pl

from prep import __version__
from prep.config import to_plain
from prep.errors import DataError, PipelineError
from prep.facts import RunFacts, SourceFacts, SplitFileFacts, StepFacts
from prep.ledger import Ledger, Reason, check_accounting
from prep.pipeline import PROVENANCE_COLUMNS, Pipeline, Source
from prep.steps import step_module
from prep.steps.base import StepContext
from prep.write import OutputFolder, dumps_json, prepare_output

SPLITS = ("train", "validation", "test")
# Helper columns the split reads: rows a step keeps for train only (rare_classes), and
# near-duplicate clusters, which stay in one split (near_duplicates with action mark or set_aside).
TRAIN_ONLY = "_train_only"
CLUSTER = "_cluster"

# A progress callback receives an event name and its facts; the CLI prints them, tests collect them.
Reporter = Callable[..., None]


def _quiet(event: str, **data: Any) -> None:
    return None


@dataclass
class StepTiming:
    name: str
    rows_in: int
    rows_out: int
    seconds: float


@dataclass
class RunResult:
    output: Path
    rows_read: int
    split_rows: dict[str, int]
    set_aside: int
    timings: list[StepTiming] = field(default_factory=list)
    seconds: float = 0.0
    card: dict[str, Any] = field(default_factory=dict)

    def accounting_line(self) -> str:
        parts = " + ".join(f"{name} {self.split_rows[name]:,}" for name in SPLITS)
        ok = self.rows_read == sum(self.split_rows.values()) + self.set_aside
        return f"rows read {self.rows_read:,} {'=' if ok else '≠'} {parts} + set aside {self.set_aside:,}"


def _parse_source(pipeline: Pipeline, source: Source) -> tuple[Any, tuple[str, int]]:
    """(the reader's result, (SHA-256, bytes)) of one source; touches nothing shared."""
    from prep.read import read_source
    from prep.read.rawbytes import digest_beside

    with digest_beside(source) as hashing:  # the input's SHA-256, on a thread while it is parsed
        result = read_source(source, on_unreadable=pipeline.on_unreadable)
    return result, hashing.result()  # a URL is read through fsspec (prep/read/urls.py)


def _read_source(
    pipeline: Pipeline, index: int, source: Source, ledger: Ledger, parsed: tuple[Any, tuple[str, int]] | None = None
) -> tuple[pl.DataFrame, SourceFacts]:
    from prep.check import require_columns

    result, (sha256, size) = parsed if parsed is not None else _parse_source(pipeline, source)
    require_columns(pipeline, index, source, [c for c in result.table.columns if c != "source_row"])
    frame = result.table.select(
        pl.concat_str([pl.lit(source.name + ":"), pl.col("source_row").cast(pl.String)]).alias("row_id"),
        pl.lit(source.name, dtype=pl.String).alias("source"),
        pl.col("source_row").cast(pl.Int64),
        *[pl.col(column).cast(pl.String).alias(canon) for canon, column in source.columns.items()],
    )
    bad = result.unreadable
    if bad.height:
        rows = bad.select(
            pl.concat_str([pl.lit(source.name + ":"), pl.col("source_row").cast(pl.String)]).alias("row_id"),
            pl.lit(source.name, dtype=pl.String).alias("source"),
            pl.col("source_row").cast(pl.Int64),
        )
        detail = bad.select(
            pl.when(pl.col("line").is_not_null())
            .then(pl.concat_str([pl.lit("line "), pl.col("line").cast(pl.String), pl.lit(": "), pl.col("detail")]))
            .otherwise(pl.col("detail"))
        ).to_series()
        ledger.add(rows, step="read", reason=Reason.UNREADABLE, detail=detail)
    from prep.read.urls import facts_path, is_url

    facts = SourceFacts(
        name=source.name,
        path=facts_path(source.path) if is_url(source.path) else source.path_text,
        format=source.format,
        compression=source.compression,
        encoding=result.encoding,
        rows_read=result.rows_read,
        rows_unreadable=bad.height,
        sha256=sha256,
        bytes=size,
    )
    return frame, facts


def read_sources(pipeline: Pipeline, ledger: Ledger, report: Reporter = _quiet) -> tuple[pl.DataFrame, list[SourceFacts]]:
    """All sources as one canonical table (provenance first, then canonical columns), plus facts per source."""
    frames, facts = [], []
    sources = pipeline.sources
    # Sources are parsed two at a time when there are two cores (the CSV scanner, polars and the
    # digests release the GIL, so a JSON Lines file parses beside them); what they add to the
    # ledger and the facts is taken in pipeline order, and the first failing source in that order
    # is the error reported.
    from prep.text import usable_cores

    import prep.read  # noqa: F401  (the readers, imported here: two threads importing one module at once can fail)
    import prep.read.rawbytes  # noqa: F401

    workers = min(2, len(sources), usable_cores())
    pool = ThreadPoolExecutor(max_workers=workers) if workers > 1 else None

    def timed_parse(source: Source) -> tuple[Any, float]:
        t0 = time.perf_counter()
        return _parse_source(pipeline, source), time.perf_counter() - t0

    try:
        parsing = [pool.submit(timed_parse, s) for s in sources] if pool else None
        for i, source in enumerate(sources):
            parsed, parse_seconds = parsing[i].result() if parsing else timed_parse(source)
            if parsing:
                parsing[i] = None  # the reader's whole table: freed once its columns are taken
            t0 = time.perf_counter()
            frame, f = _read_source(pipeline, i, source, ledger, parsed)
            frames.append(frame)
            facts.append(f)
            # The source's own time: its parse (maybe on a thread before its turn) and the rest.
            seconds = parse_seconds + time.perf_counter() - t0
            report("read", source=source.name, rows=f.rows_read, unreadable=f.rows_unreadable, seconds=seconds)
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
    columns = [*PROVENANCE_COLUMNS, *pipeline.canonical_columns]
    aligned = []
    for frame in frames:
        missing = [c for c in columns if c not in frame.columns]
        aligned.append(frame.with_columns(pl.lit(None, dtype=pl.String).alias(c) for c in missing).select(columns))
    table = pl.concat(aligned, how="vertical") if aligned else pl.DataFrame(schema={c: pl.String for c in columns})
    return table, facts


def step_phase(name: str) -> str:
    """``"table"`` for steps that run before the split, ``"splits"`` for those that need it."""
    return getattr(step_module(name), "PHASE", "table")


def step_context(pipeline: Pipeline, name: str, ledger: Ledger) -> StepContext:
    """The context a step runs with (both engines)."""
    return StepContext(
        step=name,
        label=pipeline.label,
        text=pipeline.text,
        ledger=ledger,
        split_fractions=pipeline.split.fractions,
        pipeline_dir=pipeline.folder,
        seed=pipeline.split.seed,
        group=pipeline.split.group,
    )


def _height(data: pl.DataFrame | dict[str, pl.DataFrame]) -> int:
    return data.height if isinstance(data, pl.DataFrame) else sum(f.height for f in data.values())


def _overlap_possible() -> bool:
    """Whether a read-only after-split step may run on a thread beside the next steps: two usable
    cores, and a numba threading layer that accepts parallel kernels launched from two threads at
    once (OpenMP or TBB; numba's own workqueue layer does not, and is never overlapped)."""
    from prep.text import usable_cores

    if usable_cores() < 2:
        return False
    try:
        import numba

        return numba.threading_layer() in ("omp", "tbb")
    except (ImportError, ValueError):  # ValueError: no parallel kernel has run yet, layer unknown
        return False


def apply_steps(
    pipeline: Pipeline,
    data: pl.DataFrame | dict[str, pl.DataFrame],
    ledger: Ledger,
    report: Reporter = _quiet,
    *,
    phase: str = "table",
) -> tuple[Any, list[StepFacts], list[StepTiming], dict[str, pl.DataFrame]]:
    """Apply the pipeline's steps of one phase in file order.

    Phase ``"table"``: ``module.apply(table, config, ctx) -> table`` before the split.
    Phase ``"splits"``: ``module.apply_splits({"train": …, "validation": …, "test": …}, config, ctx)
    -> splits`` after it, for steps that need the split (their module sets ``PHASE = "splits"``).
    After every step, rows in - rows out must equal the rows it set aside.

    An after-split step whose module sets ``READ_ONLY = True`` (it returns the splits it got and
    sets nothing aside: ``baseline``) runs on a thread while the steps after it go on, when
    :func:`_overlap_possible`; its facts, timing and outputs are taken in file order all the same.
    (Measured on the 1M demo's splits: baseline and suspect_labels one after the other 21.3 s,
    side by side 18.1 s, the same facts.)
    """
    done: list[Any] = []  # per step in file order: (facts, timing, outputs), or a Future of them
    step_facts: list[StepFacts] = []
    timings: list[StepTiming] = []
    outputs: dict[str, pl.DataFrame] = {}
    pool: ThreadPoolExecutor | None = None

    def take(wait: bool) -> None:
        """Record the finished steps in file order (reported as they finish); ``wait``: all of them.
        A read-only step's error is raised here, in its turn."""
        while len(step_facts) < len(done):
            entry = done[len(step_facts)]
            if isinstance(entry, Future):
                if not (wait or entry.done()):
                    return
                entry = entry.result()
            facts, timing, produced = entry
            step_facts.append(facts)
            timings.append(timing)
            outputs.update(produced)
            report("step", step=timing.name, rows_in=timing.rows_in, rows_out=timing.rows_out, seconds=timing.seconds)

    try:
        for spec in pipeline.steps:
            if step_phase(spec.name) != phase:
                continue
            module = step_module(spec.name)
            if phase == "splits" and getattr(module, "READ_ONLY", False) and _overlap_possible():
                if pool is None:
                    # Imports happen here, on this thread, before two steps run at once: two
                    # threads importing the same package's cyclic modules fail (scikit-learn).
                    for other in pipeline.steps:
                        getattr(step_module(other.name), "preload", lambda: None)()
                    pool = ThreadPoolExecutor(max_workers=1)
                done.append(pool.submit(_apply_read_only, pipeline, spec, module, data))
                continue
            try:
                data, record = _apply_one(pipeline, spec, module, data, ledger, phase)
            except BaseException as exc:
                # A read-only step earlier in the file that failed is the error to report (as
                # when the steps run one after the other).
                for entry in done:
                    if isinstance(entry, Future) and entry.exception() is not None:
                        raise entry.exception() from exc
                raise
            done.append(record)
            take(wait=False)
        take(wait=True)
    finally:
        if pool is not None:
            pool.shutdown(wait=True)
    return data, step_facts, timings, outputs


def _apply_read_only(pipeline: Pipeline, spec: Any, module: Any, splits: dict[str, pl.DataFrame]):
    """A ``READ_ONLY`` after-split step on its own ledger, which must stay empty."""
    own = Ledger()
    before = dict(splits)
    result, record = _apply_one(pipeline, spec, module, splits, own, "splits")
    if len(own) or set(result) != set(before) or any(result[name] is not before[name] for name in before):
        raise AssertionError(f"step `{spec.name}` is marked READ_ONLY but changed the splits; this is a bug in prep.")
    return record


def _apply_one(pipeline: Pipeline, spec: Any, module: Any, data: Any, ledger: Ledger, phase: str):
    """Run one step: (its result, (facts, timing, outputs))."""
    ctx = step_context(pipeline, spec.name, ledger)
    ledger_parts = ledger.frame().height
    rows_in = _height(data)
    t0 = time.perf_counter()
    try:
        if phase == "table":
            data = module.apply(data, spec.config, ctx)
        else:
            data = module.apply_splits(data, spec.config, ctx)
    except DataError as exc:
        exc.outputs = dict(ctx.outputs)  # the runner writes failure cases beside the output folder
        raise
    seconds = time.perf_counter() - t0
    facts, timing = step_record(spec, ctx.facts, rows_in, _height(data), ledger.frame().slice(ledger_parts), seconds)
    return data, (facts, timing, dict(ctx.outputs))


def step_record(
    spec: Any, facts: dict[str, Any], rows_in: int, rows_out: int, added: pl.DataFrame, seconds: float
) -> tuple[StepFacts, StepTiming]:
    """A step's facts and timing, after checking that the rows it removed are exactly the rows it
    set aside (``added``: its new ledger rows). Every engine's way of running a step ends here."""
    if rows_in - rows_out != added.height:
        raise AssertionError(
            f"step `{spec.name}` removed {rows_in - rows_out} rows but set aside {added.height}; this is a bug in prep."
        )
    counts = dict(sorted((r, n) for r, n in added.group_by("reason").len().iter_rows()))
    step_facts = StepFacts(
        name=spec.name, params=to_plain(spec.config), rows_in=rows_in, rows_out=rows_out, set_aside=counts, facts=dict(facts)
    )
    return step_facts, StepTiming(spec.name, rows_in, rows_out, seconds)


def run_pipeline(
    pipeline: Pipeline,
    *,
    out: Path | None = None,
    report: Reporter = _quiet,
    force: bool = False,
    engine: str | None = None,
    scheduler: str | None = None,
    partition_rows: int | None = None,
) -> RunResult:
    """Run ``pipeline`` end to end and write its outputs into ``out`` (default: the file's `output`).

    ``force`` lets prep replace a non-empty output folder that it did not write (see
    :func:`prep.write.check_output_folder` for what is refused even then).
    ``engine`` (``local`` or ``dask``), ``scheduler`` and ``partition_rows`` override the pipeline
    file's ``engine`` setting; the Dask engine lives in :mod:`prep.dask_engine`.
    """
    from prep.read.urls import is_url

    if is_url(out if out is not None else pipeline.output):  # written locally, then uploaded (prep/write.py)
        from prep.write import run_into_url

        return run_into_url(
            str(out if out is not None else pipeline.output),
            lambda local, rep, frc: run_pipeline(
                pipeline, out=local, report=rep, force=frc, engine=engine, scheduler=scheduler, partition_rows=partition_rows
            ),
            inputs=[s.path for s in pipeline.sources], report=report, force=force,
        )
    settings = getattr(pipeline, "engine", None)
    if (engine or getattr(settings, "name", "local")) == "dask":
        from prep.dask_engine import run_pipeline_dask

        return run_pipeline_dask(
            pipeline, out=out, report=report, force=force, scheduler=scheduler, partition_rows=partition_rows
        )
    started = time.perf_counter()
    started_at = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    out = Path(out) if out is not None else pipeline.output
    shown_out = str(out)
    inputs = [s.path for s in pipeline.sources] + [pipeline.path]
    prepare_output(out, inputs, shown=shown_out, force=force)
    split_history(pipeline, out)  # a missing history folder stops the run before any work

    ledger = Ledger()
    table, source_facts = read_sources(pipeline, ledger, report)
    rows_read = sum(f.rows_read for f in source_facts)
    from prep.card.inputs import input_facts

    card_inputs = input_facts(pipeline, table)  # missing values by source and column, as read
    try:
        table, step_facts, timings, outputs = apply_steps(pipeline, table, ledger, report)
    except DataError as exc:
        raise_with_failure_cases(out, exc)
    return finish_run(
        pipeline, out=out, shown_out=shown_out, table=table, ledger=ledger, source_facts=source_facts,
        rows_read=rows_read, card_inputs=card_inputs, step_facts=step_facts, timings=timings, outputs=outputs,
        started=started, started_at=started_at, report=report,
    )


def raise_with_failure_cases(out: Path, exc: DataError) -> None:
    """Write a failed step's failure cases beside the output folder, then raise ``exc`` naming them."""
    extra = getattr(exc, "outputs", {})
    written = []
    for name, frame in extra.items():
        target = out.parent / f"{out.name}.{name}.parquet"
        out.parent.mkdir(parents=True, exist_ok=True)
        # Written beside the output folder (which a failed run leaves untouched), atomically:
        # a crash leaves either the previous file or the new one, never half of one.
        partial = target.with_name(f".{target.name}.prep-tmp-{os.getpid()}")
        frame.write_parquet(partial)
        os.replace(partial, target)
        written.append(str(target))
    if written:
        raise DataError(f"{exc.message} Failure cases: {', '.join(f'`{w}`' for w in written)}.") from exc
    raise exc


def split_key_columns(pipeline: Pipeline, columns: list[str]) -> list[str]:
    """The columns the split is decided from: ``row_id``, the stratify and group columns, and the
    helper columns ``_train_only`` (rare classes kept for train) and ``_cluster`` (near-duplicate
    clusters, which stay in one split), those of them that ``columns`` holds. No text column,
    unless the split is stratified or grouped by one."""
    from prep.split import check_split_columns

    # A missing stratify/group column is reported with the table's columns, not the keys'.
    check_split_columns(columns, stratify=pipeline.split.stratify, group=pipeline.split.group)
    wanted = ["row_id", pipeline.split.stratify, pipeline.split.group, TRAIN_ONLY, CLUSTER]
    keys: list[str] = []
    for column in wanted:
        if column and column in columns and column not in keys:
            keys.append(column)
    return keys


def split_history(pipeline: Pipeline, out: Path) -> tuple[Path | None, bool]:
    """(the split history folder to read or None, whether this is the first run of a pipeline whose
    history is its own output). A history folder that does not exist is accepted only when it is
    the folder this run writes (``out``, symlinks resolved): then every row is allocated afresh.
    Both engines call this before reading anything, and again when they split."""
    if not pipeline.split.history:
        return None, False
    from prep.pipeline import missing_output_history

    history = pipeline.folder / pipeline.split.history
    if os.path.lexists(history):
        return history, False
    if missing_output_history(history, out):
        return None, True
    raise PipelineError(
        f"the split history `{pipeline.split.history}` does not exist. Only the pipeline's own output may be "
        f"missing (on its first run), and this run writes to `{out}`.",
        file=str(pipeline.path), key="split.history",
    )


def decide_split(pipeline: Pipeline, keys: pl.DataFrame, out: Path):
    """The pipeline's split (:func:`prep.split.assign_splits`) of the rows of ``keys``: the cleaned
    table (local engine) or its :func:`split_key_columns` in table order (Dask engine), for a run
    writing to ``out``. Both engines decide the split here."""
    from prep.split import assign_splits

    history, first = split_history(pipeline, out)  # stable splits
    result = assign_splits(
        keys,
        fractions=pipeline.split.fractions,
        seed=pipeline.split.seed,
        stratify=pipeline.split.stratify,
        group=pipeline.split.group,
        train_only=TRAIN_ONLY,
        links=(CLUSTER,),  # near-duplicate clusters (action: mark or set_aside) stay in one split
        history=history,
    )
    if first:
        result.notes.append(
            f"The split history `{pipeline.split.history}` (this pipeline's own output) does not exist yet: "
            "every row was allocated afresh; the next run keeps these rows in their splits."
        )
    return result


def finish_run(
    pipeline: Pipeline,
    *,
    out: Path,
    shown_out: str,
    table: pl.DataFrame | None,
    ledger: Ledger,
    source_facts: list[SourceFacts],
    rows_read: int,
    card_inputs: dict[str, Any],
    step_facts: list[StepFacts],
    timings: list[StepTiming],
    outputs: dict[str, pl.DataFrame],
    started: float,
    started_at: str,
    report: Reporter = _quiet,
    engine: str = "local",
    decided: tuple[Any, dict[str, pl.DataFrame]] | None = None,
    split_seconds: float = 0.0,
) -> RunResult:
    """Split the cleaned ``table``, run the after-split steps, check the accounting, write everything.

    Shared by both engines, so the writing always happens here, on the client, through
    :class:`prep.write.OutputFolder`. The local engine passes the cleaned ``table``. The Dask
    engine decides the split from the key columns (:func:`decide_split`) and passes ``table=None``
    and ``decided=(the split decision, the rows of each split)``, with the seconds that took.
    """
    from prep.card import build_card, write_card_files
    from prep.split import split_tables

    t0 = time.perf_counter()
    if decided is None:
        split = decide_split(pipeline, table, out)
        splits = split_tables(table, split)
    else:
        split, splits = decided
    columns = [c for c in splits["train"].columns if not c.startswith("_")]
    splits = {name: splits[name].select(columns) for name in SPLITS}
    report("split", rows={name: f.height for name, f in splits.items()}, seconds=split_seconds + time.perf_counter() - t0)
    splits, after_facts, after_timings, after_outputs = apply_steps(pipeline, splits, ledger, report, phase="splits")
    step_facts += after_facts
    timings += after_timings
    outputs.update(after_outputs)
    from prep.neardup.report import audit as near_duplicate_audit, combine_duplicates, resolve_kept_chains

    combine_duplicates(outputs)  # exact + near clusters -> duplicates.parquet
    leakage_audit = near_duplicate_audit(pipeline, splits)
    ledger_frame = resolve_kept_chains(ledger.frame())  # kept_row_id always names a row still kept
    check_accounting(rows_read, splits.values(), ledger_frame)

    with OutputFolder(out) as folder:
        split_files: dict[str, SplitFileFacts] = {}
        for name, frame in splits.items():
            info = folder.write_parquet(f"{name}.parquet", frame)
            split_files[name] = SplitFileFacts(
                file=f"{name}.parquet", rows=frame.height, sha256=info["sha256"],
                columns={c: str(t) for c, t in frame.schema.items()},
            )
        folder.write_parquet("set_aside.parquet", ledger_frame)
        for name, frame in sorted(outputs.items()):
            folder.write_parquet(f"{name}.parquet", frame)
        facts = RunFacts(
            dataset=pipeline.dataset,
            description=pipeline.description,
            about=to_plain(pipeline.about),
            label=pipeline.label,
            text=list(pipeline.text),
            split_config=to_plain(pipeline.split),
            seed=pipeline.split.seed,
            tool_version=__version__,
            pipeline_sha256=pipeline.sha256,
            sources=source_facts,
            steps=step_facts,
            splits=splits,
            split_files=split_files,
            split_notes=list(split.notes),
            ledger=ledger_frame,
            rows_read=rows_read,
            engine=engine,
        )
        facts.extra["near_duplicate_audit"] = leakage_audit
        facts.extra.update(card_inputs)
        card = build_card(facts)
        folder.write_text("card.json", dumps_json(card))
        write_card_files(folder, card, started_at)  # card.md, card.html, croissant.json
        seconds = time.perf_counter() - started
        manifest = {
            "tool_version": __version__,
            "dataset": pipeline.dataset,
            "pipeline": {"file": pipeline.path.name, "sha256": pipeline.sha256},
            "inputs": {f.name: {"path": f.path, "sha256": f.sha256, "bytes": f.bytes} for f in source_facts},
            "seed": pipeline.split.seed,
            "rows": {"read": rows_read, **{n: f.height for n, f in splits.items()}, "set_aside": ledger_frame.height},
            # Run times live here only, so the splits, ledger and card stay byte-identical across runs.
            "started_at": started_at,
            "seconds": round(seconds, 3),
            "steps": [
                {"step": t.name, "rows_in": t.rows_in, "rows_out": t.rows_out, "seconds": round(t.seconds, 3)} for t in timings
            ],
        }
        folder.commit(manifest)
    report("written", output=shown_out)
    return RunResult(
        output=out,
        rows_read=rows_read,
        split_rows={n: f.height for n, f in splits.items()},
        set_aside=ledger_frame.height,
        timings=timings,
        seconds=time.perf_counter() - started,
        card=card,
    )
