"""Crash safety: `prep run` killed with SIGKILL while it writes its outputs.

A real kill at a random instant of the writing phase (after the temporary folder appears), repeated
a few times with a seeded random generator. After each kill the output folder must be a whole prep
output (its manifest lists every file with the right size and SHA-256) and no temporary folder may
pass for a finished output. A later run must remove the leftovers that are prep's, and nothing else.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from prep.write import MARKER, is_prep_output, verify_output

KILLS = 3
SEED = 20240611  # any fixed value: the kill instants are random but reproducible

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL (POSIX)")


WORDS = (
    "ride scooter bike dock unlock charge refund invoice app login map battery brake tyre helmet station "
    "payment card receipt route zone parking fine account password update crash slow screen light bell"
).split()


def _write_case(folder: Path, rows: int = 2_000) -> Path:
    labels = ["billing", "unlock", "app", "account"]
    rng = random.Random(1)  # invented texts: random words, so that few pairs look alike
    lines = ["id,title,body,label"]
    for i in range(rows):
        label = labels[i % len(labels)]
        body = " ".join(rng.choice(WORDS) for _ in range(12))
        lines.append(f"{i},{label} ticket {i},{body} {i},{label}")
    (folder / "in.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    spec = {
        "dataset": "crash",
        "sources": [{"name": "s", "path": "in.csv", "columns": {"ticket_id": "id", "title": "title", "body": "body", "label": "label"}}],
        "label": "label",
        "text": ["title", "body"],
        "steps": [{"normalise": {}}, {"missing": {}}, {"exact_duplicates": {}}],
        "split": {"train": 0.8, "validation": 0.1, "test": 0.1, "seed": 5},
        "output": "out/",
    }
    pipeline = folder / "pipeline.yaml"
    pipeline.write_text(json.dumps(spec), encoding="utf-8")
    return pipeline


def _command(pipeline: Path) -> list[str]:
    return [sys.executable, "-m", "prep", "run", str(pipeline), "-q"]


def _files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def _temporaries(folder: Path) -> list[Path]:
    return sorted(p for p in folder.iterdir() if p.name.startswith(".out.prep-"))


def _wait_for_writing(proc: subprocess.Popen, folder: Path) -> float:
    """Wait until the run creates its temporary folder; returns that instant (monotonic clock)."""
    deadline = time.monotonic() + 300
    while not _temporaries(folder) and proc.poll() is None:
        if time.monotonic() > deadline:
            pytest.fail("the run never started writing")
        time.sleep(0.005)
    return time.monotonic()


def _timed_run(pipeline: Path) -> float:
    """A whole run; returns how long its writing phase took (temporary folder to exit)."""
    proc = subprocess.Popen(_command(pipeline), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    started = _wait_for_writing(proc, pipeline.parent)
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    return time.monotonic() - started


def _kill_while_writing(pipeline: Path, rng: random.Random, window: float) -> None:
    proc = subprocess.Popen(_command(pipeline), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        _wait_for_writing(proc, pipeline.parent)
        # Somewhere in the writing phase, the swap included (or just after the run ended).
        time.sleep(rng.uniform(0.0, 1.1 * window))
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.wait()


def test_sigkill_while_writing_leaves_a_whole_output(tmp_path):
    pipeline = _write_case(tmp_path)
    window = _timed_run(pipeline)
    out = tmp_path / "out"
    previous = _files(out)
    # Decoys beside the output that are not prep's leftovers: they must survive every cleanup.
    decoys = [tmp_path / ".out.prep-tmp-notapid", tmp_path / ".out.prep-tmp-999999999-0123abcd", tmp_path / "notes"]
    for decoy in decoys:
        decoy.mkdir()
        (decoy / "keep.txt").write_text("user file", encoding="utf-8")
    (decoys[0] / MARKER).write_text("{}", encoding="utf-8")  # marker, but the name does not match

    rng = random.Random(SEED)
    killed_before_swap = 0
    for _ in range(KILLS):
        _kill_while_writing(pipeline, rng, window)
        assert verify_output(out) == [], "the output folder is not a whole prep output after a kill"
        current = _files(out)
        if current == previous:
            killed_before_swap += 1
        else:
            # The kill came after the swap: a whole new output, same data bytes (only the manifest's
            # run times differ).
            assert {k: v for k, v in current.items() if k != "manifest.json"} == {
                k: v for k, v in previous.items() if k != "manifest.json"
            }
        for leftover in _temporaries(tmp_path):
            if leftover in decoys:
                continue
            # A leftover is never a finished output unless it is a whole previous output that was
            # swapped out and not yet deleted.
            assert not is_prep_output(leftover) or verify_output(leftover) == []

    final = subprocess.run(_command(pipeline), capture_output=True, text=True, timeout=300)
    assert final.returncode == 0, final.stderr
    assert verify_output(out) == []
    remaining = sorted(p.name for p in tmp_path.iterdir())
    assert remaining == sorted(["in.csv", "pipeline.yaml", "out", *(d.name for d in decoys)])
    for decoy in decoys:
        assert (decoy / "keep.txt").read_text(encoding="utf-8") == "user file"
    print(f"\nwriting phase {window:.1f} s; {KILLS} kills, {killed_before_swap} before the swap")
