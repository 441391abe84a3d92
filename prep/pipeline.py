"""The pipeline file: its typed model, loading, validation and path resolution.

A pipeline file is YAML, loaded without constructing arbitrary objects. Every error names the
pipeline file, the key path (``sources[1].columns``) and the YAML line, and has exit code 2.
Paths in the file are relative to the file's folder. A source ``path`` or the ``output`` may instead be
an fsspec URL (``s3://bucket/key``, ``file://…``; :mod:`prep.read.urls`): it is kept as written (a
string), and messages show it without user-info and query.
"""

from __future__ import annotations

import dataclasses
import errno
import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from ruamel.yaml import YAML
from ruamel.yaml.error import MarkedYAMLError, YAMLError

from prep.config import ConfigError, ConfigValueError, build, line_of, to_plain
from prep.errors import PipelineError
from prep.read import urls
from prep.steps import STEP_MODULES, step_module

__all__ = ["Pipeline", "Source", "SplitSpec", "About", "StepSpec", "load_pipeline", "FORMATS", "PROVENANCE_COLUMNS"]

FORMATS = ("csv", "tsv", "jsonl", "json", "parquet")
TEXT_FORMATS = ("csv", "tsv", "jsonl", "json")
_EXTENSIONS = {".csv": "csv", ".tsv": "tsv", ".tab": "tsv", ".jsonl": "jsonl", ".ndjson": "jsonl",
               ".json": "json", ".parquet": "parquet", ".pq": "parquet"}
PROVENANCE_COLUMNS = ("row_id", "source", "source_row")
# Names the runner adds or reserves; a source may not map a canonical column onto them.
RESERVED_COLUMNS = frozenset(PROVENANCE_COLUMNS) | {"split"}


# ---------------------------------------------------------------------------
# The file as written (typed, validated by prep.config.build)


@dataclass(frozen=True)
class _SourceSpec:
    name: str
    path: str
    columns: dict[str, str]
    format: Literal["csv", "tsv", "jsonl", "json", "parquet"] | None = None
    encoding: str = "auto"
    encoding_fallback: str | None = None
    delimiter: str | None = None

    def check(self) -> None:
        if not self.name.strip():
            raise ConfigValueError("name", "must not be empty")
        if not self.columns:
            raise ConfigValueError("columns", "must map at least one canonical column")
        for canon in self.columns:
            if canon in RESERVED_COLUMNS:
                raise ConfigValueError("columns", f"`{canon}` is reserved for prep's provenance columns; choose another name")
        if self.delimiter is not None and len(self.delimiter) != 1:
            raise ConfigValueError("delimiter", "must be exactly one character")
        for key in ("encoding", "encoding_fallback"):
            value = getattr(self, key)
            if value is None or value == "auto":
                continue
            try:
                import codecs

                codecs.lookup(value)
            except LookupError:
                raise ConfigValueError(key, f"unknown encoding {value!r} (use a Python codec name such as utf-8, latin-1, cp1252)") from None
        if self.encoding_fallback == "auto":
            raise ConfigValueError("encoding_fallback", "must name a codec such as latin-1 or cp1252, not auto")


@dataclass(frozen=True)
class SplitSpec:
    """Fractions of the three splits (summing to 1), the seed, and what to stratify and group by."""

    train: float
    validation: float
    test: float
    seed: int
    stratify: str | None = None
    group: str | None = None
    # Stable splits: the previous version's output folder (relative to the pipeline file). Rows
    # found in its splits keep their split; only new rows are allocated (prep.split, history).
    history: str | None = None

    def check(self) -> None:
        for key in ("train", "validation", "test"):
            value = getattr(self, key)
            if not 0.0 <= value <= 1.0:
                raise ConfigValueError(key, f"must be a fraction between 0 and 1, got {value}")
        total = self.train + self.validation + self.test
        if abs(total - 1.0) > 1e-9:
            raise ConfigValueError("", f"train + validation + test must sum to 1, got {total:g}")
        if self.train <= 0:
            raise ConfigValueError("train", "must be greater than 0")
        if self.seed < 0:
            raise ConfigValueError("seed", "must be >= 0")

    @property
    def fractions(self) -> dict[str, float]:
        return {"train": self.train, "validation": self.validation, "test": self.test}


@dataclass(frozen=True)
class About:
    """What only a person knows; shown in the card, "not provided" when absent."""

    purpose: str | None = None
    intended_use: str | None = None
    license: str | None = None
    maintainer: str | None = None
    contact: str | None = None


# Rows per partition of the Dask engine (prep.dask_engine); a rule of thumb: large enough that
# scheduling costs little, small enough for a worker's memory (common practice, no source).
DEFAULT_PARTITION_ROWS = 100_000


