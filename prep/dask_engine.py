"""The Dask engine: ``prep run PIPELINE --engine dask [--scheduler ADDRESS]``.

Same inputs, same outputs as the local engine (:func:`prep.run.run_pipeline`): the same rows in
each split, the same ledger, the same clusters, the same ``card.json`` apart from its ``engine``
field. ``tests/test_dask_engine.py`` checks this on the demo with a real two-process cluster.

How a run is spread (what runs where, and what travels to the client):

1. **Reading**: one task per source on a worker, with prep's own readers (so row numbering, line
   numbers and unreadable-record ledger entries are those of the local engine). The worker needs
   a local input file under the same absolute path (a shared filesystem); an input given as an
   fsspec URL (``s3://…``) is opened by the worker itself (:mod:`prep.read.urls`). The source's table stays on
   the worker; the client receives its facts (counts, hash, size) and its unreadable-record ledger
   rows (provenance and line numbers, no cell values). The table is then cut into partitions of
   ``partition_rows`` rows (a partition never spans two sources).
2. **Row-local steps** (:data:`ROW_LOCAL`: ``redact``, ``language``, ``missing``, and ``normalise``
   in two phases) run per partition on the workers through the step's own ``apply`` with its own
   :class:`~prep.steps.base.StepContext` and ledger. The client receives per partition only the
   ledger rows the step set aside (provenance, reason, detail: never texts) and the step's facts,
   which :data:`MERGERS` combine into the facts of the whole table (counts add up; the language
   step's count of distinct texts is merged from 64-bit hashes of the distinct prefixes, see
   :func:`_language_extra`). ``normalise`` is row-local except for its label merges, which need the
   label spellings of the whole table: phase 1 cleans the text columns per partition and returns
   the counts of the cleaned label spellings (class names and counts, small), the client decides
   the mapping exactly as the step does, phase 2 applies it per partition.
3. **Keyed global steps** (``exact_duplicates``, ``near_duplicates``, ``schema``, ``rare_classes``:
   ``KEYED`` in their module and its ``can_key`` if any, see :mod:`prep.steps.base`) while the table is still on the workers: each
   partition's keys are made on its worker (provenance, label, 128-bit digests of the compared
   values instead of the texts, a text length or parsed time when ``keep`` needs one); the
   client concatenates them and runs the step's own ``decide`` over the whole table's keys
   (ledger, cluster table, facts), and the decision (a keep mask and/or whole new columns: the
   merged label, ``_train_only``, ``_cluster``) goes back to the partitions in slices
   (:func:`_run_keyed`). ``near_duplicates`` looks its band keys and sketches up in what the
   workers signed ahead (signing starts at the first keyed or collecting step, on the
   partitions as they are then: :func:`_start_signing`, :func:`_finish_signing`) and fetches
   from the workers the compared texts of the rows whose candidate pairs it verifies exactly
   (:func:`_fetcher`), nothing else. Workers must run the client's polars (checked:
   :func:`_check_versions`).
   ``schema``'s keys are the (column, check) pairs each row fails in pandera's one-row checks
   on its partition, the table-level failures, and digests for its uniqueness constraints.
   **Other global steps** (any step neither in :data:`ROW_LOCAL` nor keyed) run
   on the client over the collected table, through the same code path as the local engine; once
   collected, the table stays on the client, and every later step runs there (keyed or
   row-local: the same result).
4. **Split**: when the table is still on the workers, the client gathers the split's key columns
   only (:func:`prep.run.split_key_columns`: row id, class, group, ``_train_only``,
   ``_cluster``; no text column unless the split is stratified or grouped by one), decides with :func:`prep.run.decide_split` (the local engine's own
   function), and each partition returns its rows of each split (:func:`_split_from_keys`).
5. **After-split steps, audit, card and writing** run on the client over the rows of the splits in
   :func:`prep.run.finish_run`, the function the local engine calls, so the output folder is
   written only by :class:`prep.write.OutputFolder` on the client: a failed or killed run never
   damages the previous output.

Failures: a worker that dies is replaced by Dask and its tasks run again (Dask's retries; the
read tasks and step tasks are pure functions of their inputs, so the result is unchanged). When a
task kills workers more often than the scheduler allows (``distributed.scheduler.allowed-failures``)
the run stops with a one-line :class:`~prep.errors.PrepError`. Errors a step raises on a worker
(prep's own errors) come back to the client as the same one-line message and exit code.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import logging
import os
import signal
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from operator import itemgetter
from pathlib import Path
from typing import Any

import polars as pl

from prep.errors import DataError, PipelineError, PrepError
from prep.facts import SourceFacts, StepFacts
from prep.read.urls import is_url
from prep.ledger import Ledger
from prep.pipeline import DEFAULT_PARTITION_ROWS, PROVENANCE_COLUMNS, Pipeline
from prep.steps import step_module
from prep.steps.base import StepContext

__all__ = ["ROW_LOCAL", "MERGERS", "run_pipeline_dask", "WorkerError"]

INSTALL_HINT = 'The Dask engine needs the `dask` extra: pip install -e ".[dask]" (or pip install "prep[dask]").'
# Seconds to wait for a scheduler given with --scheduler (common practice, no source).
CONNECT_TIMEOUT = "10s"
# How long a scheduler without workers is given for a first worker to join (workers may still be
# starting, e.g. in a batch queue); common practice, no source.
WORKER_WAIT = "60s"
# The test-only hook (see _test_hook): the environment variable tests set, and pytest's own.
TEST_KILL_ENV = "PREP_DASK_TEST_KILL"
# Fixed seed for the transient 64-bit hashes of language prefixes (only counted, never stored).
_HASH_SEED = 0x5EED


# --- errors crossing the process boundary -------------------------------------------------------


class WorkerError(PrepError):
    """A prep error raised on a worker, carried to the client with its message and exit code.

    prep's error classes take keyword-only arguments, which pickling (how Dask ships an
    exception back) cannot rebuild; this class can, and keeps the one-line message.
    """

    def __init__(self, message: str, exit_code: int = 1) -> None:
        super().__init__(message)
        self.exit_code = exit_code

    def __reduce__(self):
        return (WorkerError, (self.message, self.exit_code))


@contextmanager
def _as_worker_error() -> Iterator[None]:
    try:
        yield
    except PrepError as exc:
        raise WorkerError(str(exc), exc.exit_code) from None


def _test_hook() -> None:
    """Tests only: make this worker process kill itself (SIGKILL) at the start of a step task.

    Fires only when both ``PREP_DASK_TEST_KILL`` and ``PYTEST_CURRENT_TEST`` (which pytest sets
    while a test runs; worker processes started by that test inherit it) are in the environment.
    ``PREP_DASK_TEST_KILL`` names a control file: ``always`` kills every time (the scheduler then
    gives up on the task); ``once`` kills the first worker that renames the file away (rename is
    atomic: exactly one kill); no file, no kill.
    """
    control = os.environ.get(TEST_KILL_ENV)
    if not control or "PYTEST_CURRENT_TEST" not in os.environ:
        return
    try:
        mode = Path(control).read_text().strip()
        if mode == "once":
            os.rename(control, control + ".fired")
        elif mode != "always":
            return
    except OSError:
        return
    os.kill(os.getpid(), signal.SIGKILL)


# --- worker tasks ------------------------------------------------------------------------------


def _read_task(pipeline: Pipeline, index: int) -> tuple[pl.DataFrame, dict[str, Any]]:
    """Read source ``index`` with prep's readers; its table (all canonical columns) and its facts."""
    from prep.card.inputs import input_facts
    from prep.run import _read_source

    source = pipeline.sources[index]
    with _as_worker_error():
        if is_url(source.path):  # opened by this worker through fsspec: object storage needs no shared filesystem
            _check_url_on_worker(source, index)
        elif not source.path.is_file() or not os.access(source.path, os.R_OK):
            raise PipelineError(
                f"input file `{source.path_text}` cannot be read on a Dask worker; every worker needs the inputs "
                "under the same path (a shared filesystem).",
                key=f"sources[{index}].path",
            )
        t0 = time.perf_counter()
        ledger = Ledger()
        frame, facts = _read_source(pipeline, index, source, ledger)
        columns = [*PROVENANCE_COLUMNS, *pipeline.canonical_columns]
        missing = [c for c in columns if c not in frame.columns]
        frame = frame.with_columns(pl.lit(None, dtype=pl.String).alias(c) for c in missing).select(columns)
        meta = {
            "facts": facts,
            "ledger": ledger.frame(),
            "height": frame.height,
            "inputs": input_facts(pipeline, frame),
            "seconds": time.perf_counter() - t0,
        }
    return frame, meta


