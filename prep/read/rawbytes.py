"""Loading the bytes of a source file, gzip-decompressed where the source says so.

Invariant: every OS or gzip failure leaves this module as an :class:`~prep.errors.InputError`
naming the file as written in the pipeline file (``source.path_text``), with the original
exception as ``__cause__``. The absolute path never appears in a message.
"""

from __future__ import annotations

import gzip
import zlib
from typing import Any

from prep.errors import InputError

# The text formats that may arrive gzip-compressed. Parquet compresses inside the file.
GZIP_FORMATS = frozenset({"csv", "tsv", "jsonl", "json"})

# How many bytes read_columns() reads at first when it only needs a header; doubled until enough.
PREFIX_BYTES = 1 << 16


def _os_error(source: Any, exc: OSError) -> InputError:
    # strerror is the OS's own wording ("No such file or directory"); the filename attribute
    # would carry the absolute path, so it is deliberately left out.
    reason = exc.strerror or type(exc).__name__
    return InputError(f"the file cannot be opened ({reason}).", file=source.path_text)


def check_compression(source: Any) -> None:
    if source.compression not in (None, "gzip"):
        raise InputError(
            f"the compression `{source.compression}` is not supported.",
            file=source.path_text,
            hint="Use gzip (a .gz file) or no compression.",
        )
    if source.compression == "gzip" and source.format not in GZIP_FORMATS:
        raise InputError(
            f"a {source.format} file cannot be gzip-compressed as a whole.",
            file=source.path_text,
            hint="Parquet compresses its own pages; give the .parquet file itself.",
        )


def _gunzip(source: Any, data: bytes) -> bytes:
    try:
        return gzip.decompress(data)
    except EOFError as exc:
        raise InputError(
            "the gzip stream ends before its end marker; the file is truncated.", file=source.path_text
        ) from exc
    except (gzip.BadGzipFile, zlib.error) as exc:
        raise InputError("the file is not a valid gzip file.", file=source.path_text) from exc


def load_bytes(source: Any) -> bytes:
    """The whole (decompressed) content of the source file."""
    check_compression(source)
    try:
        data = source.path.read_bytes()
    except OSError as exc:
        raise _os_error(source, exc) from exc
    if source.compression == "gzip":
        data = _gunzip(source, data)
    return data


class Prefix:
    """Reads a growing prefix of the (decompressed) file, for header-only reading.

    ``take(n)`` returns at most the first ``n`` bytes; ``complete`` says whether that was all of it.
    """

    def __init__(self, source: Any) -> None:
        check_compression(source)
        self._source = source
        self._data = b""
        self.complete = False
        try:
            self._handle = (
                gzip.open(source.path, "rb") if source.compression == "gzip" else open(source.path, "rb")
            )
        except OSError as exc:
            raise _os_error(source, exc) from exc

    def __enter__(self) -> Prefix:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self._handle.close()

    def take(self, n: int) -> bytes:
        while len(self._data) < n and not self.complete:
            try:
                chunk = self._handle.read(n - len(self._data))
            except EOFError as exc:
                raise InputError(
                    "the gzip stream ends before its end marker; the file is truncated.",
                    file=self._source.path_text,
                ) from exc
            except (gzip.BadGzipFile, zlib.error) as exc:
                raise InputError("the file is not a valid gzip file.", file=self._source.path_text) from exc
            except OSError as exc:
                raise _os_error(self._source, exc) from exc
            if not chunk:
                self.complete = True
            self._data += chunk
        return self._data[:n]
