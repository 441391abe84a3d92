"""The output folder: prep replaces only what it wrote, `--force` where it makes sense, stale temporary
folders of killed runs, CSV formula neutralisation, and OS errors translated into prep's errors."""

from __future__ import annotations

import csv
import io
import json
import os
import subprocess
import sys

import polars as pl
import pytest

from hostile_cases import csv_bytes, snapshot
from prep.cli import cli
from prep.errors import OutputError
from prep.write import MARKER, OutputFolder, clean_stale, is_prep_output, leftover_name, verify_output


def test_non_empty_folder_without_manifest_is_refused(hostile):
    case = hostile.write({"in.csv": csv_bytes()}, previous_output=False)
    case.out.mkdir()
    (case.out / "notes.txt").write_text("mine", encoding="utf-8")
    case.run().fails(exit_code=1, mentions=["output folder", "not written by prep", "--force"])


def test_force_replaces_a_folder_prep_did_not_write(hostile):
    case = hostile.write({"in.csv": csv_bytes()}, previous_output=False)
    case.out.mkdir()
    (case.out / "notes.txt").write_text("mine", encoding="utf-8")
    outcome = case.run("--force")
    outcome.succeeds()
    assert not (case.out / "notes.txt").exists()


def test_folder_holding_an_input_is_refused_even_with_force(hostile):
    case = hostile.write({"out/in.csv": csv_bytes()}, path="out/in.csv", previous_output=False)
    outcome = case.run("--force")
    outcome.before = snapshot(case.out)
    outcome.fails(exit_code=1, mentions=["contains an input file"])
    assert (case.out / "in.csv").read_bytes() == csv_bytes()


def test_folder_holding_the_pipeline_file_is_refused_even_with_force(hostile):
    case = hostile.write({"in.csv": csv_bytes()}, previous_output=False)
    outcome = case.run("--force", "--out", str(case.folder))
    outcome.out = case.folder
    outcome.before = snapshot(case.folder)
    outcome.fails(exit_code=1, mentions=["contains an input file"])


def test_output_path_that_is_a_file_is_refused(hostile):
    case = hostile.write({"in.csv": csv_bytes()}, previous_output=False)
    case.out.write_text("x", encoding="utf-8")
    outcome = case.run()
    assert outcome.exit_code == 1 and "is a file" in outcome.stderr
    assert case.out.read_text(encoding="utf-8") == "x"


def test_output_path_that_is_a_symbolic_link_is_refused(hostile, tmp_path):
    case = hostile.write({"in.csv": csv_bytes()}, previous_output=False)
    real = tmp_path / "real"
    real.mkdir()
    os.symlink(real, case.out)
    outcome = case.run("--force")
    assert outcome.exit_code == 1 and "symbolic link" in outcome.stderr
    assert case.out.is_symlink() and list(real.iterdir()) == []


def test_output_folder_containing_the_working_folder_is_refused(hostile, monkeypatch):
    case = hostile.write({"in.csv": csv_bytes()})
    inner = case.out / "sub"
    inner.mkdir()
    monkeypatch.chdir(inner)
    outcome = case.run()
    assert outcome.exit_code == 1 and "current working folder" in outcome.stderr


def test_a_rerun_replaces_its_own_output_and_keeps_no_leftovers(hostile):
    case = hostile.write({"in.csv": csv_bytes()})
    case.run().succeeds()
    first = snapshot(case.out)
    outcome = case.run()
    outcome.succeeds()
    assert snapshot(case.out).keys() == first.keys()
    assert MARKER not in first


# --- stale temporary folders -------------------------------------------------------------------


def _dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def _leftover(out, kind, pid, *, marker=True, manifest=False, tag="0123abcd"):
    folder = out.parent / f".{out.name}.prep-{kind}-{pid}-{tag}"
    folder.mkdir()
    (folder / "train.parquet").write_bytes(b"half written")
    if marker:
        (folder / MARKER).write_text("{}", encoding="utf-8")
    if manifest:
        (folder / "manifest.json").write_text(json.dumps({"tool": "prep", "files": {}}), encoding="utf-8")
    return folder