@dataclass(frozen=True)
class EngineSpec:
    """``engine``: ``local`` (one process, the default) or ``dask``, as a name or a mapping.

    ``scheduler``: address of a running Dask scheduler (``tcp://host:8786``); without it the Dask
    engine starts a local cluster of ``workers`` processes (default: the usable cores).
    ``partition_rows``: rows per partition. ``prep run --engine/--scheduler`` override these.
    """

    name: Literal["local", "dask"] = "local"
    scheduler: str | None = None
    workers: int | None = None
    partition_rows: int = DEFAULT_PARTITION_ROWS

    def check(self) -> None:
        if self.scheduler is not None and not self.scheduler.strip():
            raise ConfigValueError("scheduler", "must be a scheduler address such as tcp://host:8786 (or be left out)")
        if self.scheduler:
            try:
                from prep.dask_engine import address_problem

                why = address_problem(self.scheduler)
            except ImportError:  # Dask not installed: the run says which extra to install
                why = None
            if why:
                raise ConfigValueError("scheduler", f"`{self.scheduler}` is not a Dask scheduler address ({why}); "
                                                    "give it as `dask scheduler` prints it, e.g. tcp://host:8786")
        if self.workers is not None and self.workers < 1:
            raise ConfigValueError("workers", "must be 1 or more")
        if self.partition_rows < 1:
            raise ConfigValueError("partition_rows", "must be 1 or more")


@dataclass(frozen=True)
class _PipelineSpec:
    dataset: str
    sources: list[_SourceSpec]
    label: str
    text: list[str]
    split: SplitSpec
    output: str
    steps: Any = None  # validated separately, step by step, so errors keep their lines
    description: str | None = None
    about: About | None = None
    on_unreadable: Literal["set_aside", "stop"] = "set_aside"
    engine: Literal["local", "dask"] | EngineSpec | None = None


# ---------------------------------------------------------------------------
# The resolved pipeline handed to the runner


@dataclass(frozen=True)
class Source:
    name: str
    path: Path | str        # resolved; or an fsspec URL as written (a str, may hold credentials: never shown)
    path_text: str          # as written in the pipeline file (used in messages); a URL via urls.shown_url
    format: str
    compression: str | None
    encoding: str
    encoding_fallback: str | None
    delimiter: str | None
    columns: dict[str, str]


@dataclass(frozen=True)
class StepSpec:
    name: str
    config: Any             # the step module's Config instance
    key: str                # key path in the pipeline file, e.g. "steps[2].exact_duplicates"
    line: int | None


@dataclass(frozen=True)
class Pipeline:
    path: Path              # the pipeline file, as given (may be relative)
    dataset: str
    description: str | None
    about: About
    sources: tuple[Source, ...]
    label: str
    text: tuple[str, ...]
    steps: tuple[StepSpec, ...]
    split: SplitSpec
    output: Path | str      # resolved relative to the pipeline file's folder; or an fsspec URL (a str)
    on_unreadable: str
    sha256: str
    canonical_columns: tuple[str, ...] = field(default=())
    engine: EngineSpec = field(default_factory=EngineSpec)

    @property
    def folder(self) -> Path:
        return self.path.parent

    def plain(self) -> dict[str, Any]:
        """The pipeline as plain data (for the card and manifest), with paths as written."""
        return {
            "dataset": self.dataset,
            "label": self.label,
            "text": list(self.text),
            "steps": [{s.name: to_plain(s.config)} for s in self.steps],
            "split": to_plain(self.split),
        }


def _format_of(path_text: str) -> tuple[str | None, str | None]:
    """(format, compression) from a file name's extension, or (None, None) if unknown."""
    p = Path(path_text.lower())
    compression = None
    if p.suffix == ".gz":
        compression = "gzip"
        p = p.with_suffix("")
    return _EXTENSIONS.get(p.suffix), compression


def _load_yaml(path: Path) -> Any:
    shown = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise PipelineError("pipeline file not found.", file=shown) from None
    except IsADirectoryError:
        raise PipelineError("is a directory, not a pipeline file.", file=shown) from None
    except OSError as exc:
        raise PipelineError(f"cannot read the pipeline file ({exc.strerror}).", file=shown) from exc
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise PipelineError("the pipeline file is not valid UTF-8.", file=shown, line=line) from exc
    yaml = YAML(typ="rt", pure=True)
    try:
        data = yaml.load(text)
    except MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark is not None else None
        problem = (exc.problem or exc.context or "invalid YAML").strip()
        raise PipelineError(f"invalid YAML: {problem}.", file=shown, line=line) from exc
    except YAMLError as exc:
        raise PipelineError(f"invalid YAML: {exc}.", file=shown) from exc
    if data is None:
        raise PipelineError("the pipeline file is empty.", file=shown)
    if not isinstance(data, dict):
        raise PipelineError("the pipeline file must be a mapping of keys such as `dataset`, `sources`, `steps`.", file=shown, line=1)
    return data, hashlib.sha256(raw).hexdigest()


