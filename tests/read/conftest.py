"""Fixtures for the reader tests: a stand-in for the pipeline's source model, and a file writer.

The stand-in has exactly the attributes the readers use (see ``prep.read``); prep.pipeline is not
imported, so these tests do not depend on the pipeline file model.
"""

from __future__ import annotations

import gzip
from dataclasses import dataclass, field
from pathlib import Path

import pytest

EXTENSIONS = {"csv": ".csv", "tsv": ".tsv", "jsonl": ".jsonl", "json": ".json", "parquet": ".parquet"}


@dataclass
class FakeSource:
    """Duck-typed stand-in for prep.pipeline's Source."""

    name: str
    path: Path
    path_text: str
    format: str
    compression: str | None = None
    encoding: str = "auto"
    encoding_fallback: str | None = None
    delimiter: str | None = None
    columns: dict[str, str] = field(default_factory=dict)


@pytest.fixture
def make_source(tmp_path: Path):
    """Write ``content`` (bytes or str, UTF-8) to a file and return a FakeSource for it.

    ``gz=True`` gzip-compresses the file. Extra keyword arguments set FakeSource fields.
    """
    counter = iter(range(10_000))

    def make(content: bytes | str, fmt: str = "csv", *, gz: bool = False, **fields) -> FakeSource:
        data = content.encode("utf-8") if isinstance(content, str) else content
        name = f"src{next(counter)}{EXTENSIONS[fmt]}" + (".gz" if gz else "")
        path = tmp_path / name
        path.write_bytes(gzip.compress(data, mtime=0) if gz else data)
        return FakeSource(
            name="src",
            path=path,
            path_text=f"exports/{name}",
            format=fmt,
            compression="gzip" if gz else None,
            **fields,
        )

    return make
