"""The careful path for delimited files: a record-by-record parser over decoded text.

It implements :mod:`prep.read.dialect` directly and is the reference the fast path is tested against.
It is used when the fast path cannot decide (malformed quoting anywhere in the file) or fails.

Speed: lines without a double quote are split with ``str.split``; only records that contain a quote
go through the field-by-field scan.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass

from prep.read.dialect import QUOTE, QUOTE_IN_UNQUOTED, TEXT_AFTER_QUOTE, Dialect, unterminated

# A quoted field: opening quote, then runs of non-quotes or doubled quotes, then the closing quote.
# Possessive quantifiers (Python 3.11+) so that a doubled quote is never re-read as a closing one
# followed by an opening one: that would accept `"a""` as a field followed by junk.
_QUOTED = re.compile(r'"((?:[^"]++|"")*+)"')
# Marks a record whose quoted field runs to the end of the file; replaced by wording with a line count.
_UNTERMINATED = object()


@dataclass(frozen=True, slots=True)
class Record:
    """One record: the 1-based line it starts on, its fields, and its problem if it is malformed."""

    line: int
    fields: list[str | None]
    problem: str | None = None


def iter_records(text: str, dialect: Dialect) -> Iterator[Record]:
    """Every non-blank record of ``text`` in order (the header first)."""
    for record, _end in iter_spans(text, dialect):
        yield record


def iter_spans(text: str, dialect: Dialect) -> Iterator[tuple[Record, int]]:
    """Like :func:`iter_records`, with the index of the LF that ends each record (``len(text)`` at the end)."""
    sep = dialect.separator
    run = re.compile(f"[^{re.escape(sep)}\n]*")
    n = len(text)
    pos = 0
    line = 1
    while pos < n:
        end = text.find("\n", pos)
        if end < 0:
            end = n
        if not dialect.quoting or text.find(QUOTE, pos, end) < 0:
            raw = text[pos:end]
            if raw.endswith("\r"):
                raw = raw[:-1]
            if raw:
                yield Record(line, [field if field else None for field in raw.split(sep)]), end
            pos = end + 1
            line += 1
            continue
        fields, problem, end = _quoted_record(text, pos, sep, run)
        spanned = text.count("\n", pos, end) + 1
        if problem is _UNTERMINATED:
            problem = unterminated(spanned)
        yield Record(line, fields, problem), end
        line += spanned
        pos = end + 1


def _quoted_record(text: str, i: int, sep: str, run: re.Pattern[str]) -> tuple[list[str | None], object, int]:
    """Fields of the record starting at ``i``; returns (fields, problem, index of its closing LF or len)."""
    n = len(text)
    fields: list[str | None] = []
    problem: object = None
    while True:
        if i < n and text[i] == QUOTE:
            match = _QUOTED.match(text, i)
            if match is None:
                return fields, _UNTERMINATED, n
            fields.append(match.group(1).replace('""', QUOTE))
            i = match.end()
            if i < n and text[i] != sep and text[i] != "\n":
                if text[i] == "\r" and (i + 1 == n or text[i + 1] == "\n"):
                    i += 1  # CR of the line break
                else:
                    problem = problem or TEXT_AFTER_QUOTE
                    i = run.match(text, i).end()  # go on as unquoted text, quotes included
        else:
            j = run.match(text, i).end()
            value = text[i:j]
            if QUOTE in value:
                problem = problem or QUOTE_IN_UNQUOTED
            if (j == n or text[j] == "\n") and value.endswith("\r"):
                value = value[:-1]
            fields.append(value if value else None)
            i = j
        if i >= n:
            return fields, problem, n
        if text[i] == "\n":
            return fields, problem, i
        i += 1  # past the separator
