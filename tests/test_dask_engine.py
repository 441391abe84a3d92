"""The Dask engine equals the local engine, survives a killed worker, and fails in one line.

The reference is the local engine itself (prep.run with engine "local"), run on the same demo:
the Dask engine must give the same split files, the same ledger, the same duplicates.parquet and
the same card.json apart from its `engine` field (the issue's definition of "equal"; compared
byte for byte, and after sorting by row_id). A real `distributed.LocalCluster` of two worker
processes runs it, with partitions of 300 rows so that every source is cut into several
partitions and the per-partition facts really have to be merged.

The demo pipeline is used without `baseline` and `suspect_labels` (cross-validation, most of the
demo's time): both run after the split, on the client, in `prep.run.finish_run`, the same code
path for both engines, so leaving them out does not hide a difference between the engines.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import polars as pl
import pytest

distributed = pytest.importorskip("distributed")
import dask  # noqa: E402

from prep.cli import cli  # noqa: E402
from prep.errors import PipelineError, PrepError  # noqa: E402
from prep.pipeline import load_pipeline  # noqa: E402
from prep.run import run_pipeline  # noqa: E402

REPO = Path(__file__).resolve().parent.parent
SPLITS = ("train", "validation", "test")
PARTITION_ROWS = 300  # the demo's sources hold 450-1,050 rows: 2-4 partitions each, 11 in all
AFTER_SPLIT = ("baseline", "suspect_labels")


def _demo_copy(root: Path) -> Path:
    """The demo (exports, pipeline without the after-split steps, schema) copied under ``root``."""
    shutil.copytree(REPO / "sample_inputs" / "exports", root / "sample_inputs" / "exports")
    shutil.copytree(REPO / "schemas", root / "schemas")
    text = (REPO / "sample_inputs" / "pipeline.yaml").read_text(encoding="utf-8")
    lines = [line for line in text.splitlines() if not line.lstrip().startswith(tuple(f"- {s}" for s in AFTER_SPLIT))]
    path = root / "sample_inputs" / "pipeline.yaml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    return _demo_copy(tmp_path_factory.mktemp("demo"))


@pytest.fixture(scope="module")
def local_out(demo, tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("local") / "out"
    run_pipeline(load_pipeline(demo), out=out)
    return out


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    """Two worker processes, one thread each; a killed worker's task is retried once, not twice.

    Worker processes inherit PREP_DASK_TEST_KILL (the control file of prep.dask_engine._test_hook)
    when they start; the tests write ``once`` or ``always`` into that file.
    """
    control = tmp_path_factory.mktemp("kill") / "control"
    saved = os.environ.get("PREP_DASK_TEST_KILL")
    # Kept set while the cluster lives: the nanny starts a replacement worker with this environment.
    os.environ["PREP_DASK_TEST_KILL"] = str(control)
    try:
        with dask.config.set({"distributed.scheduler.allowed-failures": 1}):
            local = distributed.LocalCluster(
                n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None, silence_logs=50
            )
        with local:
            yield local, control
    finally:
        if saved is None:
            os.environ.pop("PREP_DASK_TEST_KILL")
        else:
            os.environ["PREP_DASK_TEST_KILL"] = saved


def _watch_keyed(monkeypatch, modules, applied_here: list, keys_seen: dict) -> None:
    """Record a keyed step's `apply` and `keys` run in this process (the client; neither should be)
    and the schema of the keys its `decide` gets."""
    for module in modules:
        real_decide = module.decide
        for name in ("apply", "keys"):
            monkeypatch.setattr(module, name, lambda *a, _m=f"{module.NAME}.{name}", **k: applied_here.append(_m))
        monkeypatch.setattr(
            module, "decide",
            lambda keys, *a, _m=module.NAME, _d=real_decide, **k: keys_seen.setdefault(_m, keys.schema) and _d(keys, *a, **k),
        )


def _assert_no_text(keys_seen: dict) -> None:
    """Keys hold provenance, the label, digests, flags, lengths and times: no other string column."""
    for step, schema in keys_seen.items():
        strings = [c for c, t in schema.items() if t == pl.String and c not in ("row_id", "source", "_label")]
        assert not strings, f"{step}: keys hold the string columns {strings}"


def _assert_same_outputs(local: Path, other: Path) -> None:
    for name in [*(f"{s}.parquet" for s in SPLITS), "set_aside.parquet", "duplicates.parquet"]:
        a, b = pl.read_parquet(local / name), pl.read_parquet(other / name)
        key = ["row_id"] if name != "duplicates.parquet" else a.columns
        assert a.sort(key).equals(b.sort(key)), name
        assert (local / name).read_bytes() == (other / name).read_bytes(), name  # even the row order
    card_a = json.loads((local / "card.json").read_text())
    card_b = json.loads((other / "card.json").read_text())
    assert card_a.pop("engine") == "local" and card_b.pop("engine") == "dask"
    for key in card_a:
        assert card_a[key] == card_b[key], f"card.json differs in `{key}`"
    assert list(card_a) == list(card_b)


def test_dask_engine_equals_local_engine_with_a_worker_killed_mid_run(demo, local_out, cluster, tmp_path, monkeypatch):
    # One worker kills itself (SIGKILL) at the start of the first step task (prep.dask_engine._test_hook,
    # fires only under pytest); Dask restarts it and runs its tasks again, and the result must not change.
    # The near-duplicate texts are signed on the workers: the client (this process) signs none.
    from prep.neardup import minhash

    from prep import dask_engine
    from prep.steps import exact_duplicates, near_duplicates, rare_classes, schema

    signed_here = []
    real_signatures = minhash.signatures_by
    monkeypatch.setattr(minhash, "signatures_by", lambda *a, **k: signed_here.append(1) or real_signatures(*a, **k))
    # Keyed steps: the client sees only their keys (provenance, label, digests), never the table:
    # it runs neither their `apply` nor their `keys` (those run on the workers). Every global step
    # of the demo is keyed, so the table first comes to the client after the split, as its three splits.
    applied_here, keys_seen, fetched = [], {}, []
    _watch_keyed(monkeypatch, (exact_duplicates, near_duplicates, schema, rare_classes), applied_here, keys_seen)
    real_fetcher = dask_engine._fetcher

    def counting_fetcher(*args):
        fetch = real_fetcher(*args)
        return lambda rows: fetched.append(len(rows)) or fetch(rows)

    monkeypatch.setattr(dask_engine, "_fetcher", counting_fetcher)
    # The split is decided from its key columns alone, and the table is never collected whole:
    # the client gets the rows of each split after the decision. Until then, no frame the client
    # gathers from the workers holds a text column.
    from prep import run as run_module

    split_keys, collected, gathered_before_split = [], [], []
    real_decide_split = run_module.decide_split
    monkeypatch.setattr(run_module, "decide_split", lambda p, keys, out: split_keys.append(keys.schema) or real_decide_split(p, keys, out))
    monkeypatch.setattr(dask_engine._Table, "collect", lambda self: collected.append(1) or pl.DataFrame())
    real_gather = distributed.Client.gather

    def recording_gather(self, futures, *args, **kwargs):
        result = real_gather(self, futures, *args, **kwargs)
        if not split_keys:
            stack = [result]
            while stack:
                item = stack.pop()
                if isinstance(item, (list, tuple)):
                    stack.extend(item)
                elif isinstance(item, pl.DataFrame):
                    gathered_before_split.append(item.columns)
        return result

    monkeypatch.setattr(distributed.Client, "gather", recording_gather)
    local, control = cluster
    control.write_text("once")
    out = tmp_path / "dask-out"
    result = run_pipeline(
        load_pipeline(demo), out=out, engine="dask", scheduler=local.scheduler_address, partition_rows=PARTITION_ROWS
    )
    assert not signed_here, "the client signed texts the workers had signed"
    assert not applied_here, f"the client ran {applied_here} on the whole table"
    assert set(keys_seen) == {"exact_duplicates", "near_duplicates", "schema", "rare_classes"}
    _assert_no_text(keys_seen)
    assert not collected, "the client collected the whole table"
    assert len(split_keys) == 1 and set(split_keys[0]) == {"row_id", "label", "_cluster"}, split_keys
    assert gathered_before_split and {"row_id", "label", "_cluster"} in map(set, gathered_before_split)
    texts = [c for c in gathered_before_split if {"title", "body"} & set(c)]
    assert not texts, f"frames with text columns reached the client before the split: {texts[:3]}"
    # Texts travel only for the rows whose pairs the search verifies exactly (the keys were signed
    # ahead on the workers, so none is fetched for signing).
    rows_in = {s["name"]: s["rows_in"] for s in json.loads((out / "card.json").read_text())["steps"]}
    assert 0 < sum(fetched) < rows_in["near_duplicates"] / 2
    assert control.with_name("control.fired").exists() and not control.exists(), "the test hook did not kill a worker"
    _assert_same_outputs(local_out, out)
    # Every input row is in exactly one split or in the ledger.
    ids = pl.concat(
        [pl.read_parquet(out / f"{s}.parquet")["row_id"] for s in SPLITS] + [pl.read_parquet(out / "set_aside.parquet")["row_id"]]
    )
    assert ids.len() == ids.n_unique() == result.rows_read
    steps = {s["name"]: s for s in json.loads((out / "card.json").read_text())["steps"]}
    assert steps["language"]["facts"]["distinct_texts"] > 0  # merged from hashes, compared above


KEYED_VARIANTS = {
    "latest-merge": ("{keep: latest, time_column: opened, conflicts: set_aside}", "{policy: merge, merge_into: Other}"),
    "earliest-train-only": (  # and the split grouped by customer: groups, links and train-only rows at once
        "{keep: earliest, time_column: opened, conflicts: keep_first, case_sensitive: true}",
        "{policy: train_only, min_rows: 30}",
        "split: {train: 0.8, validation: 0.1, test: 0.1, seed: 7, group: customer}",
    ),
    "first-set-aside": ("{keep: first, conflicts: majority}", "{policy: set_aside, min_rows: 40}"),
}


@pytest.mark.parametrize("variant", list(KEYED_VARIANTS))
def test_keyed_steps_decide_from_keys_alone(variant, demo, cluster, tmp_path, monkeypatch):
    # exact_duplicates and rare_classes on partitions (no global step before them collects the
    # table): the client gets their keys only, never runs their `apply`, and the outputs equal
    # the local engine's byte for byte, for each keep rule, conflict rule and rare-class policy.
    from prep.steps import exact_duplicates, rare_classes

    exact, rare, *split = KEYED_VARIANTS[variant]
    lines = []
    for line in demo.read_text(encoding="utf-8").splitlines():
        if line.lstrip().startswith("- schema") or (line.lstrip().startswith("- near_duplicates") and not split):
            continue
        if line.lstrip().startswith("- exact_duplicates"):
            line = f"  - exact_duplicates: {exact}"
        if line.lstrip().startswith("- rare_classes"):
            line = f"  - rare_classes: {rare}"
        if line.startswith("split:") and split:
            line = split[0]
        lines.append(line)
    path = demo.with_name(f"keyed-{variant}.yaml")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    local_result = run_pipeline(load_pipeline(path), out=tmp_path / "local")

    applied_here, keys_seen = [], {}
    _watch_keyed(monkeypatch, (exact_duplicates, rare_classes), applied_here, keys_seen)
    local, _ = cluster
    out = tmp_path / "dask"
    run_pipeline(load_pipeline(path), out=out, engine="dask", scheduler=local.scheduler_address, partition_rows=PARTITION_ROWS)
    assert not applied_here and set(keys_seen) == {"exact_duplicates", "rare_classes"}
    _assert_no_text(keys_seen)
    assert keys_seen["exact_duplicates"]["_k0"] == pl.UInt64  # a digest of the compared values
    _assert_same_outputs(local_result.output, out)
    steps = {s["name"]: s for s in json.loads((out / "card.json").read_text())["steps"]}
    assert steps["rare_classes"]["facts"]["classes"], "no rare class: the variant tests nothing"
    assert steps["exact_duplicates"]["facts"]["groups"] > 0
    if split:  # the groups, the near-duplicate clusters and the train-only rows all shaped the split
        card = json.loads((out / "card.json").read_text())
        assert card["splits"]["config"]["group"] == "customer"
        notes = " ".join(card["splits"]["notes"])
        assert "went to train with their group" in notes, notes
        assert steps["near_duplicates"]["facts"]["clusters"] > 0


def test_worker_killed_every_time_ends_in_one_line_and_keeps_the_previous_output(demo, local_out, cluster, tmp_path):
    local, control = cluster
    out = tmp_path / "out"
    shutil.copytree(local_out, out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    control.write_text("always")
    try:
        with pytest.raises(PrepError) as info:
            run_pipeline(load_pipeline(demo), out=out, engine="dask", scheduler=local.scheduler_address, partition_rows=PARTITION_ROWS)
    finally:
        control.unlink()
    message = str(info.value)
    assert "worker died" in message and "previous output folder is unchanged" in message and "\n" not in message
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert sorted(p.name for p in out.parent.iterdir()) == ["out"]  # no temporary folder left behind


def _one_error_line(result) -> str:
    lines = [line for line in result.stderr.splitlines() if line.startswith("Error:")]
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.output + result.stderr
    return lines[0]


def test_unreachable_scheduler_is_one_line_exit_1(demo, tmp_path, cli_runner, monkeypatch):
    from prep import dask_engine

    monkeypatch.setattr(dask_engine, "CONNECT_TIMEOUT", "1s")
    result = cli_runner.invoke(cli, ["run", str(demo), "--out", str(tmp_path / "o"), "--engine", "dask", "--scheduler", "tcp://127.0.0.1:9"])
    assert result.exit_code == 1
    assert "Cannot reach the Dask scheduler at `tcp://127.0.0.1:9`" in _one_error_line(result)
    assert not (tmp_path / "o").exists() or not any((tmp_path / "o").iterdir())


def test_malformed_scheduler_address_is_a_usage_error(demo, tmp_path, cli_runner):
    # A scheme Dask has no transport for is a mistake in the command line (exit 2), not a network failure.
    result = cli_runner.invoke(cli, ["run", str(demo), "--out", str(tmp_path / "o"), "--engine", "dask", "--scheduler", "http://127.0.0.1:9"])
    assert result.exit_code == 2
    assert "`http://127.0.0.1:9` is not a Dask scheduler address" in _one_error_line(result)


def test_an_address_that_never_answers_is_one_line_not_a_hang(demo, tmp_path, cli_runner, monkeypatch):
    # A port that accepts the connection and never replies (as a web port does to Dask's protocol)
    # hung the run with no end (found by a new user on the dashboard's port).
    import socket
    import time

    from prep import dask_engine

    monkeypatch.setattr(dask_engine, "CONNECT_TIMEOUT", "1s")
    with socket.socket() as server:
        server.bind(("127.0.0.1", 0))
        server.listen(8)
        port = server.getsockname()[1]
        t0 = time.perf_counter()
        result = cli_runner.invoke(cli, ["run", str(demo), "--out", str(tmp_path / "o"), "--engine", "dask",
                                         "--scheduler", f"tcp://127.0.0.1:{port}"])
        seconds = time.perf_counter() - t0
    assert result.exit_code == 1
    line = _one_error_line(result)
    assert f"127.0.0.1:{port}" in line and ("No Dask scheduler answered" in line or "Cannot reach" in line), line
    assert seconds < 30
    assert not (tmp_path / "o").exists() or not any((tmp_path / "o").iterdir())


def test_a_scheduler_without_workers_is_one_line_after_a_wait(demo, tmp_path, cli_runner, monkeypatch):
    # A scheduler with no worker waited forever (found by a new user); now it waits WORKER_WAIT.
    from prep import dask_engine

    monkeypatch.setattr(dask_engine, "WORKER_WAIT", "1s")
    with distributed.LocalCluster(n_workers=0, processes=False, dashboard_address=":0", silence_logs=50) as empty:
        result = cli_runner.invoke(cli, ["run", str(demo), "--out", str(tmp_path / "o"), "--engine", "dask",
                                         "--scheduler", empty.scheduler_address])
    assert result.exit_code == 1
    line = _one_error_line(result)
    assert f"No Dask worker joined the scheduler at `{empty.scheduler_address}` within 1s" in line, line
    assert "has no worker yet; waiting up to 1s" in result.stderr


def test_a_worker_address_is_named_as_not_a_scheduler(demo, cluster, tmp_path, cli_runner):
    # Giving a worker's address ended in "unexpected TypeError ... probably a bug in prep".
    local, _ = cluster
    with distributed.Client(local.scheduler_address) as client:
        worker = sorted(client.scheduler_info()["workers"])[0]
    result = cli_runner.invoke(cli, ["run", str(demo), "--out", str(tmp_path / "o"), "--engine", "dask", "--scheduler", worker])
    assert result.exit_code == 1
    line = _one_error_line(result)
    assert f"`{worker}` answered, but not as a Dask scheduler" in line, line
    assert "bug in prep" not in result.stderr


def test_dask_warnings_are_silenced_while_prep_runs_and_restored_after():
    # Found in review: raising only the `distributed` logger left `distributed.client` (its own
    # level, WARNING) printing "Couldn't gather keys, rescheduling" into prep's stderr.
    import logging

    from prep import dask_engine

    client_logger = logging.getLogger("distributed.client")
    before = client_logger.level
    assert client_logger.isEnabledFor(logging.WARNING)
    with dask_engine._quiet_dask_logs():
        assert not client_logger.isEnabledFor(logging.WARNING)
        assert not logging.getLogger("distributed.worker").isEnabledFor(logging.WARNING)
        assert client_logger.isEnabledFor(logging.ERROR)
    assert client_logger.level == before and client_logger.isEnabledFor(logging.WARNING)


def test_an_unusable_transport_is_a_usage_error(demo, tmp_path, cli_runner):
    # ucx:// without its package ended in a misleading "not a scheduler" and a traceback at exit.
    from prep.dask_engine import address_problem

    if address_problem("ucx://127.0.0.1:1") is None:
        pytest.skip("the ucx transport is installed here")
    result = cli_runner.invoke(cli, ["run", str(demo), "--out", str(tmp_path / "o"), "--engine", "dask", "--scheduler", "ucx://127.0.0.1:1"])
    assert result.exit_code == 2
    assert "the `ucx` transport cannot be used here" in _one_error_line(result)


def test_empty_scheduler_address_is_a_usage_error(demo, tmp_path, cli_runner):
    # `--scheduler ""` silently ran a local cluster.
    result = cli_runner.invoke(cli, ["run", str(demo), "--out", str(tmp_path / "o"), "--engine", "dask", "--scheduler", ""])
    assert result.exit_code == 2
    assert "--scheduler needs an address" in _one_error_line(result)
    assert not (tmp_path / "o").exists()


def test_malformed_scheduler_in_the_pipeline_file_names_the_file_and_key(demo, cli_runner):
    # Found by a new user: `prep check` said ok, and the run's error named neither file nor line.
    path = demo.with_name("bad-scheduler.yaml")
    path.write_text(demo.read_text(encoding="utf-8") + "engine: {name: dask, scheduler: garbage}\n", encoding="utf-8")
    for command in (["check", str(path)], ["run", str(path), "--out", str(path.with_name("bad-out"))]):
        result = cli_runner.invoke(cli, command)
        assert result.exit_code == 2, (command, result.stderr)
        line = _one_error_line(result)
        assert "bad-scheduler.yaml" in line and "engine.scheduler" in line and "garbage" in line, line


def test_scheduler_without_dask_engine_is_a_usage_error(demo, tmp_path, cli_runner):
    result = cli_runner.invoke(cli, ["run", str(demo), "--out", str(tmp_path / "o"), "--scheduler", "tcp://127.0.0.1:9"])
    assert result.exit_code == 2
    assert "--scheduler needs the Dask engine" in result.stderr


def test_engine_setting_in_the_pipeline_file(demo, tmp_path):
    text = demo.read_text(encoding="utf-8")
    for value, expected in (("dask", ("dask", None, 100_000)), ("{name: dask, scheduler: 'tcp://h:8786', partition_rows: 50}", ("dask", "tcp://h:8786", 50))):
        path = demo.with_name(f"engine-{len(value)}.yaml")
        path.write_text(text + f"engine: {value}\n", encoding="utf-8")
        e = load_pipeline(path).engine
        assert (e.name, e.scheduler, e.partition_rows) == expected
    assert load_pipeline(demo).engine.name == "local"
    bad = demo.with_name("engine-bad.yaml")
    bad.write_text(text + "engine: {name: dask, partition_rows: 0}\n", encoding="utf-8")
    with pytest.raises(PipelineError) as info:
        load_pipeline(bad)
    line = len(text.splitlines()) + 1
    assert str(info.value) == f"{bad}, line {line}: `engine.partition_rows`: must be 1 or more."


def test_dask_not_installed_names_the_extra(monkeypatch):
    import sys

    from prep import dask_engine

    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    with pytest.raises(PipelineError) as info:
        dask_engine._import_dask()
    assert info.value.exit_code == 2 and 'pip install -e ".[dask]"' in str(info.value)


def test_input_a_worker_cannot_read_is_one_line(demo):
    import dataclasses

    from prep import dask_engine

    pipeline = load_pipeline(demo)
    gone = dataclasses.replace(pipeline.sources[0], path=demo.parent / "exports" / "not-on-this-worker.csv")
    pipeline = dataclasses.replace(pipeline, sources=(gone, *pipeline.sources[1:]))
    with pytest.raises(dask_engine.WorkerError) as info:
        dask_engine._read_task(pipeline, 0)
    assert info.value.exit_code == 2
    assert "`exports/desk.csv` cannot be read on a Dask worker" in str(info.value)
    # It survives the trip from a worker process to the client (pickling) with its exit code.
    import pickle

    again = pickle.loads(pickle.dumps(info.value))
    assert (str(again), again.exit_code) == (str(info.value), 2)


def test_partition_merge_order_of_ledger_calls():
    # missing sets rows aside in several calls (empty_text, then missing_label ...); the merged
    # ledger lists them call by call, partitions in order, as one process over the whole table would.
    from prep.dask_engine import _merge_calls

    def frame(tag):
        return pl.DataFrame({"row_id": [tag]})

    metas = [{"calls": [frame("p1-a"), None, frame("p1-c")]}, {"calls": [frame("p2-a"), frame("p2-b"), None]}]
    assert [f["row_id"][0] for f in _merge_calls(metas)] == ["p1-a", "p2-a", "p2-b", "p1-c"]


def test_url_sources_are_opened_by_the_workers(small_pipeline, cluster, tmp_path):
    # Inputs as file:// URLs: the read task opens them on a worker through fsspec (no path rewriting on
    # the client). Reference: the local engine on the same pipeline with plain paths.
    local, _ = cluster
    plain = run_pipeline(load_pipeline(small_pipeline), out=tmp_path / "plain")
    text = small_pipeline.read_text(encoding="utf-8")
    for name in ("desk.csv", "web.jsonl"):
        text = text.replace(f"path: {name}\n", f"path: {(small_pipeline.parent / name).as_uri()}\n")
    urls = small_pipeline.with_name("urls.yaml")
    urls.write_text(text, encoding="utf-8")
    out = tmp_path / "dask-urls"
    run_pipeline(load_pipeline(urls), out=out, engine="dask", scheduler=local.scheduler_address, partition_rows=10)
    for name in [*(f"{s}.parquet" for s in SPLITS), "set_aside.parquet", "duplicates.parquet"]:
        assert (plain.output / name).read_bytes() == (out / name).read_bytes(), name


def test_url_input_a_worker_cannot_read_is_one_line(small_pipeline, tmp_path):
    import dataclasses

    from prep import dask_engine

    pipeline = load_pipeline(small_pipeline)
    url = (tmp_path / "not-on-this-worker.csv").as_uri()
    gone = dataclasses.replace(pipeline.sources[0], path=url, path_text=url)
    pipeline = dataclasses.replace(pipeline, sources=(gone, *pipeline.sources[1:]))
    with pytest.raises(dask_engine.WorkerError) as info:
        dask_engine._read_task(pipeline, 0)
    assert info.value.exit_code == 2 and "\n" not in str(info.value)
    assert f"input `{url}` of source `desk` cannot be read on a Dask worker: it does not exist." in str(info.value)


def test_workers_with_another_polars_are_refused_in_one_line():
    # Row digests are polars' seeded hashes, equal only within one polars version: a worker with
    # another version would silently group nothing with the others' rows, so the run must refuse.
    import polars

    from prep import dask_engine

    class FakeClient:
        def __init__(self, version):
            self.version = version

        def run(self, function):
            return {"tcp://10.0.0.5:4000": {**function(), "polars": self.version}}

    dask_engine._check_versions(FakeClient(polars.__version__), "tcp://10.0.0.4:8786")  # same: accepted
    with pytest.raises(PrepError) as info:
        dask_engine._check_versions(FakeClient("0.0.1"), "tcp://10.0.0.4:8786")
    message = str(info.value)
    assert "\n" not in message and "polars 0.0.1" in message and f"this machine {polars.__version__}" in message


def test_keyed_step_with_no_rows_left_runs_on_the_collected_table(small_pipeline, tmp_path):
    # When every partition is empty the keys hold no row (and no table-level schema failure), so
    # the step must see the (empty) table itself, as the local engine does: _run_keyed declines.
    # A client stand-in that runs each task at once (no cluster needed for this decision).
    from prep import dask_engine
    from prep.pipeline import PROVENANCE_COLUMNS

    class Immediate:
        def submit(self, function, *args, **kwargs):
            return function(*args)

        def gather(self, values):
            return list(values)

    pipeline = load_pipeline(small_pipeline)
    spec = next(s for s in pipeline.steps if s.name == "exact_duplicates")
    table = dask_engine._Table(Immediate(), pipeline, 10)
    table.columns = [*PROVENANCE_COLUMNS, *pipeline.canonical_columns]
    empty = pl.DataFrame(schema={c: (pl.Int64 if c == "source_row" else pl.String) for c in table.columns})
    table.parts = [empty, empty]
    ledger = dask_engine.Ledger()
    assert dask_engine._run_keyed(Immediate(), pipeline, spec, table, ledger, tmp_path / "o", lambda: None) is None
    assert len(ledger) == 0
    table.parts = [empty, empty.vstack(pl.DataFrame({c: ["x:0" if c != "source_row" else 0] for c in table.columns},
                                                    schema=empty.schema))]
    sf, timing, _ = dask_engine._run_keyed(Immediate(), pipeline, spec, table, ledger, tmp_path / "o", lambda: None)
    assert (sf.rows_in, sf.rows_out) == (1, 1)


def test_schema_failure_from_keys_matches_the_local_engine(small_pipeline, cluster, tmp_path):
    # Too many rows fail the schema (a length check every body fails): both engines stop with the
    # same message and write the same failure cases beside the output folder, which stays untouched.
    import pandera.polars as pa

    from prep.steps.schema import dump_schema

    schema = pa.DataFrameSchema({"row_id": pa.Column(str, unique=True), "body": pa.Column(str, checks=[pa.Check.str_length(1, 5)])})
    (small_pipeline.parent / "s.yaml").write_text(dump_schema(schema), encoding="utf-8")
    text = small_pipeline.read_text(encoding="utf-8").replace(
        "  - rare_classes: {}\n", "  - schema: {file: s.yaml}\n  - rare_classes: {}\n"
    )
    path = small_pipeline.with_name("with-schema.yaml")
    path.write_text(text, encoding="utf-8")
    local, _ = cluster
    messages, cases = [], []
    for engine, out in (("local", tmp_path / "a" / "out"), ("dask", tmp_path / "b" / "out")):
        extra = {"scheduler": local.scheduler_address, "partition_rows": 10} if engine == "dask" else {}
        with pytest.raises(PrepError) as info:
            run_pipeline(load_pipeline(path), out=out, engine=engine, **extra)
        messages.append(str(info.value).replace(str(out.parent), "<dir>"))
        cases.append(pl.read_parquet(out.parent / "out.schema_failures.parquet"))
        assert not out.exists()
    assert messages[0] == messages[1] and "The schema check failed for" in messages[0]
    assert cases[0].equals(cases[1]) and cases[0].height > 10