def _check_url_on_worker(source: Any, index: int) -> None:
    """A URL source this worker cannot open (backend not installed here, file not visible): one line, exit 2."""
    from prep.read import urls

    try:
        problem = urls.input_problem(source.path)
    except urls.UrlProblem as exc:
        problem, hint = exc.message, exc.hint
    else:
        hint = None
    if problem:
        raise PipelineError(
            f"input `{source.path_text}` of source `{source.name}` cannot be read on a Dask worker: it {problem}.",
            key=f"sources[{index}].path",
            hint=hint,
        )


def _slice(frame: pl.DataFrame, offset: int, length: int) -> pl.DataFrame:
    return frame.slice(offset, length)


def _copy(frame: pl.DataFrame) -> pl.DataFrame:
    """A partition made on the client, as a task (so Dask can run it again if its worker dies)."""
    return frame


class _CallLedger(Ledger):
    """A ledger that remembers each ``set_aside`` call, also the empty ones, in call order.

    The local engine's ledger holds a step's rows call by call (e.g. ``missing``: all
    ``empty_text`` rows, then all ``missing_label`` rows). Merging partitions call by call keeps
    that order when every partition made the same calls.
    """

    def __init__(self) -> None:
        super().__init__()
        self.calls: list[pl.DataFrame | None] = []

    def add(self, rows: pl.DataFrame, **kwargs: Any) -> None:
        before = len(self._parts)
        super().add(rows, **kwargs)
        self.calls.append(self._parts[-1] if len(self._parts) > before else None)


def _step_task(pipeline: Pipeline, name: str, config: Any, part: pl.DataFrame, phase: str) -> tuple[pl.DataFrame, dict[str, Any]]:
    """Run one row-local step (or one phase of ``normalise``) on one partition."""
    _test_hook()
    with _as_worker_error():
        ledger = _CallLedger()
        from prep.run import step_context

        ctx = step_context(pipeline, name, ledger)
        extra: dict[str, Any] = {}
        if phase == "normalise-1":
            out, extra = _normalise_texts(part, config, ctx)
        elif phase == "normalise-2":
            out, extra = _normalise_labels(part, config, ctx)
        else:
            module = step_module(name)
            run_config = config
            if name == "language":
                # Worker processes are daemons and may not start processes of their own
                # (langdetect's pool); the answer does not depend on the worker count.
                run_config = dataclasses.replace(config, workers=1) if config.backend == "langdetect" else config
                extra = _language_extra(part, config, ctx)
            out = module.apply(part, run_config, ctx)
    meta = {
        "rows_in": part.height,
        "rows_out": out.height,
        "calls": ledger.calls,
        "facts": dict(ctx.facts),
        "extra": extra,
        "outputs": dict(ctx.outputs),
        "columns": out.columns,
    }
    return out, meta


