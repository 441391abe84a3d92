"""Opt-in timing of the CSV reader (run with `pytest -m bench tests/read -s`).

Not a pass/fail check on speed (machines differ); it prints the figures and checks the result shape.
"""

from __future__ import annotations

import random
import time

import pytest

from prep.read import read_source
from prep.read.delimited import read_delimited

ROWS = 100_000


@pytest.mark.bench
def test_read_100k_rows_of_300_chars(make_source):
    rng = random.Random(0)
    words = ["".join(rng.choice("abcdefghijklmnopqrstuvwxyz") for _ in range(rng.randint(2, 9))) for _ in range(2000)]
    lines = ["Case Number,Subject Line,Full Text,Team,Opened At"]
    for i in range(ROWS):
        body = " ".join(rng.choice(words) for _ in range(45))[:240]
        lines.append(f'C-{i},"Subject, {i}","{body} ""quoted""",team{i % 7},2024-01-{i % 28 + 1:02d} 10:00')
    source = make_source("\r\n".join(lines) + "\r\n", columns={"ticket_id": "Case Number", "body": "Full Text"})
    size = source.path.stat().st_size
    for engine in ("auto", "slow"):
        best = float("inf")
        for _ in range(3):
            start = time.perf_counter()
            result = read_delimited(source, on_unreadable="set_aside", engine=engine)
            best = min(best, time.perf_counter() - start)
        print(f"\n{engine}: {ROWS} rows, {size / ROWS:.0f} bytes/row: best of 3 {best:.2f} s")
        assert result.table.height == ROWS
    assert read_source(source).table.height == ROWS
