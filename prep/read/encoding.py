"""Turning the bytes of a text source into text, strictly.

Rules:

* ``encoding: auto`` decodes as UTF-8 and strips one leading byte order mark (the encoding used is then
  reported as ``utf-8-sig``). If the bytes are not valid UTF-8 and ``encoding_fallback`` is set, the whole
  file is decoded with the fallback instead; otherwise an :class:`InputError` names the line of the first
  invalid byte and hints at ``encoding_fallback``.
* An explicit codec decodes with ``errors="strict"``; a failure names the line. A leading U+FEFF is
  stripped there too (a BOM is never part of the first column name).
* Nothing is ever replaced: U+FFFD appears in the output only if the file itself encodes it.

Invariant: :attr:`Decoded.data` is ``Decoded.text`` encoded as UTF-8, so byte-level scanners (which only
look at ASCII delimiters, quotes and newlines, never part of a multi-byte UTF-8 sequence) and text-level
parsers see the same content.
"""

from __future__ import annotations

import codecs
from typing import Any

from prep.errors import InputError

AUTO = "auto"
UTF8_BOM = codecs.BOM_UTF8
# UTF-16 byte order marks (The Unicode Standard, section 23.8 "Specials"): used only for a better hint.
UTF16_BOMS = (codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)


class Decoded:
    """Decoded text of a source, its UTF-8 bytes, and the codec that produced it."""

    __slots__ = ("text", "encoding", "_data")

    def __init__(self, text: str, encoding: str, *, utf8: bytes | None = None) -> None:
        self.text = text
        self.encoding = encoding
        self._data = utf8

    @property
    def data(self) -> bytes:
        """The text as UTF-8 bytes (encoded once, on first use; the original bytes if they were UTF-8)."""
        if self._data is None:
            self._data = self.text.encode("utf-8")
        return self._data


def _line_of(raw: bytes, position: int, codec: str) -> int | None:
    """1-based line of the byte at ``position``: newlines in the valid prefix before it, plus one."""
    try:
        prefix = codecs.getincrementaldecoder(codec)("strict").decode(raw[:position], final=False)
    except (UnicodeDecodeError, LookupError):
        return None
    return prefix.count("\n") + 1


def _lookup(source: Any, name: str, key: str) -> str:
    try:
        return codecs.lookup(name).name
    except LookupError as exc:
        raise InputError(
            f"the {key} `{name}` is not a known text encoding.",
            file=source.path_text,
            hint="Use a Python codec name such as utf-8, cp1252, latin-1 or utf-16.",
        ) from exc


def _decode_with(raw: bytes, codec: str, *, final: bool) -> str:
    if final:
        return raw.decode(codec, "strict")
    return codecs.getincrementaldecoder(codec)("strict").decode(raw, final=False)


def _strip_bom(text: str) -> str:
    return text[1:] if text.startswith("\ufeff") else text


def decode(source: Any, raw: bytes, *, final: bool = True) -> Decoded:
    """Decode ``raw`` (the whole file, or a prefix of it when ``final`` is false) as the source says.

    With ``final=False`` an incomplete multi-byte sequence at the very end is left out instead of
    being an error, so that a prefix cut anywhere decodes.
    """
    encoding = source.encoding or AUTO
    if encoding.lower() == AUTO:
        return _decode_auto(source, raw, final=final)
    codec = _lookup(source, encoding, "encoding")
    try:
        text = _decode_with(raw, codec, final=final)
    except UnicodeDecodeError as exc:
        raise InputError(
            f"the bytes are not valid {encoding} (first invalid byte at offset {exc.start}).",
            file=source.path_text,
            line=_line_of(raw, exc.start, codec),
            hint="Check the `encoding` of this source in the pipeline file.",
        ) from exc
    return Decoded(_strip_bom(text), encoding)


def _decode_auto(source: Any, raw: bytes, *, final: bool) -> Decoded:
    has_bom = raw.startswith(UTF8_BOM)
    body = raw[len(UTF8_BOM) :] if has_bom else raw
    try:
        text = _decode_with(body, "utf-8", final=final)
    except UnicodeDecodeError as exc:
        fallback = source.encoding_fallback
        if fallback:
            return _decode_fallback(source, raw, fallback, final=final, cause=exc)
        hint = "Set `encoding_fallback` (for example cp1252 or latin-1) or `encoding` for this source."
        if raw.startswith(UTF16_BOMS):
            hint = "The file starts with a UTF-16 byte order mark: set `encoding: utf-16` for this source."
        raise InputError(
            f"the bytes are not valid UTF-8 (first invalid byte at offset {exc.start + len(raw) - len(body)}).",
            file=source.path_text,
            line=_line_of(body, exc.start, "utf-8"),
            hint=hint,
        ) from exc
    # Valid UTF-8 already: keep the bytes rather than encoding the text again.
    return Decoded(text, "utf-8-sig" if has_bom else "utf-8", utf8=body if final else None)


def _decode_fallback(source: Any, raw: bytes, fallback: str, *, final: bool, cause: Exception) -> Decoded:
    codec = _lookup(source, fallback, "encoding_fallback")
    try:
        text = _decode_with(raw, codec, final=final)
    except UnicodeDecodeError as exc:
        raise InputError(
            f"the bytes are neither valid UTF-8 nor valid {fallback} "
            f"(first invalid byte at offset {exc.start}).",
            file=source.path_text,
            line=_line_of(raw, exc.start, codec),
            hint="Check `encoding_fallback` for this source in the pipeline file.",
        ) from exc
    return Decoded(_strip_bom(text), fallback)