# --- per-step knowledge: normalise in two phases ------------------------------------------------


def _normalise_texts(part: pl.DataFrame, config: Any, ctx: StepContext) -> tuple[pl.DataFrame, dict[str, Any]]:
    """Phase 1: the text columns exactly as the step cleans them; counts of the cleaned label spellings."""
    from prep.steps import normalise

    out = normalise.apply(part, dataclasses.replace(config, labels=False), ctx)
    cleaned = normalise.clean_chars(part.get_column(ctx.label), form=config.unicode_form)
    counts = cleaned.drop_nulls().value_counts(name="n").rename({ctx.label: "spelling"})
    return out, {"label_counts": counts}


def _normalise_labels(part: pl.DataFrame, config: Any, ctx: StepContext) -> tuple[pl.DataFrame, dict[str, Any]]:
    """Phase 2: the label column cleaned and mapped to the whole table's canonical spellings."""
    from prep.steps import normalise

    mapping: dict[str, str] = config["mapping"]
    before = part.get_column(ctx.label)
    cleaned = normalise.clean_chars(before, form=config["unicode_form"]).alias(ctx.label)
    merged = cleaned.replace(list(mapping), list(mapping.values())) if mapping else cleaned
    return part.with_columns(merged), {"label_changed": int(before.ne_missing(merged).sum())}


def _label_mapping(counts: pl.DataFrame) -> tuple[dict[str, str], list[dict]]:
    """The step's own rule on the spelling counts of every partition (the whole table's counts)."""
    from prep.steps.normalise import label_mapping_from_counts

    return label_mapping_from_counts(counts)


def _normalise_partitionable(config: Any, pipeline: Pipeline, columns: list[str]) -> bool:
    text_columns = list(pipeline.text) if config.columns is None else list(config.columns)
    # The label read as a text column, or a missing column (the step's own error message): client.
    return pipeline.label in columns and pipeline.label not in text_columns and all(c in columns for c in text_columns)


# --- per-step knowledge: the language step's distinct texts -------------------------------------


def _language_extra(part: pl.DataFrame, config: Any, ctx: StepContext) -> dict[str, Any]:
    """64-bit hashes of the distinct prefixes the step identifies in this partition.

    The step reports ``distinct_texts``, the number of distinct prefixes of the texts with at
    least ``min_chars`` letters over the whole table: not a sum over partitions. The same
    definition as :func:`prep.steps.language.detect_languages`, computed here once more, and
    only hashes travel. polars' hash with a fixed seed is the same in every process of one
    polars version; it is counted, never stored. Two distinct prefixes collide with
    probability about n^2 / 2^65 (n = 10^6: 3e-8), which would undercount by one.
    """
    columns = list(ctx.text) if config.columns is None else list(config.columns)
    if not all(c in part.columns for c in columns):
        return {}
    texts = part.select(pl.concat_str([pl.col(c) for c in columns], separator=" ", ignore_nulls=True)).to_series()
    texts = texts.fill_null("")
    if config.min_chars:
        keep = texts.str.contains(rf"(?:\p{{L}}\P{{L}}*){{{config.min_chars}}}")
    else:
        keep = pl.repeat(True, texts.len(), eager=True)
    prefixes = texts.filter(keep).str.slice(0, config.prefix_chars).unique()
    return {"prefix_hashes": prefixes.hash(seed=_HASH_SEED)}


# --- merging facts of partitions -----------------------------------------------------------------


def _sum_dicts(dicts: list[dict[str, int]], *, sort: bool = False) -> dict[str, int]:
    out: dict[str, int] = {}
    for d in dicts:
        for k, v in d.items():
            out[k] = out.get(k, 0) + v
    return dict(sorted(out.items())) if sort else out


def _merge_redact(facts: list[dict], extras: list[dict]) -> dict[str, Any]:
    first = facts[0]
    return {
        "kinds": first["kinds"],
        "placeholders": first["placeholders"],
        "counts": _sum_dicts([f["counts"] for f in facts]),
        "rows_changed": sum(f["rows_changed"] for f in facts),
        "columns": first["columns"],
    }


def _merge_language(facts: list[dict], extras: list[dict]) -> dict[str, Any]:
    first = facts[0]
    hashes = [e["prefix_hashes"] for e in extras if "prefix_hashes" in e]
    distinct = pl.concat(hashes).n_unique() if hashes else 0
    merged = dict(first)
    merged.update(
        counts=_sum_dicts([f["counts"] for f in facts], sort=True),  # the step sorts by code
        too_short=sum(f["too_short"] for f in facts),
        distinct_texts=int(distinct),
        rows_set_aside=sum(f["rows_set_aside"] for f in facts),
    )
    return merged


def _merge_missing(facts: list[dict], extras: list[dict]) -> dict[str, Any]:
    columns: dict[str, dict[str, int]] = {}
    for f in facts:
        for column, counts in f["columns"].items():
            target = columns.setdefault(column, dict.fromkeys(counts, 0))
            for k, v in counts.items():
                target[k] += v
    return {"columns": columns, "empty_text": sum(f["empty_text"] for f in facts)}


# Steps that run per partition, with the function that merges their facts (in partition order).
MERGERS: dict[str, Callable[[list[dict], list[dict]], dict[str, Any]]] = {
    "redact": _merge_redact,
    "language": _merge_language,
    "missing": _merge_missing,
}
ROW_LOCAL = frozenset(MERGERS) | {"normalise"}


