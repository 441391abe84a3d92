"""Loading the bytes of a source file, gzip-decompressed where the source says so.

Invariant: every OS or gzip failure leaves this module as an :class:`~prep.errors.InputError`
naming the file as written in the pipeline file (``source.path_text``), with the original
exception as ``__cause__``. The absolute path never appears in a message.

``source.path`` is a local :class:`~pathlib.Path` or an fsspec URL (a string, see
:mod:`prep.read.urls`); a URL is opened with fsspec, then handled exactly as a local file's bytes.
"""

from __future__ import annotations

import contextlib
import gzip
import zlib
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

from prep.errors import InputError
from prep.read import urls

# The text formats that may arrive gzip-compressed. Parquet compresses inside the file.
GZIP_FORMATS = frozenset({"csv", "tsv", "jsonl", "json"})

# How many bytes read_columns() reads at first when it only needs a header; doubled until enough.
PREFIX_BYTES = 1 << 16


def _os_error(source: Any, exc: OSError) -> InputError:
    # strerror is the OS's own wording ("No such file or directory"); the filename attribute
    # would carry the absolute path, so it is deliberately left out.
    reason = exc.strerror or type(exc).__name__
    return InputError(f"the file cannot be opened ({reason}).", file=source.path_text)


def _url_error(source: Any, exc: urls.UrlProblem) -> InputError:
    return InputError(f"the input of source `{source.name}` {exc.message}.", file=source.path_text, hint=exc.hint)


def open_binary(source: Any):
    """A binary file object of the (still compressed) source file: a local path or an fsspec URL."""
    if urls.is_url(source.path):
        try:
            return urls.open_url(source.path)
        except urls.UrlProblem as exc:
            raise _url_error(source, exc) from exc
    try:
        return open(source.path, "rb")
    except OSError as exc:
        raise _os_error(source, exc) from exc


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
    if urls.is_url(source.path):
        try:
            data = urls.read_url(source.path)
        except urls.UrlProblem as exc:
            raise _url_error(source, exc) from exc
    else:
        try:
            data = source.path.read_bytes()
        except OSError as exc:
            raise _os_error(source, exc) from exc
    if source.compression == "gzip":
        data = _gunzip(source, data)
    return data


def digest(source: Any) -> tuple[str, int]:
    """(SHA-256 hex digest, size in bytes) of the source file as stored (compressed), for the card and
    manifest; a URL is read again through fsspec for it."""
    handle = open_binary(source)
    try:
        return urls.sha256_stream(handle)
    except Exception as exc:  # a URL backend may raise its own kinds
        if urls.is_url(source.path):
            raise _url_error(source, urls.UrlProblem(f"cannot be read ({urls.reason(exc)})")) from exc
        if isinstance(exc, OSError):
            raise _os_error(source, exc) from exc
        raise


@contextlib.contextmanager
def digest_beside(source: Any) -> Iterator[Future]:
    """:func:`digest` of ``source`` started on a thread; the block runs meanwhile (e.g. the parsing).

    ``future.result()`` gives the digest or raises :func:`digest`'s error. hashlib releases the GIL
    while it hashes large buffers and file reads release it too, so the hashing runs on the other
    core while a source is parsed (the 1M-row demo's four inputs, 311 MiB, took 1.8 s to hash one
    after the other, time the reading no longer waits for). The thread is not waited for when the
    block fails: an error of the read itself is raised at once.
    """
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="prep-digest")
    try:
        yield pool.submit(digest, source)
    finally:
        pool.shutdown(wait=False)


class Prefix:
    """Reads a growing prefix of the (decompressed) file, for header-only reading.

    ``take(n)`` returns at most the first ``n`` bytes; ``complete`` says whether that was all of it.
    """

    def __init__(self, source: Any) -> None:
        check_compression(source)
        self._source = source
        self._data = b""
        self.complete = False
        self._raw = open_binary(source)
        self._handle = gzip.GzipFile(fileobj=self._raw, mode="rb") if source.compression == "gzip" else self._raw

    def __enter__(self) -> Prefix:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self._handle.close()
        if self._handle is not self._raw:
            self._raw.close()  # GzipFile does not close a file object it was given

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
            except Exception as exc:  # an fsspec backend's own error while reading (network, permissions)
                if not urls.is_url(self._source.path):
                    raise
                raise _url_error(self._source, urls.UrlProblem(f"cannot be read ({type(exc).__name__})")) from exc
            if not chunk:
                self.complete = True
            self._data += chunk
        return self._data[:n]
