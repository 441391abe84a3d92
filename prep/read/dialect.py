"""The two delimited dialects prep reads, and the wording of their record problems.

CSV follows RFC 4180 section 2:

* records end with a line break (CRLF, or LF alone: exports from Unix tools use it); a CR directly
  before the LF, or directly before the end of the file, is part of the line break, any other CR is text;
* fields are separated by the delimiter (``,`` unless the source overrides it);
* a field may be enclosed in double quotes; inside, line breaks and delimiters are text and a double
  quote is written twice (``""``);
* a double quote anywhere else (inside an unquoted field, rule 5; or text after the closing quote) is
  a malformed record, which is unreadable. Like Python's ``csv`` module, the parser then goes on to the
  next delimiter or line break, so one stray quote costs one record, not the rest of the file.

TSV follows the IANA registration of ``text/tab-separated-values``: each line is a record, fields are
separated by tabs, there is no quoting (a double quote is an ordinary character), and a field cannot
contain a tab or a line break. A CR before the LF is accepted as part of the line break.

Common to both (decisions of this project, not from either standard):

* lines that are empty (or hold only the CR of a CRLF) are skipped and are not records; they still
  count for line numbers;
* the first record is the header; its names are kept exactly as written (only a byte order mark is
  removed, by the decoder);
* an empty unquoted field is null; a quoted empty field ``""`` is the empty string (CSV only);
* a record whose field count differs from the header's is unreadable;
* an opening quote that is never closed makes everything from that record to the end of the file one
  unreadable record (the detail says how many lines it spans); the records before it are kept.
"""

from __future__ import annotations

from dataclasses import dataclass

from prep.errors import InputError

QUOTE = '"'


@dataclass(frozen=True)
class Dialect:
    """How to split a delimited file: the one-character separator, and whether double quotes quote."""

    separator: str
    quoting: bool


def dialect_for(source) -> Dialect:
    """The dialect of a csv/tsv source, with its delimiter override checked."""
    quoting = source.format == "csv"
    separator = source.delimiter if source.delimiter is not None else ("," if quoting else "\t")
    if len(separator) != 1 or not separator.isascii() or separator in '"\r\n':
        raise InputError(
            f"the delimiter {separator!r} cannot be used.",
            file=source.path_text,
            hint="Give one ASCII character other than a double quote, CR or LF, for example ';' or '|'.",
        )
    return Dialect(separator, quoting)


# Wording of record problems. Fixed text and counts only: never a value from the data.
QUOTE_IN_UNQUOTED = "a double quote inside an unquoted field (RFC 4180 section 2, rule 5)"
TEXT_AFTER_QUOTE = "text between a closing double quote and the next delimiter (RFC 4180 section 2, rule 5)"


def unterminated(lines: int) -> str:
    return f"a quoted field is never closed; the rest of the file ({lines} lines) is this one record"


def field_count(found: int, expected: int) -> str:
    return f"the record has {found} fields; the header has {expected}"