def _merge_inputs(parts: list[dict[str, Any]]) -> dict[str, Any]:
    """The card's missing-values-by-source facts of the whole table from those of each source."""
    if not parts:
        return {}
    merged = {key: dict(value) for key, value in parts[0].items()}
    for key in merged:
        rows: dict[tuple[str, str], dict] = {}
        for part in parts:
            for item in part[key]["by_source"]:
                k = (item["source"], item["column"])
                if k in rows:
                    rows[k] = {**rows[k], "rows": rows[k]["rows"] + item["rows"], "missing": rows[k]["missing"] + item["missing"]}
                else:
                    rows[k] = dict(item)
        merged[key]["by_source"] = list(rows.values())
    return merged


def _merge_calls(metas: list[dict[str, Any]]) -> list[pl.DataFrame]:
    """Ledger parts of a step in the local engine's order (call by call, partitions in order)."""
    calls = [m["calls"] for m in metas]
    if calls and all(len(c) == len(calls[0]) for c in calls):
        ordered = [c[j] for j in range(len(calls[0])) for c in calls]
    else:  # partitions made different calls: partition order (the same rows, maybe another order)
        ordered = [frame for c in calls for frame in c]
    return [f for f in ordered if f is not None]


# --- the client side ---------------------------------------------------------------------------


def _import_dask():
    try:
        import distributed  # noqa: F401
        from distributed import Client, LocalCluster
    except ImportError:
        raise PipelineError(f"--engine dask: Dask is not installed. {INSTALL_HINT}") from None
    return Client, LocalCluster


def address_problem(address: str) -> str | None:
    """Why ``address`` is not a Dask scheduler address Dask can parse, or None."""
    from distributed.comm.addressing import parse_address, parse_host_port

    try:
        scheme, location = parse_address(address)
        if scheme in ("tcp", "tls"):
            parse_host_port(location)
        from distributed.comm.registry import get_backend

        backend = get_backend(scheme)
    except (ValueError, TypeError) as exc:
        return str(exc)
    try:
        backend.get_connector()
    except Exception as exc:  # e.g. ucx:// without its package: the transport cannot connect here
        return f"the `{scheme}` transport cannot be used here: {type(exc).__name__}: {exc}"
    return None


def _bad_address(scheduler: str, why: str) -> PipelineError:
    return PipelineError(
        f"`{scheduler}` is not a Dask scheduler address ({why}).",
        hint="Give it as `dask scheduler` prints it, e.g. tcp://host:8786.",
    )


def _connect(Client: Any, scheduler: str) -> Any:
    """A client of the scheduler at ``scheduler``, or a one-line error within about twice
    CONNECT_TIMEOUT. Dask's own timeout covers opening the connection, not a peer that accepts it
    and never answers (a web port, say): the client is made on a daemon thread, which is abandoned
    then and closes the client itself should it still connect later."""
    import threading

    from dask.utils import parse_timedelta

    result: dict[str, Any] = {}
    lock, abandoned = threading.Lock(), threading.Event()

    def make() -> None:
        try:
            client = Client(scheduler, timeout=CONNECT_TIMEOUT, set_as_default=False)
        except BaseException as exc:  # handed to the caller's thread
            result["error"] = exc
            return
        with lock:
            if not abandoned.is_set():
                result["client"] = client
                return
        client.close()  # connected after the caller gave up

    thread = threading.Thread(target=make, name="prep-dask-connect", daemon=True)
    thread.start()
    thread.join(2 * parse_timedelta(CONNECT_TIMEOUT) + 1)
    with lock:
        if "client" not in result and "error" not in result:
            abandoned.set()
    unreachable = "Start it with `dask scheduler` and check the address, or run without a scheduler address to use a local cluster."
    if abandoned.is_set():
        raise PrepError(f"No Dask scheduler answered at `{scheduler}`: the connection opened but nothing replied.", hint=unreachable)
    exc = result.get("error")
    if exc is None:
        return result["client"]
    if isinstance(exc, ValueError):  # an address Dask cannot parse (e.g. http://…): a usage error
        raise _bad_address(scheduler, str(exc)) from exc
    if isinstance(exc, (OSError, TimeoutError)):
        raise PrepError(f"Cannot reach the Dask scheduler at `{scheduler}` ({type(exc).__name__}).", hint=unreachable) from exc
    from distributed.comm.addressing import parse_address

    if parse_address(scheduler)[0] in ("tcp", "tls") and isinstance(exc, (TypeError, KeyError, AttributeError)):
        # Something answered over TCP, but not as a scheduler does (a worker's address: Dask calls
        # the scheduler's identity with arguments a worker's does not take).
        raise PrepError(
            f"`{scheduler}` answered, but not as a Dask scheduler ({type(exc).__name__}: {exc}); is it a worker's address?",
            hint="Give the address `dask scheduler` prints, e.g. tcp://host:8786.",
        ) from exc
    raise PrepError(f"Cannot connect to the Dask scheduler at `{scheduler}` ({type(exc).__name__}: {exc}).") from exc


def _wait_for_workers(client: Any, scheduler: str, report: Callable[..., None]) -> None:
    """Wait up to WORKER_WAIT for a first worker, saying so; a one-line error after that."""
    if client.scheduler_info().get("workers"):
        return
    report("engine", description=f"dask: the scheduler at {scheduler} has no worker yet; waiting up to {WORKER_WAIT}")
    try:
        client.wait_for_workers(1, timeout=WORKER_WAIT)
    except TimeoutError as exc:
        raise PrepError(
            f"No Dask worker joined the scheduler at `{scheduler}` within {WORKER_WAIT}.",
            hint=f"Start workers with `dask worker {scheduler}`.",
        ) from exc


