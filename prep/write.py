"""The output folder: written into a temporary sibling folder, swapped into place only when complete.

Layout of a finished output folder: the split and ledger Parquet files, the card files, and
``manifest.json`` written last. A folder counts as prep's own (and may be replaced) only if it
holds a ``manifest.json`` whose ``tool`` is ``prep``; an empty folder may be used too. Anything
else is refused (``force`` overrides that one refusal), so prep never deletes files it did not write.

Crash safety (a process killed at any instant, SIGKILL included):

* everything is written into ``.<out>.prep-tmp-<pid>-<8 hex>`` beside ``out``; that folder holds the
  marker file :data:`MARKER` from its creation until just before the swap, and ``manifest.json`` is
  written last, so a temporary folder is never mistaken for a finished output;
* the swap is one atomic ``renameat2(RENAME_EXCHANGE)`` on Linux: at every instant ``out`` is either
  the complete previous output or the complete new one. Where the exchange is not available the old
  folder is first renamed to ``.<out>.prep-old-<pid>-<8 hex>`` and a later run puts it back if the
  process died between the two renames;
* the folder swapped out gets the marker before it is deleted, and the marker is deleted last;
* a later run (:func:`clean_stale`) removes leftover folders of earlier runs, and only those: the
  name must match the pattern above for this ``out``, the process that made it must be gone, and the
  folder must hold the marker or a prep manifest. Nothing else is ever touched.

An output given as an fsspec URL (``s3://bucket/out``; :func:`run_into_url`) cannot be swapped
atomically: object stores have no rename of a folder. The run writes its whole output folder locally
first (the steps above, into a temporary local folder), and only when it is complete uploads it
(:class:`RemoteFolder`): the marker first, the previous ``manifest.json`` removed, the files, stale files
of the previous output removed, ``manifest.json`` last, the marker removed. So a run that fails before
the upload leaves the previous output exactly as it was, and a ``manifest.json`` at the URL means a
complete output; a crash during the upload itself can leave a mix of old and new files without a
manifest (readers check the manifest, and the next run may replace such a folder because it holds
prep's marker). A ``file://`` URL is a local path and gets the local writer.
"""

from __future__ import annotations

import ctypes
import errno
import json
import os
import re
import shutil
import sys
import tempfile
import uuid
from collections.abc import Callable
from pathlib import Path
from typing import Any

import polars as pl

from prep.errors import DataError, OutputError, PrepError
from prep.read import urls

MANIFEST = "manifest.json"
TOOL_NAME = "prep"
# Present in every folder prep is writing or deleting, never in a finished output folder.
MARKER = ".prep-incomplete"
_LEFTOVER = re.compile(r"^\.(?P<out>.+)\.prep-(?P<kind>tmp|old)-(?P<pid>[0-9]+)-[0-9a-f]{8}$")
# renameat2(2) flag and the "current directory" file descriptor, from <linux/fs.h> and <fcntl.h>.
_RENAME_EXCHANGE = 2
_AT_FDCWD = -100


# Rows per Parquet row group of every file prep writes.
ROW_GROUP_ROWS = 131_072


def sha256_file(path: Path) -> str:
    return urls.sha256_stream(open(path, "rb"))[0]


def dumps_json(data: Any) -> str:
    """JSON as prep writes it: sorted keys, two-space indent, UTF-8, a final newline (stable bytes)."""
    return json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False) + "\n"


def _manifest(folder: Path) -> dict[str, Any] | None:
    try:
        data = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) and data.get("tool") == TOOL_NAME else None


def is_prep_output(folder: Path) -> bool:
    """``folder`` holds a prep manifest and no marker of an unfinished write."""
    return _manifest(folder) is not None and not (folder / MARKER).exists()


def verify_output(folder: Path) -> list[str]:
    """What is wrong with a finished output folder: [] when the manifest is there, valid, and every file
    it lists has the recorded size and SHA-256."""
    manifest = _manifest(folder)
    if manifest is None:
        return [f"no valid {MANIFEST}"]
    problems = []
    if (folder / MARKER).exists():
        problems.append(f"the marker {MARKER} of an unfinished write is present")
    for name, info in sorted(manifest.get("files", {}).items()):
        path = folder / name
        if not path.is_file():
            problems.append(f"{name}: missing")
        elif path.stat().st_size != info.get("bytes") or sha256_file(path) != info.get("sha256"):
            problems.append(f"{name}: differs from the manifest")
    return problems


