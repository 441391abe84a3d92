"""prep's own errors. Library code raises these; only the CLI turns them into exit codes.

Hierarchy::

    PrepError                 exit 1: something went wrong with the run
    ├── PipelineError         exit 2: the pipeline file or the command line is wrong
    │                                 (unknown key, wrong type, missing input file)
    ├── InputError            exit 1: an input file cannot be read as declared
    │                                 (bad encoding, broken Parquet, unparseable header)
    ├── DataError             exit 1: the data fails a check the pipeline asked for
    │                                 (schema failures above the allowed share)
    └── OutputError           exit 1: the output folder cannot be written safely

Messages are full sentences for people: what went wrong, where (file, line,
column, key), and what to do. They never contain values from the data, since
those may be personal data. Errors from polars, pyarrow, YAML and the OS are
translated at the reading and writing boundaries, keeping the original as
``__cause__`` (``prep --debug`` prints it): readers (``prep.read``), the pipeline
loader (``prep.pipeline``) and the output folder (``prep.write``). An exception of
any other type that reaches the CLI is a bug in prep: the CLI prints only its type
name, since its text may quote data values or absolute paths.

``OutputError`` examples: the output folder holds an input file, or files prep did
not write (``--force`` overrides only that), or a write fails (disk full).
"""

from __future__ import annotations


class PrepError(Exception):
    """Base class of every error a user can cause. ``exit_code`` is what the CLI returns."""

    exit_code = 1

    def __init__(self, message: str, *, hint: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        return self.message if not self.hint else f"{self.message} {self.hint}"


class PipelineError(PrepError):
    """The pipeline file is invalid, e.g. ``steps[2].normalise.foo: unknown key (line 14)``."""

    exit_code = 2

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        key: str | None = None,
        line: int | None = None,
        hint: str | None = None,
    ) -> None:
        where = []
        if file:
            where.append(file)
        if line is not None:
            where.append(f"line {line}")
        prefix = ", ".join(where)
        text = message
        if key:
            text = f"`{key}`: {text}"
        if prefix:
            text = f"{prefix}: {text}"
        super().__init__(text, hint=hint)
        self.file = file
        self.key = key
        self.line = line


class InputError(PrepError):
    """An input file cannot be read as declared, e.g. invalid UTF-8 at line 7 with no fallback encoding."""

    def __init__(
        self,
        message: str,
        *,
        file: str,
        line: int | None = None,
        column: str | None = None,
        hint: str | None = None,
    ) -> None:
        where = [file]
        if line is not None:
            where.append(f"line {line}")
        if column is not None:
            where.append(f"column `{column}`")
        super().__init__(f"{', '.join(where)}: {message}", hint=hint)
        self.file = file
        self.line = line
        self.column = column


class DataError(PrepError):
    """The data fails a check the pipeline asked for, e.g. 12% of rows fail the schema, above the allowed 5%."""


class OutputError(PrepError):
    """The output folder cannot be written safely, e.g. it holds files prep did not write."""
