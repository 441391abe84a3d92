"""The two largest hostile cases in a separate process, with its peak memory measured.

Peak resident set size comes from the standard library's ``resource.getrusage(RUSAGE_CHILDREN)``,
read by a small wrapper process whose only child is ``prep run``; on Linux ``ru_maxrss`` is in KiB
(getrusage(2) manual page). The bounds are generous (several times what was measured when the test
was written, printed with ``pytest -s``) so that they catch a blow-up, not noise.
"""

from __future__ import annotations

import json
import subprocess
import sys

import polars as pl

from hostile_cases import ACCOUNTING

WRAPPER = r"""
import json, resource, subprocess, sys

def limit():
    # A cap on the address space, so that a blow-up fails fast with MemoryError instead of
    # drawing on the memory of a shared machine (the OOM killer).
    resource.setrlimit(resource.RLIMIT_AS, (int(sys.argv[2]), int(sys.argv[2])))

proc = subprocess.run(
    [sys.executable, "-m", "prep", "run", sys.argv[1], "-q"], capture_output=True, text=True, preexec_fn=limit
)
peak_kib = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
print(json.dumps({"code": proc.returncode, "stdout": proc.stdout, "stderr": proc.stderr, "peak_mib": peak_kib / 1024}))
"""

# Baseline: Python + polars + pyarrow + the pipeline imports take about 200-300 MiB here.
PEAK_BOUND_MIB = 1500
# Address-space cap for the measured process (virtual memory, well above the RSS bound).
ADDRESS_SPACE_CAP = 16 * 1024**3


def _run_measured(case) -> dict:
    proc = subprocess.run([sys.executable, "-c", WRAPPER, str(case.pipeline), str(ADDRESS_SPACE_CAP)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


def test_200000_identical_rows_in_bounded_memory(hostile):
    data = b"id,title,body,label\n" + b"7,Flat tyre,The rear tyre of bike 7 is flat again,repair\n" * 200_000
    case = hostile.write({"in.csv": data}, previous_output=False)
    result = _run_measured(case)
    print(f"\n200,000 identical rows: peak RSS {result['peak_mib']:.0f} MiB")
    assert result["code"] == 0, result["stderr"]
    assert ACCOUNTING.match(result["stdout"].strip())
    ledger = pl.read_parquet(case.out / "set_aside.parquet")
    # One copy is kept (then set aside as a one-row class by rare_classes); 199,999 are duplicates.
    assert ledger.group_by("reason").len().sort("reason").rows() == [("exact_duplicate", 199_999), ("rare_class", 1)]
    assert result["peak_mib"] < PEAK_BOUND_MIB


def test_one_20_mb_field_in_bounded_memory(hostile):
    rows = b"".join(f"{i},Ride {i},Charged twice for ride {i},{['billing', 'unlock', 'app'][i % 3]}\n".encode() for i in range(60))
    big = b"61,Huge paste," + b"log line of the app " * 1_000_000 + b",app\n"  # 20,000,000 bytes in one field
    case = hostile.write({"in.csv": b"id,title,body,label\n" + rows + big}, previous_output=False)
    result = _run_measured(case)
    print(f"\none 20 MB field: peak RSS {result['peak_mib']:.0f} MiB")
    assert result["code"] == 0, result["stderr"]
    frames = [pl.read_parquet(case.out / f"{n}.parquet") for n in ("train", "validation", "test")]
    bodies = pl.concat(frames)["body"]
    # normalise trims the trailing blank of the pasted field: 20,000,000 - 1 characters survive.
    assert bodies.str.len_chars().max() == 19_999_999
    assert result["peak_mib"] < PEAK_BOUND_MIB