def leftover_name(out: Path, kind: str) -> str:
    """Name of a temporary (``tmp``) or swapped-out (``old``) folder of this process beside ``out``."""
    return f".{out.name}.prep-{kind}-{os.getpid()}-{uuid.uuid4().hex[:8]}"


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # someone else's process
    except OSError:
        return False
    return True


def _leftovers(out: Path) -> list[tuple[Path, str]]:
    """Folders beside ``out`` left by prep runs that are over: (path, kind), sorted by name."""
    try:
        entries = sorted(out.parent.iterdir())
    except OSError:
        return []
    found = []
    for entry in entries:
        match = _LEFTOVER.match(entry.name)
        if match is None or match["out"] != out.name or entry.is_symlink() or not entry.is_dir():
            continue
        if _pid_alive(int(match["pid"])):
            continue  # a run in progress (or this one)
        if (entry / MARKER).is_file() or _manifest(entry) is not None:
            found.append((entry, match["kind"]))
    return found


def _write_marker(folder: Path) -> None:
    (folder / MARKER).write_text(dumps_json({"tool": TOOL_NAME, "pid": os.getpid()}), encoding="utf-8")


def _remove_own(folder: Path) -> None:
    """Delete a folder prep made, marker last, so that a kill half-way leaves it recognisable."""
    if not (folder / MARKER).exists():
        _write_marker(folder)
    for entry in folder.iterdir():
        if entry.name == MARKER:
            continue
        if entry.is_dir() and not entry.is_symlink():
            shutil.rmtree(entry)
        else:
            entry.unlink()
    (folder / MARKER).unlink()
    folder.rmdir()


def clean_stale(out: Path) -> list[str]:
    """Put back or remove what killed runs left beside ``out``; returns the names handled.

    If ``out`` is missing and a swapped-out previous output survives whole (the process died between
    the two renames of the fallback swap), it becomes ``out`` again. Every other leftover is removed.
    """
    handled = []
    for entry, kind in _leftovers(out):
        if kind == "old" and not out.exists() and not out.is_symlink() and not verify_output(entry):
            try:
                os.rename(entry, out)
                handled.append(entry.name)
                continue
            except OSError:
                pass
        try:
            _remove_own(entry)
        except OSError:
            continue  # best effort: never fail a run over a leftover
        handled.append(entry.name)
    return handled


