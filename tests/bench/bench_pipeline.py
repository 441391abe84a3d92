"""Opt-in benchmark of the whole demo pipeline at scale (issue: a million tickets in two minutes).

Generates demo exports with ``sample_inputs/make_demo.py`` at each size (title + body, about 300
characters per ticket), runs the demo pipeline (every step it uses, card included) on them with the
real CLI in a child process, and prints per-step seconds, total seconds, peak RSS of the child, rows
per second, and the time exponent between the smallest and the largest size::

    python tests/bench/bench_pipeline.py                       # 250k, 500k, 1M
    python tests/bench/bench_pipeline.py --sizes 100000,250000 --data DIR   # keep/reuse inputs in DIR
    pytest -m bench -s tests/bench/test_bench_pipeline.py      # the same, as an opt-in test

The time exponent is log(t_large / t_small) / log(n_large / n_small): 1.0 is linear.
Targets (the issue): 1M rows <= 120 s, peak RSS <= 6 GiB, exponent <= 1.15 on 2 cores.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEFAULT_SIZES = (250_000, 500_000, 1_000_000)


def generate(rows: int, folder: Path) -> Path:
    """Demo exports of ``rows`` tickets in ``folder/exports-<rows>`` (reused when present)."""
    exports = folder / f"exports-{rows}"
    if not (exports / "legacy.tsv").exists():
        exports.mkdir(parents=True, exist_ok=True)
        subprocess.run(
            [sys.executable, str(ROOT / "sample_inputs" / "make_demo.py"), "--rows", str(rows), "--out", str(exports)],
            check=True, capture_output=True,
        )
    return exports


def pipeline_for(exports: Path, folder: Path, extra: dict | None = None) -> Path:
    """The demo pipeline file, its sources pointed at ``exports`` (schema path made absolute)."""
    import yaml

    spec = yaml.safe_load((ROOT / "sample_inputs" / "pipeline.yaml").read_text(encoding="utf-8"))
    for source in spec["sources"]:
        source["path"] = str(exports / Path(source["path"]).name)
    for step in spec["steps"]:
        (name, config), = step.items()
        if name == "schema":
            config["file"] = str((ROOT / "schemas" / "tickets.yaml").resolve())
    spec["output"] = str(folder / f"out-{exports.name}")
    spec.update(extra or {})
    path = folder / f"pipeline-{exports.name}.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def run_once(pipeline: Path, args: list[str] | None = None) -> dict:
    """Run ``prep run`` in a child process; its wall time, peak RSS and the manifest's step times."""
    command = [sys.executable, "-m", "prep", "run", str(pipeline), "--force", "--quiet", *(args or [])]
    t0 = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(child.pid, 0)
    seconds = time.perf_counter() - t0
    stderr = child.stderr.read().decode("utf-8", "replace")
    child.stdout.close()
    child.stderr.close()
    code = os.waitstatus_to_exitcode(status)
    if code != 0:
        raise RuntimeError(f"prep run exited {code}: {stderr.strip()[-2000:]}")
    import yaml

    out = Path(yaml.safe_load(pipeline.read_text(encoding="utf-8"))["output"])
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    return {
        "wall_seconds": seconds,
        "run_seconds": manifest["seconds"],
        "peak_rss_mib": usage.ru_maxrss / 1024,  # Linux reports KiB
        "rows": manifest["rows"],
        "steps": manifest["steps"],
        "phases": manifest.get("phases", {}),
    }


def exponent(small: tuple[int, float], large: tuple[int, float]) -> float:
    (n1, t1), (n2, t2) = small, large
    return math.log(t2 / t1) / math.log(n2 / n1)


def report(results: dict[int, dict]) -> str:
    sizes = sorted(results)
    lines = []
    steps = [s["step"] for s in results[sizes[0]]["steps"]]
    head = f"{'':24}" + "".join(f"{n:>12,}" for n in sizes)
    lines.append(head)
    for i, step in enumerate(steps):
        lines.append(f"{step:24}" + "".join(f"{results[n]['steps'][i]['seconds']:>12.1f}" for n in sizes))
    phase_names = sorted({k for n in sizes for k in results[n]["phases"]})
    for phase in phase_names:
        lines.append(f"{'(' + phase + ')':24}" + "".join(f"{results[n]['phases'].get(phase, 0):>12.1f}" for n in sizes))
    lines.append(f"{'run (manifest) s':24}" + "".join(f"{results[n]['run_seconds']:>12.1f}" for n in sizes))
    lines.append(f"{'wall s (process)':24}" + "".join(f"{results[n]['wall_seconds']:>12.1f}" for n in sizes))
    lines.append(f"{'peak RSS MiB':24}" + "".join(f"{results[n]['peak_rss_mib']:>12.0f}" for n in sizes))
    lines.append(f"{'rows/s (wall)':24}" + "".join(f"{n / results[n]['wall_seconds']:>12,.0f}" for n in sizes))
    lines.append(f"{'largest step share':24}" + "".join(
        f"{max(s['seconds'] for s in results[n]['steps']) / results[n]['run_seconds']:>12.0%}" for n in sizes))
    if len(sizes) > 1:
        e = exponent((sizes[0], results[sizes[0]]["wall_seconds"]), (sizes[-1], results[sizes[-1]]["wall_seconds"]))
        lines.append(f"time exponent {sizes[0]:,} -> {sizes[-1]:,} (wall): {e:.3f}")
    return "\n".join(lines)


def run_sizes(argv: list[str] | None, description: str, run, line, *, prefix: str) -> tuple[dict[int, dict], argparse.Namespace]:
    """The command line both benchmark scripts share (``--sizes``, ``--data``, ``--json``): for each
    size, ``run(n, folder)`` gives its figures and ``line(n, figures)`` the progress line printed."""
    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("--sizes", default=",".join(map(str, DEFAULT_SIZES)))
    parser.add_argument("--data", type=Path, default=None, help="keep and reuse generated inputs here")
    parser.add_argument("--json", type=Path, default=None, help="also write the figures as JSON")
    args = parser.parse_args(argv)
    sizes = [int(x) for x in args.sizes.split(",")]
    results: dict[int, dict] = {}
    with tempfile.TemporaryDirectory(prefix=prefix) as tmp:
        folder = args.data or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        for n in sizes:
            results[n] = run(n, folder)
            print(line(n, results[n]), flush=True)
    if args.json:
        args.json.write_text(json.dumps({str(k): v for k, v in results.items()}, indent=1, default=str), encoding="utf-8")
    return results, args


def main(argv: list[str] | None = None) -> int:
    results, _ = run_sizes(
        argv, __doc__.splitlines()[0],
        lambda n, folder: run_once(pipeline_for(generate(n, folder), folder)),
        lambda n, r: f"{n:,} rows: {r['wall_seconds']:.1f} s, peak {r['peak_rss_mib']:.0f} MiB",
        prefix="prep-bench-",
    )
    print(report(results))
    return 0


if __name__ == "__main__":
    sys.exit(main())