def test_clean_stale_removes_only_marked_folders_of_dead_runs(tmp_path):
    out = tmp_path / "out"
    dead = _dead_pid()
    ours = _leftover(out, "tmp", dead)
    ours_old = _leftover(out, "old", dead, marker=False, manifest=True)
    running = _leftover(out, "tmp", os.getppid())  # a live process: maybe a run in progress
    unmarked = _leftover(out, "tmp", dead, marker=False, tag="4567cdef")  # right name, but nothing says it is prep's
    other_out = _leftover(tmp_path / "other", "tmp", dead)  # belongs to another output folder
    lookalike = tmp_path / ".out.prep-tmp-notapid"
    lookalike.mkdir()
    (lookalike / MARKER).write_text("{}", encoding="utf-8")
    out.mkdir()
    (out / "manifest.json").write_text(json.dumps({"tool": "prep", "files": {}}), encoding="utf-8")

    handled = clean_stale(out)

    assert sorted(handled) == sorted([ours.name, ours_old.name])
    assert not ours.exists() and not ours_old.exists()
    for kept in (running, unmarked, other_out, lookalike, out):
        assert kept.exists(), kept.name


def test_clean_stale_puts_back_a_whole_previous_output_when_out_is_missing(tmp_path):
    out = tmp_path / "out"
    old = _leftover(out, "old", _dead_pid(), marker=False, manifest=True)
    (old / "train.parquet").unlink()
    assert clean_stale(out) == [old.name]
    assert is_prep_output(out) and not old.exists()


def test_a_temporary_folder_is_never_a_finished_output(tmp_path):
    out = tmp_path / "out"
    with pytest.raises(RuntimeError):
        with OutputFolder(out) as folder:
            folder.write_text("card.md", "# card\n")
            assert (folder.tmp / MARKER).is_file() and not is_prep_output(folder.tmp)
            raise RuntimeError("stop")
    assert list(tmp_path.iterdir()) == []


def test_leftover_names_match_the_cleanup_pattern(tmp_path):
    out = tmp_path / "out"
    folder = out.parent / leftover_name(out, "tmp")
    folder.mkdir()
    (folder / MARKER).write_text("{}", encoding="utf-8")
    # Our own pid is alive, so the folder is a run in progress and stays.
    assert clean_stale(out) == [] and folder.exists()


# --- errors at the writing boundary ------------------------------------------------------------


def test_an_os_error_while_writing_is_an_output_error(tmp_path, monkeypatch):
    def full(self, *args, **kwargs):
        raise OSError(28, "No space left on device", str(tmp_path / "secret" / "path"))

    monkeypatch.setattr(pl.DataFrame, "write_parquet", full)
    with pytest.raises(OutputError) as info:
        with OutputFolder(tmp_path / "out") as folder:
            folder.write_parquet("train.parquet", pl.DataFrame({"a": [1]}))
    assert str(info.value) == "Cannot write `train.parquet` into the output folder `out` (No space left on device)."
    assert isinstance(info.value.__cause__, OSError)
    assert list(tmp_path.iterdir()) == []


def test_an_unexpected_error_does_not_print_its_text_without_debug(small_pipeline, cli_runner, monkeypatch):
    import prep.run

    def boom(*args, **kwargs):
        raise ValueError("ticket text: my card is 4111 1111 1111 1111")  # a published test card number

    monkeypatch.setattr(prep.run, "assign_splits", boom, raising=False)
    monkeypatch.setattr("prep.split.assign_splits", boom)
    result = cli_runner.invoke(cli, ["run", str(small_pipeline)])
    assert result.exit_code == 1
    assert "4111" not in result.stderr and "unexpected ValueError" in result.stderr
    debug = cli_runner.invoke(cli, ["run", str(small_pipeline), "--debug"])
    assert "4111" in debug.stderr and "Traceback" in debug.stderr


# --- CSV written for people ----------------------------------------------------------------------


def test_write_csv_neutralises_formula_cells(tmp_path):
    # OWASP "CSV Injection": cells starting with = + - @ tab or CR are prefixed with a single quote.
    values = ["=1+1", "+41 555 0100", "-3", "@SUM(A1)", "\tx", "\rx", "plain", "a=b", None, 'say "hi"']
    frame = pl.DataFrame({"text": values, "n": list(range(len(values)))})
    with OutputFolder(tmp_path / "out") as folder:
        folder.write_csv("review.csv", frame)
        folder.commit({})
    text = (tmp_path / "out" / "review.csv").read_bytes().decode("utf-8")
    rows = list(csv.reader(io.StringIO(text, newline="")))  # Python's csv module as the RFC 4180 reference
    assert rows[0] == ["text", "n"]
    assert [r[0] for r in rows[1:]] == ["'=1+1", "'+41 555 0100", "'-3", "'@SUM(A1)", "'\tx", "'\rx", "plain", "a=b", "", 'say "hi"']
    assert [r[1] for r in rows[1:]] == [str(i) for i in range(len(values))]
    assert verify_output(tmp_path / "out") == []
