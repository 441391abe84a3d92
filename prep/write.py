"""The output folder: written into a temporary sibling folder, renamed into place only when complete.

Layout of a finished output folder: the split and ledger Parquet files, the card files, and
``manifest.json`` written last. A folder counts as prep's own (and may be replaced) only if it
holds a ``manifest.json`` whose ``tool`` is ``prep``; an empty folder may be used too. Anything
else is refused, so prep never deletes files it did not write.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import uuid
from pathlib import Path
from typing import Any

import polars as pl

from prep.errors import OutputError

MANIFEST = "manifest.json"
TOOL_NAME = "prep"


def sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def dumps_json(data: Any) -> str:
    """JSON as prep writes it: sorted keys, two-space indent, UTF-8, a final newline (stable bytes)."""
    return json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False) + "\n"


def is_prep_output(folder: Path) -> bool:
    manifest = folder / MANIFEST
    try:
        data = json.loads(manifest.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and data.get("tool") == TOOL_NAME


def check_output_folder(out: Path, inputs: list[Path], *, shown: str) -> None:
    """Refuse an output folder that is a file, holds an input file, or holds files prep did not write."""
    if out.exists() and not out.is_dir():
        raise OutputError(f"The output path `{shown}` is a file, not a folder. Choose another `output` or `--out`.")
    out_abs = out.resolve()
    for path in inputs:
        try:
            path.resolve().relative_to(out_abs)
        except ValueError:
            continue
        raise OutputError(
            f"The output folder `{shown}` contains an input file; prep replaces its output folder on every run "
            "and will not risk deleting inputs. Choose another `output` or `--out`."
        )
    if out.is_dir() and any(out.iterdir()) and not is_prep_output(out):
        raise OutputError(
            f"The output folder `{shown}` is not empty and was not written by prep (no prep manifest.json). "
            "Choose an empty or new folder so that prep does not overwrite files it did not write."
        )


class OutputFolder:
    """A temporary folder beside ``out``; :meth:`commit` swaps it into place.

    Use as a context manager: on any exception the temporary folder is removed and ``out``
    is left exactly as it was.
    """

    def __init__(self, out: Path) -> None:
        self.out = out
        self.tmp = out.parent / f".{out.name}.prep-tmp-{os.getpid()}-{uuid.uuid4().hex[:8]}"
        self.files: dict[str, dict[str, Any]] = {}

    def __enter__(self) -> "OutputFolder":
        try:
            self.out.parent.mkdir(parents=True, exist_ok=True)
            self.tmp.mkdir()
        except OSError as exc:
            raise OutputError(f"Cannot create the output folder next to `{self.out.name}` ({exc.strerror}).") from exc
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            shutil.rmtree(self.tmp, ignore_errors=True)

    def path(self, name: str) -> Path:
        return self.tmp / name

    def write_parquet(self, name: str, frame: pl.DataFrame) -> dict[str, Any]:
        path = self.path(name)
        # Fixed compression and statistics settings: same frame, same polars version -> same bytes.
        frame.write_parquet(path, compression="zstd", compression_level=3, statistics=True)
        info = {"rows": frame.height, "bytes": path.stat().st_size, "sha256": sha256_file(path)}
        self.files[name] = info
        return info

    def write_text(self, name: str, text: str) -> dict[str, Any]:
        path = self.path(name)
        path.write_text(text, encoding="utf-8", newline="\n")
        info = {"bytes": path.stat().st_size, "sha256": sha256_file(path)}
        self.files[name] = info
        return info

    def commit(self, manifest: dict[str, Any]) -> None:
        """Write the manifest last, fsync, then swap the folder into place."""
        manifest = dict(manifest, tool=TOOL_NAME, files=dict(sorted(self.files.items())))
        mpath = self.path(MANIFEST)
        with open(mpath, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(dumps_json(manifest))
            fh.flush()
            os.fsync(fh.fileno())
        old = None
        try:
            if self.out.exists():
                old = self.out.parent / f".{self.out.name}.prep-old-{os.getpid()}-{uuid.uuid4().hex[:8]}"
                os.replace(self.out, old)
            os.replace(self.tmp, self.out)
        except OSError as exc:
            if old is not None and not self.out.exists():
                os.replace(old, self.out)
            raise OutputError(f"Cannot move the finished output into `{self.out.name}` ({exc.strerror}).") from exc
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