def path_problem(path: Path) -> str | None:
    """Why ``path`` cannot be reached although it may exist (a symbolic-link loop, a dangling link, no
    permission), as words for a message; None when it exists or is simply missing."""
    try:
        os.stat(path)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            return "is (or passes through) a symbolic-link loop"
        if path.is_symlink():
            return "is a symbolic link to something that does not exist"
        if exc.errno in (errno.ENOENT, errno.ENOTDIR):
            return None
        return f"cannot be reached ({exc.strerror})"
    return None


def missing_output_history(history: Path, output: Path) -> bool:
    """Whether the split history ``history`` is the output folder ``output`` (symlinks resolved)
    and does not exist yet: the first run of a pipeline that keeps its splits stable, which
    allocates every row afresh (the split notes say so) instead of failing. Its parent must exist
    (`gone/../out` can never exist). Checked at load against the file's ``output`` and by the run
    against the folder it actually writes (``--out`` may change it: prep.run.split_history)."""
    return (not os.path.lexists(history) and os.path.isdir(Path(history).absolute().parent)
            and os.path.realpath(history) == os.path.realpath(output))


def _check_history(resolved: Path, written: str, fail, container: Any) -> None:
    """`split.history` must name an existing folder holding the three split files of an earlier run."""
    if not resolved.is_dir():
        raise fail(
            f"the split history `{written}` is not a folder (give the output folder of the previous version, "
            "relative to the pipeline file).", "split.history", container, "history",
        )
    missing = [f"{name}.parquet" for name in ("train", "validation", "test") if not (resolved / f"{name}.parquet").is_file()]
    if missing:
        raise fail(
            f"the split history `{written}` has no {', '.join(missing)}; it must be the output folder of an earlier run.",
            "split.history", container, "history",
        )


def _check_url_input(name: str, url: str, fail) -> None:
    """A source given as a URL must be a file that this machine can reach (the client checks, as it does
    for a local path); ``fail(message)`` makes the PipelineError."""
    shown = urls.shown_url(url)
    try:
        problem = urls.input_problem(url)
    except urls.UrlProblem as exc:
        raise fail(f"source `{name}`: `{shown}` {exc.message}." + (f" {exc.hint}" if exc.hint else "")) from exc
    if problem == "does not exist":
        raise fail(f"source `{name}`: input file `{shown}` not found.")
    if problem:
        raise fail(f"source `{name}`: input `{shown}` {problem}.")