@contextmanager
def _client(scheduler: str | None, workers: int | None, report: Callable[..., None] | None = None) -> Iterator[Any]:
    Client, LocalCluster = _import_dask()
    # Dask's own warnings (e.g. "Couldn't gather keys, rescheduling" after a lost worker, which it
    # recovers from) are not prep's progress lines; errors still come through, and prep reports
    # what ends a run itself, in one line.
    with _quiet_dask_logs():
        if scheduler:
            why = address_problem(scheduler)
            if why:
                raise _bad_address(scheduler, why)
            client = _connect(Client, scheduler)
            with client:
                _wait_for_workers(client, scheduler, report or (lambda *a, **k: None))
                _check_versions(client, scheduler)
                yield client
            return
        from prep.lang import default_workers

        n = workers or default_workers()
        # Worker logs stay quiet: prep reports errors itself, in one line, on the client.
        with LocalCluster(
            n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None, silence_logs=logging.CRITICAL
        ) as cluster, Client(cluster) as client:
            yield client


@contextmanager
def _quiet_dask_logs() -> Iterator[None]:
    """Dask's loggers (``distributed`` and its children, several of which set their own level)
    at ERROR or above while prep runs; their levels are restored afterwards."""
    names = ["distributed", *(n for n, lg in logging.root.manager.loggerDict.items()
                               if n.startswith("distributed.") and isinstance(lg, logging.Logger))]
    saved = {name: logging.getLogger(name).level for name in names}
    try:
        for name, level in saved.items():
            if level < logging.ERROR:
                logging.getLogger(name).setLevel(logging.ERROR)
        yield
    finally:
        for name, level in saved.items():
            logging.getLogger(name).setLevel(level)


def _versions() -> dict[str, str]:
    import polars

    import prep

    return {"polars": polars.__version__, "prep": getattr(prep, "__version__", "?")}


def _check_versions(client: Any, scheduler: str) -> None:
    """Every worker must run the client's polars and prep: row digests (exact and near duplicates,
    distinct texts) are polars' seeded hashes, the same only within one polars version, and a
    worker with another version would silently group nothing with the client's rows. Dask's own
    version check does not cover polars."""
    mine = _versions()
    for worker, theirs in sorted(client.run(_versions).items()):
        for package, version in mine.items():
            if theirs.get(package) != version:
                raise PrepError(
                    f"The Dask worker {worker} of the scheduler at `{scheduler}` runs {package} {theirs.get(package)}, "
                    f"this machine {version}; prep needs the same {package} version on every worker.",
                    hint=f'Install the same versions everywhere, e.g. pip install "{package}=={version}".',
                )


@contextmanager
def _dask_failures(what: Callable[[], str]) -> Iterator[None]:
    """Dask's own failures (a worker killed too often, a lost scheduler) as one-line prep errors."""
    from distributed import KilledWorker
    from distributed.comm.core import CommClosedError

    try:
        yield
    except KilledWorker as exc:
        raise PrepError(
            f"A Dask worker died again and again while running {what()}; the run stopped "
            "and the previous output folder is unchanged.",
            hint="Check the workers' memory and logs.",
        ) from exc
    except CommClosedError as exc:  # not every OSError: a global step on the client may raise one of its own
        raise PrepError(
            f"Lost the connection to the Dask cluster while running {what()} ({type(exc).__name__}); "
            "the previous output folder is unchanged."
        ) from exc


class _Table:
    """The table between steps: partitions on the workers (futures) or one frame on the client."""

    def __init__(self, client: Any, pipeline: Pipeline, partition_rows: int) -> None:
        self.client = client
        self.pipeline = pipeline
        self.partition_rows = partition_rows
        self.parts: list[Any] | None = None   # futures, in row order
        self.local: pl.DataFrame | None = None
        self.columns: list[str] = []
        self.in_use = False  # other tasks still read the partitions

    def remote(self) -> list[Any]:
        if self.parts is None:
            frame = self.local
            n = self.partition_rows
            self.parts = [self.client.submit(_copy, frame.slice(i, n), pure=False) for i in range(0, frame.height, n)]
            self.local = None
        return self.parts

    def collect(self) -> pl.DataFrame:
        if self.local is None:
            frames = self.client.gather(self.parts)
            schema = {c: (pl.Int64 if c == "source_row" else pl.String) for c in self.columns}
            self.local = pl.concat(frames, how="vertical") if frames else pl.DataFrame(schema=schema)
            if not self.in_use:
                self.client.cancel(self.parts)
            # else: tasks still read the partitions (signing ahead); dropping the futures lets the
            # scheduler free them once those tasks are done (cancelling would cancel the tasks too).
            self.parts = None
        return self.local


