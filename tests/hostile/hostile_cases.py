"""The hostile-input harness (used through the `hostile` fixture of conftest.py): write a case's files at test time, run the real CLI, check the outcome.

Every case runs ``prep run`` through click's CliRunner on a one-source pipeline written into
``tmp_path``. Before the run, the output folder holds a previous prep output (a manifest and one
file), so that a failing run can be checked to leave it byte for byte as it was.

    case = hostile.write({"in.csv": b"..."}, path="in.csv", source_extra={...}, steps=[...])
    result = case.run()                 # -> Outcome
    result.fails(exit_code=1, mentions=["in.csv", "line 3"])   # one line, no traceback, out unchanged
    result.succeeds()                   # accounting: every row once in a split or the ledger
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import polars as pl
from click.testing import CliRunner

from prep.cli import cli
from prep.write import MANIFEST, verify_output

SPLITS = ("train", "validation", "test")
COLUMNS = {"ticket_id": "id", "title": "title", "body": "body", "label": "label"}
STEPS: list[dict[str, Any]] = [{"normalise": {}}, {"missing": {}}, {"exact_duplicates": {}}, {"rare_classes": {}}]
TEMPLATES = [("billing", "Charged twice for ride {i}"), ("unlock", "Scooter {i} will not unlock"), ("app", "App crashes on map {i}")]
ACCOUNTING = re.compile(
    r"^rows read ([\d,]+) = train ([\d,]+) \+ validation ([\d,]+) \+ test ([\d,]+) \+ set aside ([\d,]+)$"
)


def csv_bytes(n: int = 10, *, sep: str = ",", newline: str = "\n", header: str | None = None) -> bytes:
    """An invented, well-formed ticket export: 3 classes x ``n`` rows (ids billing-0, unlock-0, ...)."""
    lines = [header if header is not None else sep.join(["id", "title", "body", "label"])]
    for i in range(n):
        for label, text in TEMPLATES:
            lines.append(sep.join([f"{label}-{i}", f"{label} case {i}", text.format(i=i), label]))
    return (newline.join(lines) + newline).encode("utf-8")


def records(n: int = 10) -> list[dict[str, str]]:
    return [
        {"id": f"{label}-{i}", "title": f"{label} case {i}", "body": text.format(i=i), "label": label}
        for i in range(n)
        for label, text in TEMPLATES
    ]


def snapshot(folder: Path) -> dict[str, bytes]:
    """Names and bytes of the files in ``folder`` (sub-folders by name only)."""
    if not folder.is_dir():
        return {}
    return {p.name: (p.read_bytes() if p.is_file() else b"<folder>") for p in sorted(folder.iterdir())}


@dataclass
class Outcome:
    exit_code: int
    stdout: str
    stderr: str
    exception: BaseException | None
    out: Path
    before: dict[str, bytes]
    case: "Case"

    def leftovers(self) -> list[str]:
        return sorted(p.name for p in self.out.parent.iterdir() if ".prep-" in p.name)

    def fails(self, *, exit_code: int, mentions: list[str] = ()) -> str:
        """A clear error: the exit code, one line naming what it must, no traceback, output untouched."""
        assert self.exit_code == exit_code, (self.exit_code, self.stderr, self.stdout)
        assert isinstance(self.exception, SystemExit), repr(self.exception)
        lines = self.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("Error: "), self.stderr
        assert "Traceback" not in self.stderr and "unexpected" not in self.stderr, self.stderr
        for text in mentions:
            assert text in lines[0], (text, lines[0])
        assert self.stdout == ""
        assert snapshot(self.out) == self.before, "the previous output folder changed"
        assert self.leftovers() == []
        return lines[0]

    def succeeds(self) -> dict[str, pl.DataFrame]:
        """Exit 0, and every row read is exactly once in a split or the ledger; returns the frames."""
        assert self.exit_code == 0, (self.exit_code, self.stderr, repr(self.exception))
        match = ACCOUNTING.match(self.stdout.strip().splitlines()[-1])
        assert match, self.stdout
        read, *parts = (int(g.replace(",", "")) for g in match.groups())
        frames = {name: pl.read_parquet(self.out / f"{name}.parquet") for name in (*SPLITS, "set_aside")}
        assert [frames[n].height for n in (*SPLITS, "set_aside")] == parts
        assert read == sum(parts)
        ids = pl.concat([f.select("row_id") for f in frames.values()])["row_id"]
        assert ids.n_unique() == ids.len() == read
        assert verify_output(self.out) == []
        assert self.leftovers() == []
        return frames

    def rows(self) -> pl.DataFrame:
        """The three splits as one frame, sorted by source_row."""
        return pl.concat([pl.read_parquet(self.out / f"{n}.parquet") for n in SPLITS]).sort("source_row")

    def ledger(self) -> pl.DataFrame:
        return pl.read_parquet(self.out / "set_aside.parquet")


@dataclass
class Case:
    folder: Path
    pipeline: Path
    out: Path
    args: list[str] = field(default_factory=list)

    def run(self, *extra: str) -> Outcome:
        before = snapshot(self.out)
        result = CliRunner().invoke(cli, ["run", str(self.pipeline), "-q", *self.args, *extra], catch_exceptions=True)
        return Outcome(result.exit_code, result.stdout, result.stderr, result.exception, self.out, before, self)


class Hostile:
    def __init__(self, tmp_path: Path) -> None:
        self.tmp_path = tmp_path

    def write(
        self,
        files: dict[str, bytes | str],
        *,
        path: str = "in.csv",
        columns: dict[str, str] | None = None,
        source_extra: dict[str, Any] | None = None,
        steps: list[dict[str, Any]] | None = None,
        top_extra: dict[str, Any] | None = None,
        folder: str = "case",
        previous_output: bool = True,
    ) -> Case:
        base = self.tmp_path / folder
        base.mkdir(parents=True, exist_ok=True)
        for name, data in files.items():
            target = base / name
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
        source = {"name": "s", "path": path, "columns": columns or COLUMNS, **(source_extra or {})}
        spec = {
            "dataset": "hostile",
            "sources": [source],
            "label": "label",
            "text": ["title", "body"],
            "steps": STEPS if steps is None else steps,
            "split": {"train": 0.8, "validation": 0.1, "test": 0.1, "seed": 1},
            "output": "out/",
            **(top_extra or {}),
        }
        pipeline = base / "pipeline.yaml"
        pipeline.write_text(json.dumps(spec, ensure_ascii=False, indent=1), encoding="utf-8")  # JSON is YAML
        out = base / "out"
        if previous_output:
            out.mkdir(exist_ok=True)
            (out / MANIFEST).write_text(json.dumps({"tool": "prep", "files": {}}), encoding="utf-8")
            (out / "train.parquet").write_bytes(b"previous run")
        return Case(base, pipeline, out)
