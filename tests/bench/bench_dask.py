"""Opt-in benchmark: the Dask engine against the local engine on this one machine.

Generates the demo exports at each size (``tests/bench/bench_pipeline.py``, the demo generator),
runs the full demo pipeline with ``prep run`` and with ``prep run --engine dask`` (a local cluster,
one worker process per core) side by side in one go, checks that both wrote the same split files,
ledger and clusters (content, and whether also byte for byte) and the same card.json apart from
`engine`, and prints per-step seconds of both, total wall seconds, peak RSS (the largest
process of the run, workers included) and the distributed run's overhead (dask / local)::

    python tests/bench/bench_dask.py                            # 250k, 500k, 1M
    python tests/bench/bench_dask.py --sizes 3000 --data DIR    # keep/reuse inputs in DIR
    pytest -m bench -s tests/bench/test_bench_dask.py

On one machine the Dask engine cannot be faster than the local one: it does the same work plus
moving partitions between processes, and the global steps wait for the whole table on the client.
The figure says what the distribution costs, not what a cluster gains.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_pipeline import DEFAULT_SIZES, exponent, generate, pipeline_for, run_once, run_sizes  # noqa: E402,F401

COMPARED = ("train.parquet", "validation.parquet", "test.parquet", "set_aside.parquet", "duplicates.parquet")


def run_both(n: int, folder: Path) -> dict[str, dict]:
    """Both engines on the same pipeline file (so card.json may differ only in `engine`)."""
    import json

    import polars as pl

    exports = generate(n, folder)
    pipeline = pipeline_for(exports, folder)
    out = folder / f"out-{exports.name}"
    results = {}
    for engine in ("local", "dask"):
        target = folder / f"out-{exports.name}-{engine}"
        shutil.rmtree(target, ignore_errors=True)
        args = ["--engine", "dask"] if engine == "dask" else []
        results[engine] = run_once(pipeline, args)
        out.rename(target)
        results[engine]["out"] = target
    a, b = results["local"]["out"], results["dask"]["out"]
    results["same_bytes"] = all((a / f).read_bytes() == (b / f).read_bytes() for f in COMPARED)
    same = all(pl.read_parquet(a / f).equals(pl.read_parquet(b / f)) for f in COMPARED)
    card_a, card_b = (json.loads((x / "card.json").read_text()) for x in (a, b))
    card_a.pop("engine"), card_b.pop("engine")
    results["same_outputs"] = same and card_a == card_b
    return results


def report(results: dict[int, dict]) -> str:
    sizes = sorted(results)
    lines = [f"{'':24}" + "".join(f"{f'{n:,} local':>16}{f'{n:,} dask':>16}" for n in sizes)]
    steps = [s["step"] for s in results[sizes[0]]["local"]["steps"]]
    for i, step in enumerate(steps):
        lines.append(f"{step:24}" + "".join(
            f"{results[n]['local']['steps'][i]['seconds']:>16.1f}{results[n]['dask']['steps'][i]['seconds']:>16.1f}" for n in sizes))
    for label, key, fmt in (("run (manifest) s", "run_seconds", ".1f"), ("wall s (process)", "wall_seconds", ".1f"),
                            ("peak RSS MiB", "peak_rss_mib", ".0f")):
        lines.append(f"{label:24}" + "".join(f"{results[n]['local'][key]:>16{fmt}}{results[n]['dask'][key]:>16{fmt}}" for n in sizes))
    lines.append(f"{'rows/s (wall)':24}" + "".join(
        f"{n / results[n]['local']['wall_seconds']:>16,.0f}{n / results[n]['dask']['wall_seconds']:>16,.0f}" for n in sizes))
    lines.append(f"{'dask / local (wall)':24}" + "".join(
        f"{'':>16}{results[n]['dask']['wall_seconds'] / results[n]['local']['wall_seconds']:>16.2f}" for n in sizes))
    lines.append(f"{'same outputs':24}" + "".join(f"{'':>16}{str(results[n]['same_outputs']):>16}" for n in sizes))
    lines.append(f"{'same bytes':24}" + "".join(f"{'':>16}{str(results[n]['same_bytes']):>16}" for n in sizes))
    if len(sizes) > 1:
        for engine in ("local", "dask"):
            e = exponent((sizes[0], results[sizes[0]][engine]["wall_seconds"]), (sizes[-1], results[sizes[-1]][engine]["wall_seconds"]))
            lines.append(f"time exponent {engine} {sizes[0]:,} -> {sizes[-1]:,} (wall): {e:.3f}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    results, _ = run_sizes(
        argv, __doc__.splitlines()[0], run_both,
        lambda n, r: (f"{n:,} rows: local {r['local']['wall_seconds']:.1f} s, dask {r['dask']['wall_seconds']:.1f} s, "
                      f"same outputs {r['same_outputs']}"),
        prefix="prep-bench-dask-",
    )
    print(report(results))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