def run_pipeline_dask(
    pipeline: Pipeline,
    *,
    out: Path | None = None,
    report: Callable[..., None] | None = None,
    force: bool = False,
    scheduler: str | None = None,
    partition_rows: int | None = None,
):
    """Run ``pipeline`` on a Dask cluster; the arguments and result are those of :func:`prep.run.run_pipeline`."""
    from prep.run import _quiet, finish_run, raise_with_failure_cases, split_history, step_phase
    from prep.write import prepare_output

    report = report or _quiet
    _import_dask()  # before anything else: a missing extra is a usage error
    settings = pipeline.engine
    scheduler = scheduler or settings.scheduler
    partition_rows = partition_rows or settings.partition_rows or DEFAULT_PARTITION_ROWS
    started = time.perf_counter()
    started_at = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    out = Path(out) if out is not None else pipeline.output
    shown_out = str(out)
    prepare_output(out, [s.path for s in pipeline.sources] + [pipeline.path], shown=shown_out, force=force)
    split_history(pipeline, out)  # a missing history folder stops the run before any work

    # Workers see absolute paths (their working folder is not the client's); messages use path_text.
    remote_pipeline = dataclasses.replace(
        pipeline,
        path=pipeline.path.absolute(),
        sources=tuple(s if is_url(s.path) else dataclasses.replace(s, path=s.path.absolute()) for s in pipeline.sources),
    )
    stage = ["reading the sources"]
    with _client(scheduler, settings.workers, report) as client, _dask_failures(lambda: stage[0]):
        workers = len(client.scheduler_info().get("workers", {}))
        where = f"the scheduler at {scheduler}" if scheduler else "a local cluster"
        report("engine", description=f"dask: {where}, {workers} worker{'s' if workers != 1 else ''}, partitions of {partition_rows:,} rows")
        ledger = Ledger()
        table = _Table(client, remote_pipeline, partition_rows)
        table.columns = [*PROVENANCE_COLUMNS, *pipeline.canonical_columns]
        reads = [client.submit(_read_task, remote_pipeline, i, pure=False) for i in range(len(pipeline.sources))]
        frames = [client.submit(itemgetter(0), r) for r in reads]
        metas = client.gather([client.submit(itemgetter(1), r) for r in reads])
        del reads
        source_facts: list[SourceFacts] = []
        parts = []
        for source, frame, meta in zip(pipeline.sources, frames, metas):
            f = meta["facts"]
            source_facts.append(f)
            ledger.extend(meta["ledger"])
            report("read", source=source.name, rows=f.rows_read, unreadable=f.rows_unreadable, seconds=meta["seconds"])
            parts += [client.submit(_slice, frame, i, partition_rows) for i in range(0, meta["height"], partition_rows)]
        table.parts = parts
        del frames
        rows_read = sum(f.rows_read for f in source_facts)
        card_inputs = _merge_inputs([m["inputs"] for m in metas])

        step_facts: list[StepFacts] = []
        timings: list = []
        outputs: dict[str, pl.DataFrame] = {}
        signed_ahead, signing, ahead_seconds = False, None, 0.0
        for position, spec in enumerate(pipeline.steps):
            if step_phase(spec.name) != "table":
                continue
            stage[0] = f"step `{spec.name}`"
            if table.local is None and table.parts and _partitionable(spec, pipeline, table.columns):
                sf, timing = _run_partitioned(client, remote_pipeline, spec, table, ledger)
                step_facts.append(sf)
                timings.append(timing)
                report("step", step=spec.name, rows_in=timing.rows_in, rows_out=timing.rows_out, seconds=timing.seconds)
                continue
            if table.local is None and table.parts and _keyable(spec, remote_pipeline):

                def sign_ahead(_position: int = position, _name: str = spec.name) -> None:
                    """Start signing ahead (once); for near_duplicates itself, wait for it and remember it."""
                    nonlocal signed_ahead, signing
                    if not signed_ahead:
                        signed_ahead = True
                        signing = _start_signing(client, remote_pipeline, table, pipeline.steps[_position:])
                    if _name == "near_duplicates" and signing is not None:
                        _finish_signing(client, signing)
                        signing, table.in_use = None, False

                keyed = _run_keyed(client, remote_pipeline, spec, table, ledger, out, sign_ahead)
            else:
                keyed = None
            if keyed is not None:
                sf, timing, outs = keyed
                step_facts.append(sf)
                timings.append(timing)
                outputs.update(outs)
                report("step", step=spec.name, rows_in=timing.rows_in, rows_out=timing.rows_out, seconds=timing.seconds)
                continue
            from prep.run import apply_steps

            if table.local is None and table.parts and not signed_ahead:
                signed_ahead = True
                signing = _start_signing(client, remote_pipeline, table, pipeline.steps[position:])
            if spec.name == "near_duplicates" and signing is not None:
                ahead_seconds, signing = _finish_signing(client, signing), None
                table.in_use = False
            step_report, extra = report, 0.0
            if spec.name == "near_duplicates" and ahead_seconds:
                extra, ahead_seconds = ahead_seconds, 0.0  # its signing ran on the workers: count it here

                def step_report(event: str, _extra: float = extra, **data: Any) -> None:
                    report(event, **({**data, "seconds": data["seconds"] + _extra} if event == "step" else data))

            single = dataclasses.replace(pipeline, steps=(spec,))
            try:
                data, sf, tm, outs = apply_steps(single, table.collect(), ledger, step_report)
            except DataError as exc:
                raise_with_failure_cases(out, exc)
            if extra:
                tm = [dataclasses.replace(t, seconds=t.seconds + extra) for t in tm]
            table.local, table.columns = data, list(data.columns)
            step_facts += sf
            timings += tm
            outputs.update(outs)
        cleaned, decided, split_seconds = None, None, 0.0
        if table.local is None and table.parts:
            stage[0] = "the split"
            t0 = time.perf_counter()
            decided = _split_from_keys(client, pipeline, table, out)
            split_seconds = time.perf_counter() - t0
        else:
            stage[0] = "collecting the table"
            cleaned = table.collect()
    return finish_run(
        pipeline, out=out, shown_out=shown_out, table=cleaned, ledger=ledger, source_facts=source_facts,
        rows_read=rows_read, card_inputs=card_inputs, step_facts=step_facts, timings=timings, outputs=outputs,
        started=started, started_at=started_at, report=report, engine="dask", decided=decided,
        split_seconds=split_seconds,
    )


