"""Language identification backends for the ``language`` step.

Two backends, both with their model inside the installed package (nothing is downloaded):

- ``cld2`` (default): Compact Language Detector 2 through ``pycld2``, a C++ naive-Bayes
  identifier over character quadgrams with tables compiled into the extension. It is
  deterministic and releases the GIL while it works, so threads run it on every core.
- ``langdetect``: the Python port of the language-detection library (naive Bayes over character
  1-3-grams with random sampling). It is random unless seeded: every worker sets
  ``DetectorFactory.seed = 0`` before its first text, which makes the answer a function of the
  text alone. It is pure Python, so it runs in worker processes.

Codes are ISO 639-1 where the language has one (``zh-cn``, ``zh-Hant`` -> ``zh``; CLD2's
withdrawn codes ``iw``, ``jw``, ``in``, ``ji`` -> ``he``, ``jv``, ``id``, ``yi``), else the
backend's ISO 639-2/3 code (``haw``, ``ceb``); ``und`` (ISO 639-2 "undetermined") when the
backend cannot tell.

The texts a backend gets and the answers it gives never leave this module except as codes.
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

UNDETERMINED = "und"
BACKENDS = ("cld2", "langdetect")

# ISO 639 codes withdrawn in 1989 that CLD2 still returns, mapped to their successors (ISO 639-1).
_WITHDRAWN = {"iw": "he", "jw": "jv", "in": "id", "ji": "yi"}
# Texts per task handed to a worker: large enough that scheduling costs little (common practice, no source).
CHUNK = 4096
# Below this many texts, one worker does all the work (starting processes costs more than it saves).
_SERIAL_BELOW = 2 * CHUNK


def iso_code(code: str) -> str:
    """A backend's language code as ISO 639-1 (or 639-2/3 where there is no 639-1 code), or ``und``."""
    code = code.strip()
    if not code or code in ("un", "unknown") or code.startswith("xx"):
        return UNDETERMINED
    base = code.split("-")[0].split("_")[0].lower()
    return _WITHDRAWN.get(base, base)


# --- cld2 ----------------------------------------------------------------------------------


def _cld2_chunk(texts: Sequence[str]) -> list[str]:
    import pycld2

    out = []
    codes: dict[str, str] = {}  # CLD2 code -> ISO code: a few dozen distinct codes, converted once each
    for text in texts:
        try:
            # bestEffort: answer even when CLD2 deems the text too short to be reliable, as
            # langdetect does; the step's own `min_chars` decides what is too short.
            _reliable, _bytes, details = pycld2.detect(text, bestEffort=True)
        except pycld2.error:  # e.g. text CLD2 rejects as invalid UTF-8 (lone surrogates)
            out.append(UNDETERMINED)
            continue
        code = details[0][1]
        iso = codes.get(code)
        if iso is None:
            iso = codes[code] = iso_code(code)
        out.append(iso)
    return out


# --- langdetect ----------------------------------------------------------------------------


def _langdetect_init() -> None:
    from langdetect import DetectorFactory
    from langdetect.detector_factory import init_factory

    DetectorFactory.seed = 0
    init_factory()


def _langdetect_chunk(texts: Sequence[str]) -> list[str]:
    from langdetect import DetectorFactory, detect
    from langdetect.lang_detect_exception import LangDetectException

    if DetectorFactory.seed != 0:
        _langdetect_init()
    out = []
    for text in texts:
        try:
            out.append(iso_code(detect(text)))
        except LangDetectException:  # "No features in text."
            out.append(UNDETERMINED)
    return out


_CHUNK_FUNCTIONS: dict[str, Callable[[Sequence[str]], list[str]]] = {
    "cld2": _cld2_chunk,
    "langdetect": _langdetect_chunk,
}


def default_workers() -> int:
    """The cores this process may use."""
    from prep.text import usable_cores

    return usable_cores()


def identify(texts: Sequence[str], backend: str = "cld2", workers: int | None = None) -> list[str]:
    """The language code of every text, in order. The answer for a text depends on the text only.

    ``workers`` (default: the usable cores) threads (cld2) or processes (langdetect) share the
    work in chunks of :data:`CHUNK` texts; the result does not depend on their number.
    """
    if backend not in _CHUNK_FUNCTIONS:
        raise ValueError(f"unknown language backend {backend!r}; known: {', '.join(BACKENDS)}")
    run = _CHUNK_FUNCTIONS[backend]
    workers = default_workers() if workers is None else max(1, workers)
    texts = list(texts)
    if workers == 1 or len(texts) < _SERIAL_BELOW:
        return run(texts)
    chunks = [texts[i : i + CHUNK] for i in range(0, len(texts), CHUNK)]
    if backend == "cld2":
        with ThreadPoolExecutor(max_workers=workers) as pool:
            results = list(pool.map(run, chunks))
    elif multiprocessing.current_process().daemon:
        # A daemonic process (a Dask worker, for one) may not start processes; it is one of
        # several workers already, so it does the work itself.
        results = [run(chunk) for chunk in chunks]
    else:
        # spawn, not fork: the parent holds polars' thread pool, which a fork would copy mid-state.
        context = multiprocessing.get_context("spawn")
        with ProcessPoolExecutor(max_workers=workers, mp_context=context, initializer=_langdetect_init) as pool:
            results = list(pool.map(run, chunks))
    return [code for chunk in results for code in chunk]
