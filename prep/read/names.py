"""Showing column names in messages, and hints when a mapped column is not found.

Column names are kept exactly as written (see :mod:`prep.read.dialect`), so a header with a trailing
blank, a no-break space or another delimiter than the one declared does not match the mapping. These
helpers make such names visible in a one-line message and say what probably went wrong.
"""

from __future__ import annotations

import json
import unicodedata
from collections.abc import Sequence

# How many column names a message lists before it says "and N more" (a file may have thousands).
MAX_LISTED = 20
# Delimiters that exports commonly use instead of the comma (common practice, no source).
OTHER_DELIMITERS = (";", "\t", "|")


def shown_name(name: str) -> str:
    """``name`` in backticks, with every character that does not print as itself escaped.

    Plain spaces stay (the backticks show leading and trailing ones); other white space, control,
    format (zero-width) and unassigned characters become ``\\uXXXX``, so a no-break space is visible.
    """
    out = []
    for ch in name:
        category = unicodedata.category(ch)
        if ch != " " and (category[0] in "CZ"):
            out.append(f"\\u{ord(ch):04x}" if ord(ch) <= 0xFFFF else f"\\U{ord(ch):08x}")
        else:
            out.append(ch)
    return "`" + "".join(out) + "`"


def describe_columns(names: Sequence[str], limit: int = MAX_LISTED) -> str:
    """``names`` as a comma-separated list for a message, at most ``limit`` of them."""
    listed = ", ".join(shown_name(n) for n in names[:limit])
    if len(names) > limit:
        listed += f" and {len(names) - limit:,} more"
    return listed or "none"


def _loose(name: str) -> str:
    return "".join(unicodedata.normalize("NFKC", name).split()).casefold()


def column_hint(names: Sequence[str], wanted: str, *, file_format: str | None = None) -> str | None:
    """A hint for a mapped column ``wanted`` that is not among ``names``, or None."""
    if file_format in ("csv", "tsv") and len(names) == 1:
        for delimiter in OTHER_DELIMITERS:
            if delimiter in names[0] and wanted in names[0].split(delimiter):
                # JSON string syntax is also YAML's double-quoted syntax, so "\t" works as written.
                quoted = json.dumps(delimiter)
                return f"The header looks delimited by {quoted}: set `delimiter: {quoted}` for this source."
    close = [n for n in names if _loose(n) == _loose(wanted)]
    if close:
        return (
            f"The file has {shown_name(close[0])}, which differs only in white space, case or Unicode form; "
            "map the name exactly as the file writes it."
        )
    return None