def _select_task(part: pl.DataFrame, columns: list[str]) -> pl.DataFrame:
    return part.select(columns)


def _split_task(part: pl.DataFrame, codes: pl.Series) -> tuple[pl.DataFrame, ...]:
    """One partition's rows of each split, in the partition's row order; ``codes`` holds each
    row's split as its position in SPLITS."""
    from prep.run import SPLITS

    return tuple(part.filter(codes == index) for index in range(len(SPLITS)))


def _split_from_keys(client: Any, pipeline: Pipeline, table: _Table, out: Path) -> tuple[Any, dict[str, pl.DataFrame]]:
    """Decide the split from the key columns (:func:`prep.run.split_key_columns`: row id, class,
    group, ``_train_only``, ``_cluster``; no text column unless the split is stratified or grouped
    by one) gathered from the partitions, exactly as the local engine does
    (:func:`prep.run.decide_split` on the rows in table order); send each partition its slice of
    the assignment (one byte per row), and gather the rows of each split. Returns (the split
    decision, the three split frames)."""
    from prep.run import SPLITS, decide_split, split_key_columns

    parts, table.parts = table.parts, None
    keys_columns = split_key_columns(pipeline, table.columns)
    frames = client.gather([client.submit(_select_task, part, keys_columns) for part in parts])
    heights = [frame.height for frame in frames]
    keys = pl.concat(frames, how="vertical")
    del frames
    split = decide_split(pipeline, keys, out)
    del keys
    codes = split.assignment.replace_strict({name: i for i, name in enumerate(SPLITS)}, return_dtype=pl.UInt8)
    pieces, offset = [], 0
    for index, height in enumerate(heights):
        pieces.append(client.submit(_split_task, parts[index], codes.slice(offset, height)))
        offset += height
    # No reference to the partitions is kept: the scheduler frees each one once its split task
    # has run, so a worker does not hold a partition and its three pieces until the end.
    del parts
    per_part = client.gather(pieces)
    del pieces
    # pl.concat does not copy (rechunk=False): the splits share the gathered pieces' memory.
    splits = {name: pl.concat([p[index] for p in per_part], how="vertical") for index, name in enumerate(SPLITS)}
    return split, splits


def _sign_task(pipeline: Pipeline, config: Any, part: pl.DataFrame) -> Any:
    """The near_duplicates step's band keys and sketches of one partition (row-local work)."""
    from prep.steps import near_duplicates

    _test_hook()
    with _as_worker_error():
        return near_duplicates.sign_ahead(part, config, list(pipeline.text))


def _start_signing(client: Any, pipeline: Pipeline, table: _Table, later: tuple) -> list[Any] | None:
    """When a ``near_duplicates`` step lies ahead, start signing every partition's compared texts
    on the workers (shingles, MinHash, band keys, sketches: row-local); the client meanwhile runs
    the global steps before it. :func:`_finish_signing` collects the results just before the step,
    which looks them up instead of signing (the same result: keys are a function of the text; a
    text changed by a step in between is simply signed by the step). Only the distinct compared
    texts and their keys and sketches travel. The futures, or None when no such step lies ahead."""
    spec = next((s for s in later if s.name == "near_duplicates"), None)
    if spec is None:
        return None
    table.in_use = True
    # Lowest priority: the keyed steps' tasks before it run first, the signing fills the gaps.
    return [client.submit(_sign_task, pipeline, spec.config, p, pure=False, priority=-1) for p in table.parts]


def _finish_signing(client: Any, futures: list[Any]) -> float:
    """Wait for the signing started by :func:`_start_signing` and remember its results on the
    client; returns the seconds waited (counted in the near_duplicates step's time)."""
    from prep.neardup.search import remember_signed

    t0 = time.perf_counter()
    results = client.gather(futures)
    remember_signed([r for r in results if r is not None])
    return time.perf_counter() - t0


def _keyable(spec: Any, pipeline: Pipeline) -> bool:
    """Whether the step decides from keys here (``KEYED``, and its ``can_key`` if it has one)."""
    from prep.run import step_context

    module = step_module(spec.name)
    if not getattr(module, "KEYED", False):
        return False
    can_key = getattr(module, "can_key", None)
    return can_key is None or bool(can_key(spec.config, step_context(pipeline, spec.name, Ledger())))


def _keys_task(pipeline: Pipeline, name: str, config: Any, part: pl.DataFrame) -> pl.DataFrame:
    """A keyed step's keys of one partition (row-local; texts as digests)."""
    from prep.run import step_context

    _test_hook()
    with _as_worker_error():
        ctx = step_context(pipeline, name, Ledger())
        return step_module(name).keys(part, config, ctx, compact=True)


def _texts_task(pipeline: Pipeline, name: str, config: Any, part: pl.DataFrame, rows: Any) -> pl.Series:
    """The compared texts of ``rows`` (positions in this partition) of a step that fetches texts."""
    from prep.run import step_context

    _test_hook()
    with _as_worker_error():
        ctx = step_context(pipeline, name, Ledger())
        return step_module(name).fetch_texts(part, config, ctx, rows)


def _fetcher(client: Any, pipeline: Pipeline, spec: Any, parts: list[Any], heights: list[int]) -> Callable:
    """``fetch(rows)``: the compared texts of the table's ``rows`` (positions, any order), each
    partition asked only for its own rows (one task per partition that holds any)."""
    import numpy as np

    ends = np.cumsum(np.asarray(heights, dtype=np.int64))
    starts = ends - np.asarray(heights, dtype=np.int64)

    def fetch(rows: Any) -> pl.Series:
        rows = np.asarray(rows, dtype=np.int64)
        wanted = np.unique(rows)
        which = np.searchsorted(ends, wanted, side="right")
        futures = []
        for k in np.unique(which).tolist():
            local = wanted[which == k] - starts[k]
            futures.append(client.submit(_texts_task, pipeline, spec.name, spec.config, parts[k], local, pure=False))
        got = client.gather(futures)
        texts = pl.concat(got) if got else pl.Series([], dtype=pl.String)
        return texts.gather(np.searchsorted(wanted, rows)) if rows.size else texts

    return fetch