def _exchange(a: Path, b: Path) -> bool:
    """Atomically swap two folders (Linux renameat2 RENAME_EXCHANGE); False where unsupported."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    renameat2.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    renameat2.restype = ctypes.c_int
    if renameat2(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP, errno.EOPNOTSUPP):
        return False
    raise OSError(code, os.strerror(code))


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.relative_to(folder)
    except ValueError:
        return False
    return True


def check_output_folder(out: Path, inputs: list[Path], *, shown: str, force: bool = False) -> None:
    """Refuse an output folder prep must not replace.

    Always refused: a path that is a file or a symbolic link, a folder that contains an input file (or
    the pipeline file, when the caller lists it in ``inputs``), and a folder that contains the current
    working folder. Refused unless ``force``: a non-empty folder without a prep manifest.
    """
    again = "Choose another `output` or `--out`."
    if out.is_symlink():
        raise OutputError(f"The output path `{shown}` is a symbolic link; prep replaces its output folder and will not follow it. {again}")
    if out.exists() and not out.is_dir():
        raise OutputError(f"The output path `{shown}` is a file, not a folder. {again}")
    out_abs = out.resolve()
    for path in _local_inputs(inputs):
        if _inside(path.resolve(), out_abs):
            raise OutputError(
                f"The output folder `{shown}` contains an input file; prep replaces its output folder on every run "
                f"and will not risk deleting inputs. {again}"
            )
    if _inside(Path.cwd().resolve(), out_abs):
        raise OutputError(f"The output folder `{shown}` contains the current working folder; prep will not replace it. {again}")
    if out.is_dir() and not force and any(out.iterdir()) and not is_prep_output(out):
        raise OutputError(
            f"The output folder `{shown}` is not empty and was not written by prep (no prep manifest.json). "
            "Choose an empty or new folder so that prep does not overwrite files it did not write, "
            "or pass --force to replace that folder and everything in it."
        )


def _local_inputs(inputs: list[Any]) -> list[Path]:
    """The local files among ``inputs`` (paths, ``file://`` URLs); other URLs cannot be inside a local folder."""
    local = []
    for item in inputs:
        if urls.is_url(item):
            path = urls.local_path(item)
            if path is not None:
                local.append(path)
        else:
            local.append(Path(item))
    return local


def prepare_output(out: Path, inputs: list[Path], *, shown: str, force: bool = False) -> list[str]:
    """Before a run: put back or remove leftovers of killed runs (:func:`clean_stale`), then
    :func:`check_output_folder`. Returns the names of the leftovers handled."""
    handled = clean_stale(out)
    check_output_folder(out, inputs, shown=shown, force=force)
    return handled


def _os_reason(exc: BaseException) -> str:
    # strerror is the OS's own wording; the filename attribute would carry an absolute path.
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror
    return type(exc).__name__


class OutputFolder:
    """A temporary folder beside ``out``; :meth:`commit` swaps it into place.

    Use as a context manager: on any exception the temporary folder is removed and ``out``
    is left exactly as it was. A process killed before :meth:`commit` finishes leaves ``out``
    exactly as it was too, and a marked temporary folder that a later run removes.
    """

    def __init__(self, out: Path) -> None:
        self.out = out
        self.tmp = out.parent / leftover_name(out, "tmp")
        self.files: dict[str, dict[str, Any]] = {}

    def __enter__(self) -> "OutputFolder":
        try:
            self.out.parent.mkdir(parents=True, exist_ok=True)
            self.tmp.mkdir()
            _write_marker(self.tmp)
        except OSError as exc:
            raise OutputError(f"Cannot create the output folder next to `{self.out.name}` ({_os_reason(exc)}).") from exc
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None and self.tmp.exists():
            try:
                _remove_own(self.tmp)
            except OSError:
                shutil.rmtree(self.tmp, ignore_errors=True)

    def path(self, name: str) -> Path:
        return self.tmp / name

    def _failed(self, name: str, exc: BaseException) -> OutputError:
        return OutputError(f"Cannot write `{name}` into the output folder `{self.out.name}` ({_os_reason(exc)}).")

    def write_parquet(self, name: str, frame: pl.DataFrame) -> dict[str, Any]:
        path = self.path(name)
        try:
            # Fixed compression, statistics and row groups: same frame, same polars version -> same
            # bytes. Without the rechunk the row groups followed the frame's memory chunks, which
            # depend on how the frame was built (seen: the same rows, two engines, other bytes).
            frame.rechunk().write_parquet(
                path, compression="zstd", compression_level=3, statistics=True, row_group_size=ROW_GROUP_ROWS
            )
            info = {"rows": frame.height, "bytes": path.stat().st_size, "sha256": sha256_file(path)}
        except (OSError, pl.exceptions.PolarsError) as exc:
            raise self._failed(name, exc) from exc
        self.files[name] = info
        return info

    def write_text(self, name: str, text: str) -> dict[str, Any]:
        path = self.path(name)
        try:
            path.write_text(text, encoding="utf-8", newline="\n")
            info = {"bytes": path.stat().st_size, "sha256": sha256_file(path)}
        except OSError as exc:
            raise self._failed(name, exc) from exc
        self.files[name] = info
        return info

    def write_csv(self, name: str, frame: pl.DataFrame) -> dict[str, Any]:
        """A CSV for people (e.g. a review export), with every cell neutralised against formula
        injection (:func:`neutralise_formulas`); RFC 4180 quoting, CRLF line breaks, UTF-8."""
        safe = frame.with_columns(neutralise_formulas(pl.col(c).cast(pl.String)).alias(c) for c in frame.columns)
        text = safe.write_csv(quote_style="always", line_terminator="\r\n", include_header=True)
        return self.write_text(name, text)

    def commit(self, manifest: dict[str, Any]) -> None:
        """Write the manifest last, fsync, then swap the folder into place atomically."""
        manifest = dict(manifest, tool=TOOL_NAME, files=dict(sorted(self.files.items())))
        mpath = self.path(MANIFEST)
        try:
            with open(mpath, "w", encoding="utf-8", newline="\n") as fh:
                fh.write(dumps_json(manifest))
                fh.flush()
                os.fsync(fh.fileno())
            (self.tmp / MARKER).unlink()
        except OSError as exc:
            raise self._failed(MANIFEST, exc) from exc
        try:
            old = self._swap()
        except OSError as exc:
            raise OutputError(f"Cannot move the finished output into `{self.out.name}` ({_os_reason(exc)}).") from exc
        if old is not None:
            try:
                _remove_own(old)
            except OSError:
                pass  # the next run removes it (it is marked)

    def _swap(self) -> Path | None:
        """Put the temporary folder at ``out``; returns where the previous ``out`` now is, if any."""
        if not self.out.exists():
            os.rename(self.tmp, self.out)
            return None
        if _exchange(self.tmp, self.out):
            return self.tmp
        old = self.out.parent / leftover_name(self.out, "old")
        os.rename(self.out, old)
        try:
            os.rename(self.tmp, self.out)
        except OSError:
            os.rename(old, self.out)
            raise
        return old


# OWASP "CSV Injection": cells beginning with = + - @, tab (0x09) or carriage return (0x0D) may be read
# as a formula by spreadsheet programs; prefix such a cell with a single quote (from memory of that page).
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_FORMULA_PATTERN = r"^[=+\-@\t\r]"


def neutralise_formulas(expr: pl.Expr) -> pl.Expr:
    """``expr`` (String) with a ``'`` put before every value that starts like a spreadsheet formula."""
    return pl.when(expr.str.contains(_FORMULA_PATTERN)).then(pl.lit("'") + expr).otherwise(expr)


# --- outputs at an fsspec URL ---------------------------------------------------------------------


def upload_file(fs: Any, local: Path, remote: str) -> None:
    """Copy one finished local file to ``remote`` (a path in ``fs``). One function, so tests can watch the order."""
    fs.put_file(str(local), remote)


class RemoteFolder:
    """An output folder at an fsspec URL: the refusal rules of :func:`check_output_folder`, and the upload.

    ``url`` is used as written; messages show :func:`prep.read.urls.shown_url` (no credentials).
    """

    def __init__(self, url: str) -> None:
        self.url = url
        self.shown = urls.shown_url(url)
        try:
            self.fs, path = urls.filesystem(url)
        except urls.UrlProblem as exc:
            raise OutputError(f"The output `{self.shown}` {exc.message}." + (f" {exc.hint}" if exc.hint else "")) from exc
        self.path = path.rstrip("/") or path

    def _at(self, name: str) -> str:
        return f"{self.path}/{name}"

    def _failed(self, doing: str, exc: BaseException) -> OutputError:
        return OutputError(f"Cannot {doing} the output `{self.shown}` ({urls.reason(exc)}).")

    def _json(self, name: str) -> dict[str, Any] | None:
        try:
            data = json.loads(self.fs.cat_file(self._at(name)).decode("utf-8"))
        except Exception:  # missing, unreadable, not JSON: not prep's
            return None
        return data if isinstance(data, dict) and data.get("tool") == TOOL_NAME else None

    def _entries(self) -> list[str]:
        """Names directly inside the folder ([] when there is no folder)."""
        try:
            if not self.fs.isdir(self.path):
                return []
            return sorted(entry.rstrip("/").rsplit("/", 1)[-1] for entry in self.fs.ls(self.path, detail=False))
        except FileNotFoundError:
            return []

    def check(self, inputs: list[Any], *, force: bool = False) -> None:
        """Refuse as :func:`check_output_folder` does: a file, a folder holding an input, a non-empty
        folder that prep did not write (no prep ``manifest.json`` and no marker of prep's upload) unless ``force``."""
        again = "Choose another `output` or `--out`."
        try:
            if self.fs.isfile(self.path):
                raise OutputError(f"The output `{self.shown}` is a file, not a folder. {again}")
            entries = self._entries()
        except OutputError:
            raise
        except Exception as exc:
            raise self._failed("reach", exc) from exc
        mine = urls.protocol(self.url)
        for item in inputs:
            if urls.is_url(item) and urls.protocol(item) == mine:
                try:
                    _, path = urls.filesystem(item)
                except urls.UrlProblem:
                    continue
                if path.startswith(self.path + "/"):
                    raise OutputError(
                        f"The output folder `{self.shown}` contains an input file; prep replaces its output folder on every "
                        f"run and will not risk deleting inputs. {again}"
                    )
        if entries and not force and self._json(MANIFEST) is None and self._json(MARKER) is None:
            raise OutputError(
                f"The output folder `{self.shown}` is not empty and was not written by prep (no prep manifest.json). "
                "Choose an empty or new folder so that prep does not overwrite files it did not write, "
                "or pass --force to replace that folder and everything in it."
            )

    def upload(self, local: Path) -> None:
        """Upload the finished local output folder ``local``: marker, old manifest removed, files, stale files
        removed, ``manifest.json`` last, marker removed (see the module docstring)."""
        names = sorted(p.relative_to(local).as_posix() for p in local.rglob("*") if p.is_file())
        if MANIFEST not in names:
            raise OutputError(f"The output folder for `{self.shown}` has no {MANIFEST}; nothing was uploaded.")
        try:
            previous = self._entries()
            self.fs.makedirs(self.path, exist_ok=True)
            self.fs.pipe_file(self._at(MARKER), dumps_json({"tool": TOOL_NAME, "pid": os.getpid()}).encode("utf-8"))
            if MANIFEST in previous:
                self.fs.rm_file(self._at(MANIFEST))
            for name in names:
                if name != MANIFEST:
                    upload_file(self.fs, local / name, self._at(name))
            keep = {name.split("/", 1)[0] for name in names} | {MARKER}
            for name in previous:
                if name not in keep:
                    self.fs.rm(self._at(name), recursive=True)
            upload_file(self.fs, local / MANIFEST, self._at(MANIFEST))
            self.fs.rm_file(self._at(MARKER))
        except Exception as exc:
            raise self._failed("upload to", exc) from exc

    def upload_beside(self, local: Path, suffix: str) -> str:
        """Upload ``local`` to ``<url><suffix>`` (beside the folder, as the local writer puts failure cases);
        returns the URL as shown."""
        try:
            upload_file(self.fs, local, self.path + suffix)
        except Exception as exc:
            raise self._failed("upload beside", exc) from exc
        return self.shown.rstrip("/") + suffix


class UploadInterrupted(PrepError):
    """Ctrl-C during the upload of an output URL: unlike an interrupt earlier in the run, the previous
    output is no longer whole (the CLI must not say it is unchanged)."""

    exit_code = 130


def run_into_url(
    url: str,
    run_local: Callable[..., Any],
    *,
    inputs: list[Any],
    report: Callable[..., None],
    force: bool = False,
) -> Any:
    """Run with the output at ``url``: ``run_local(out, report, force)`` writes a local output folder
    (the normal run, returning a RunResult); a ``file://`` URL is that local folder itself, any other URL gets
    the folder written into a temporary local folder and uploaded by :meth:`RemoteFolder.upload`.

    Nothing is uploaded unless the run finished; a run stopped by a failing step uploads only its
    failure cases, beside the folder (``<url>.<name>.parquet``, as the local writer does).
    """
    local = urls.local_path(url)
    if local is not None:
        return run_local(local, report, force)
    remote = RemoteFolder(url)
    remote.check(inputs, force=force)

    def inner(event: str, **data: Any) -> None:
        if event != "written":  # the local temporary folder is no one's business
            report(event, **data)

    with tempfile.TemporaryDirectory(prefix="prep-upload-") as tmp:
        out = Path(tmp) / "out"
        try:
            result = run_local(out, inner, False)
        except DataError as exc:
            cases = sorted(p for p in Path(tmp).glob("out.*.parquet") if p.is_file())
            if not cases:
                raise
            shown = [remote.upload_beside(p, p.name[len("out"):]) for p in cases]
            base = exc.__cause__ if isinstance(exc.__cause__, DataError) else exc
            raise DataError(f"{base.message} Failure cases: {', '.join(f'`{w}`' for w in shown)}.") from exc
        try:
            remote.upload(out)
        except KeyboardInterrupt:
            raise UploadInterrupted(
                f"Interrupted while uploading to `{remote.shown}`: the output there is incomplete (it has no "
                "manifest.json); the next run replaces it."
            ) from None
    report("written", output=remote.shown)
    result.output = remote.shown
    return result
