"""Inputs and outputs given as fsspec URLs (``s3://bucket/key``, ``gs://…``, ``file://…``, ``memory://…``).

A value counts as a URL when it starts with a protocol and ``://`` (:data:`URL_PATTERN`); everything
else is a plain path and keeps its old meaning (relative to the pipeline file). URLs are used as
written: they are opened with fsspec (``fsspec.core.url_to_fs``), never with fsspec's compression
inference, so gzip stays prep's business (:mod:`prep.read.rawbytes`).

Credentials: a URL may carry user-info (``user:password@``) or a query (``?token=…``). Every message,
card and manifest shows :func:`shown_url` instead, which drops the user-info, the query and the
fragment. This is best-effort: a secret written into the path itself cannot be told apart from a
folder name and is shown. The exceptions of fsspec and its backends are never shown either (their
text may quote the URL whole); only their type, or the OS's own wording, is.

Backends: fsspec itself reads ``file://`` and ``memory://``; ``s3://``, ``gs://``, ``abfs://``,
``https://`` and others need a package (s3fs, gcsfs, adlfs, aiohttp …) that the user installs on the
machine running prep and on every Dask worker. fsspec names it when it is missing, and so does prep.
"""

from __future__ import annotations

import hashlib
import re
from typing import Any
from urllib.parse import urlsplit, urlunsplit

URL_PATTERN = re.compile(r"^[A-Za-z][A-Za-z0-9+.\-]+://")
# The protocols fsspec maps onto the local filesystem.
LOCAL_PROTOCOLS = frozenset({"file", "local"})
_INSTALL = re.compile(r"\binstall\s+[\"'`]?([A-Za-z0-9][A-Za-z0-9_.\-]*)", re.IGNORECASE)
HASH_CHUNK = 1 << 20


class UrlProblem(Exception):
    """Why a URL cannot be used: ``message`` (a phrase after the shown URL), ``hint`` (or None).

    Callers turn it into their own error class (PipelineError, InputError, OutputError)."""

    def __init__(self, message: str, hint: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint


def is_url(value: Any) -> bool:
    """``value`` is a string that starts with ``protocol://``."""
    return isinstance(value, str) and URL_PATTERN.match(value) is not None


def protocol(url: str) -> str:
    return url.split("://", 1)[0].lower()


# Azure URLs of fsspec (adlfs; this form from memory) put the container where user-info goes
# (``abfs://container@account.dfs.core.windows.net/...``);
# there a part before "@" without ":" is the container's name and is shown.
_CONTAINER_SCHEMES = {"abfs", "abfss", "az", "adl", "wasb", "wasbs"}


def shown_url(url: str) -> str:
    """``url`` as messages, the card and the manifest show it: without user-info, query and fragment
    (an Azure container name stays: see _CONTAINER_SCHEMES)."""
    parts = urlsplit(url)
    info, at, host = parts.netloc.rpartition("@")
    netloc = host
    if at and parts.scheme.lower() in _CONTAINER_SCHEMES and ":" not in info:
        netloc = f"{info}@{host}"
    return urlunsplit((parts.scheme, netloc, parts.path, "", ""))


def url_path(url: str) -> str:
    """The path part of the shown URL (for telling a format from the file name's extension)."""
    return urlsplit(shown_url(url)).path


def reason(exc: BaseException) -> str:
    # The OS's own wording where there is one; else the exception's type. Never str(exc): a backend's
    # message may hold the whole URL, credentials included.
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror
    if isinstance(exc, FileNotFoundError):
        return "not found"
    return type(exc).__name__


def filesystem(url: str) -> tuple[Any, str]:
    """(fsspec filesystem, path inside it) for ``url``; :class:`UrlProblem` for an unknown protocol or a
    backend that is not installed (naming the pip package when fsspec names it)."""
    import fsspec.core

    name = protocol(url)
    try:
        return fsspec.core.url_to_fs(url)
    except ImportError as exc:
        # fsspec's text for a known protocol whose package is missing, e.g. "Install s3fs to access S3".
        from fsspec.registry import known_implementations

        said = known_implementations.get(name, {}).get("err") or ""
        packages = _INSTALL.findall(said)
        hint = f"Install it with `pip install {packages[0]}`" if len(packages) == 1 else "Install the fsspec backend for it"
        raise UrlProblem(
            f"needs an fsspec backend for `{name}://` that is not installed" + (f" (fsspec: {said.rstrip('.')})" if said else ""),
            f"{hint} (on this machine, and on every Dask worker when you use one).",
        ) from exc
    except ValueError as exc:
        if "Protocol not known" in str(exc):
            raise UrlProblem(
                f"uses the protocol `{name}://`, which fsspec does not know",
                "Check the spelling (e.g. s3://, gs://, abfs://, https://, file://).",
            ) from exc
        raise UrlProblem(f"is not a URL fsspec can use ({type(exc).__name__})") from exc
    except Exception as exc:  # a backend failing to start (credentials, configuration)
        raise UrlProblem(f"cannot be opened ({reason(exc)})") from exc


def input_problem(url: str) -> str | None:
    """Why the input file at ``url`` cannot be read (missing, a folder), as a phrase to follow "it" or the
    URL (``does not exist``); None if it is a file.
    Raises :class:`UrlProblem` for a protocol or backend problem."""
    fs, path = filesystem(url)
    try:
        if fs.isfile(path):
            return None
        if fs.isdir(path):
            return "is a folder; give the URL of a file"
        return "does not exist"
    except Exception as exc:  # backends raise their own types (permissions, network)
        return f"cannot be reached ({reason(exc)})"


def open_url(url: str):
    """A binary file object for reading ``url`` (the caller closes it); :class:`UrlProblem` on failure."""
    fs, path = filesystem(url)
    try:
        return fs.open(path, "rb")
    except FileNotFoundError as exc:
        raise UrlProblem("does not exist") from exc
    except Exception as exc:
        raise UrlProblem(f"cannot be opened ({reason(exc)})") from exc


def read_url(url: str) -> bytes:
    """The whole content of ``url`` (as stored: no decompression)."""
    handle = open_url(url)
    try:
        with handle:
            return handle.read()
    except Exception as exc:
        raise UrlProblem(f"cannot be read ({reason(exc)})") from exc


def sha256_stream(handle: Any) -> tuple[str, int]:
    """(SHA-256 hex digest, size in bytes) of what a binary file object holds, read in 1 MiB chunks
    (the one hashing loop for inputs and outputs, local or URL); the handle is closed."""
    h = hashlib.sha256()
    size = 0
    with handle:
        for chunk in iter(lambda: handle.read(HASH_CHUNK), b""):
            h.update(chunk)
            size += len(chunk)
    return h.hexdigest(), size


def facts_path(url: str) -> str:
    """The URL as the card and manifest record it: :func:`shown_url`, or only the file name for a
    ``file://`` URL (an absolute local path, which the card never shows)."""
    if protocol(url) in LOCAL_PROTOCOLS:
        return url_path(url).rstrip("/").rsplit("/", 1)[-1]
    return shown_url(url)


def local_path(url: str):
    """The local :class:`~pathlib.Path` of a ``file://`` (or ``local://``) URL, else None."""
    from pathlib import Path

    if protocol(url) not in LOCAL_PROTOCOLS:
        return None
    fs, path = filesystem(url)
    return Path(path)