def _carry_task(part: pl.DataFrame, plan: Any) -> pl.DataFrame:
    """A keyed step's decision carried out on one partition (rows kept, columns replaced)."""
    return plan.carry_out(part)


def _run_keyed(client: Any, pipeline: Pipeline, spec: Any, table: _Table, ledger: Ledger, out: Path,
               sign_ahead: Callable[[], Any]):
    """A keyed step (``KEYED`` in its module, see :mod:`prep.steps.base`): its keys per partition
    on the workers, its decision on the client over the keys of the whole table (provenance,
    label, 128 bits of digest per row: never a text), the decision carried out per partition."""
    from prep.run import raise_with_failure_cases, step_context, step_record

    t0 = time.perf_counter()
    parts = table.remote()
    futures = [client.submit(_keys_task, pipeline, spec.name, spec.config, p, pure=False) for p in parts]
    sign_ahead()  # queued after the keys: the workers sign while the client decides
    module = step_module(spec.name)
    frames = client.gather(futures)
    del futures
    heights = [f.height for f in frames]
    if not sum(heights):  # no rows left: the step runs on the (empty) collected table instead
        return None
    keys = pl.concat(frames, how="vertical")
    del frames
    ctx = step_context(pipeline, spec.name, ledger)
    ledger_rows = ledger.frame().height
    try:
        if getattr(module, "FETCHES_TEXTS", False):
            plan = module.decide(keys, spec.config, ctx, fetch=_fetcher(client, pipeline, spec, parts, heights))
        else:
            plan = module.decide(keys, spec.config, ctx)
    except DataError as exc:
        exc.outputs = dict(ctx.outputs)
        raise_with_failure_cases(out, exc)
    rows_in = keys.height
    step_facts, timing = step_record(
        spec, ctx.facts, rows_in, plan.rows_out(rows_in), ledger.frame().slice(ledger_rows), time.perf_counter() - t0
    )
    offsets = [sum(heights[:i]) for i in range(len(heights))]
    table.parts = [
        client.submit(_carry_task, p, plan.part(o, h), pure=False) for p, o, h in zip(parts, offsets, heights)
    ]
    table.columns = table.columns + [c.name for c in plan.columns if c.name not in table.columns]
    return step_facts, timing, dict(ctx.outputs)


def _partitionable(spec: Any, pipeline: Pipeline, columns: list[str]) -> bool:
    if spec.name == "normalise":
        return bool(spec.config.labels) and _normalise_partitionable(spec.config, pipeline, columns)
    return spec.name in MERGERS


def _run_partitioned(client: Any, pipeline: Pipeline, spec: Any, table: _Table, ledger: Ledger):
    """One row-local step over every partition; its ledger rows and merged facts on the client."""
    from prep.run import step_record

    t0 = time.perf_counter()
    parts = table.remote()
    rows_in = 0
    if spec.name == "normalise":
        first = [client.submit(_step_task, pipeline, spec.name, spec.config, p, "normalise-1", pure=False) for p in parts]
        metas1 = client.gather([client.submit(itemgetter(1), r) for r in first])
        mid = [client.submit(itemgetter(0), r) for r in first]
        del first
        spellings = [m["extra"]["label_counts"] for m in metas1]
        counts = pl.concat(spellings) if spellings else pl.DataFrame(schema={"spelling": pl.String, "n": pl.UInt32})
        mapping, merges = _label_mapping(counts)
        phase2 = {"mapping": mapping, "unicode_form": spec.config.unicode_form}
        second = [client.submit(_step_task, pipeline, spec.name, phase2, p, "normalise-2", pure=False) for p in mid]
        metas = client.gather([client.submit(itemgetter(1), r) for r in second])
        new_parts = [client.submit(itemgetter(0), r) for r in second]
        del second, mid
        changed = _sum_dicts([m["facts"].get("changed_cells", {}) for m in metas1])
        changed[pipeline.label] = sum(m["extra"]["label_changed"] for m in metas)
        columns = metas1[0]["facts"]["columns"]
        facts = {"columns": columns, "changed_cells": {c: changed.get(c, 0) for c in sorted(changed)}, "label_merges": merges}
        rows_in = sum(m["rows_in"] for m in metas1)
        calls = _merge_calls(metas1) + _merge_calls(metas)
    else:
        results = [client.submit(_step_task, pipeline, spec.name, spec.config, p, "apply", pure=False) for p in parts]
        metas = client.gather([client.submit(itemgetter(1), r) for r in results])
        new_parts = [client.submit(itemgetter(0), r) for r in results]
        del results
        rows_in = sum(m["rows_in"] for m in metas)
        facts = MERGERS[spec.name]([m["facts"] for m in metas], [m["extra"] for m in metas])
        calls = _merge_calls(metas)
    table.parts = new_parts
    if metas:
        table.columns = list(metas[0]["columns"])
    ledger_rows = ledger.frame().height
    for frame in calls:
        ledger.extend(frame)
    rows_out = sum(m["rows_out"] for m in metas)
    return step_record(spec, facts, rows_in, rows_out, ledger.frame().slice(ledger_rows), time.perf_counter() - t0)