def load_pipeline(path: str | Path) -> Pipeline:
    """Load, validate and resolve a pipeline file. Raises :class:`PipelineError` (exit 2)."""
    path = Path(path)
    shown = str(path)
    data, sha = _load_yaml(path)

    def error(exc: ConfigError) -> PipelineError:
        return PipelineError(exc.message + ("" if exc.message.endswith(".") else "."), file=shown, key=exc.path, line=exc.line)

    try:
        spec = build(_PipelineSpec, data, "")
    except ConfigError as exc:
        raise error(exc) from None

    def fail(message: str, key: str, container: Any = None, item: Any = None) -> PipelineError:
        return PipelineError(message, file=shown, key=key, line=line_of(container, item) if container is not None else None)

    folder = path.parent
    if not spec.dataset.strip():
        raise fail("must not be empty.", "dataset", data, "dataset")
    if not spec.sources:
        raise fail("list at least one source.", "sources", data, "sources")

    # Sources: unique names, known formats, existing files.
    sources: list[Source] = []
    seen: dict[str, int] = {}
    raw_sources = data["sources"]
    for i, s in enumerate(spec.sources):
        key = f"sources[{i}]"
        raw = raw_sources[i]
        if s.name in seen:
            raise fail(f"duplicate source name `{s.name}` (also used by sources[{seen[s.name]}]).", f"{key}.name", raw, "name")
        seen[s.name] = i
        if urls.is_url(s.path):
            resolved, path_text = s.path, urls.shown_url(s.path)
            _check_url_input(s.name, s.path, lambda m: fail(m, f"{key}.path", raw, "path"))
        else:
            resolved, path_text = folder / s.path, s.path
            unreachable = path_problem(resolved)
            if unreachable:
                raise fail(f"input file `{s.path}` {unreachable}.", f"{key}.path", raw, "path")
            if not resolved.exists():
                raise fail(f"input file `{s.path}` not found (paths are relative to the pipeline file).", f"{key}.path", raw, "path")
            if resolved.is_dir():
                raise fail(f"`{s.path}` is a directory; give the path of a file.", f"{key}.path", raw, "path")
        fmt, compression = _format_of(urls.url_path(s.path) if urls.is_url(s.path) else s.path)
        if s.format is not None:
            fmt = s.format
        if fmt is None:
            raise fail(
                f"cannot tell the format of `{path_text}` from its extension; add `format:` (one of {', '.join(FORMATS)}).",
                f"{key}.path", raw, "path",
            )
        if compression == "gzip" and fmt == "parquet":
            raise fail("gzip is supported for csv, tsv, jsonl and json only; Parquet compresses itself.", f"{key}.path", raw, "path")
        if fmt == "parquet" and (s.encoding != "auto" or s.encoding_fallback):
            raise fail("Parquet files carry their own encoding; remove `encoding`.", f"{key}.encoding", raw, "encoding")
        sources.append(
            Source(
                name=s.name, path=resolved, path_text=path_text, format=fmt, compression=compression,
                encoding=s.encoding, encoding_fallback=s.encoding_fallback, delimiter=s.delimiter,
                columns=dict(s.columns),
            )
        )

    # Canonical columns: in order of first mention.
    canonical: list[str] = []
    for s in sources:
        for canon in s.columns:
            if canon not in canonical:
                canonical.append(canon)
    if spec.label not in canonical:
        raise fail(f"no source maps the label column `{spec.label}`; add it to a source's `columns`.", "label", data, "label")
    if not spec.text:
        raise fail("list at least one text column.", "text", data, "text")
    for j, t in enumerate(spec.text):
        if t not in canonical:
            raise fail(f"no source maps the text column `{t}`; add it to a source's `columns`.", f"text[{j}]", data["text"], j)
        if t == spec.label:
            raise fail("the label column cannot also be a text column.", f"text[{j}]", data["text"], j)
    if len(set(spec.text)) != len(spec.text):
        raise fail("a text column is listed twice.", "text", data, "text")

    # Steps: a list of single-key mappings, each built with its module's Config.
    steps: list[StepSpec] = []
    raw_steps = data.get("steps")
    if raw_steps is None:
        raw_steps = []
    if not isinstance(raw_steps, list):
        raise fail("expected a list of steps such as `- normalise: {}`.", "steps", data, "steps")
    for i, item in enumerate(raw_steps):
        key = f"steps[{i}]"
        line = line_of(raw_steps, i)
        if isinstance(item, str) and item in STEP_MODULES:
            item = {item: {}}
        if not isinstance(item, dict) or len(item) != 1:
            raise PipelineError("each step is a mapping with one key, the step name, e.g. `- normalise: {}`.", file=shown, key=key, line=line)
        (name, value), = item.items()
        if name not in STEP_MODULES:
            known = ", ".join(sorted(STEP_MODULES))
            raise PipelineError(f"unknown step `{name}` (known steps: {known}).", file=shown, key=key, line=line)
        module = step_module(name)
        try:
            config = build(module.Config, value, f"{key}.{name}", parent=item, key=name)
        except ConfigError as exc:
            raise error(exc) from None
        steps.append(StepSpec(name=name, config=config, key=f"{key}.{name}", line=line))

    split = spec.split
    stratify = split.stratify if split.stratify is not None else spec.label
    # The split may also use the source name and the column the language step adds.
    added = ["source", *(["language"] if any(st.name == "language" for st in steps) else [])]
    splittable = [*canonical, *(c for c in added if c not in canonical)]
    for key_name, value in (("stratify", stratify), ("group", split.group)):
        if value is not None and value not in splittable:
            raise fail(f"`{value}` is not a column the split can use (known: {', '.join(splittable)}).", f"split.{key_name}", data["split"], key_name if key_name in data["split"] else None)
    split = dataclasses.replace(split, stratify=stratify)
    if split.history is not None and urls.is_url(split.history):
        raise fail(
            f"the split history `{urls.shown_url(split.history)}` is a URL; it must be a local folder "
            "(copy the previous version's output folder to this machine first).", "split.history", data["split"], "history",
        )
    if split.history is not None:
        # The pipeline's own output may be missing on its first run.
        if urls.is_url(spec.output) or not missing_output_history(folder / split.history, folder / spec.output):
            _check_history(folder / split.history, split.history, fail, data["split"])

    output = spec.output if urls.is_url(spec.output) else folder / spec.output
    return Pipeline(
        path=path, dataset=spec.dataset, description=spec.description, about=spec.about or About(),
        sources=tuple(sources), label=spec.label, text=tuple(spec.text), steps=tuple(steps), split=split,
        output=output, on_unreadable=spec.on_unreadable, sha256=sha, canonical_columns=tuple(canonical),
        engine=EngineSpec(name=spec.engine) if isinstance(spec.engine, str) else (spec.engine or EngineSpec()),
    )
