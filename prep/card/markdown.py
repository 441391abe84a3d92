"""The card dict -> ``card.md``, a document for people.

Renders the document of :mod:`prep.card.document` (organised by the question groups of
Datasheets for Datasets, Gebru et al. 2018, revised 2021). Charts are HTML-only; the tables
beside them hold the same numbers.

Invariants:

- Rendered only from the card dict, so ``card.md`` and ``card.json`` never disagree.
- Same dict, same string (no time, no locale-dependent formatting); ends with one newline.
- Values from the pipeline file (names, class names) are escaped so they cannot break a table
  or inject HTML.
"""

from __future__ import annotations

from typing import Any

from prep.card.document import (
    HEADINGS,
    NOT_PROVIDED,
    Bullets,
    Chart,
    Code,
    Fields,
    Heading,
    Para,
    Quote,
    Strong,
    Table,
    build_document,
)

__all__ = ["HEADINGS", "NOT_PROVIDED", "render_markdown"]


def render_markdown(card: dict[str, Any]) -> str:
    """The Markdown document for ``card`` (a dict as :func:`prep.card.build_card` returns)."""
    title, intro, sections = build_document(card)
    blocks: list[str] = [f"# {_esc(title)}"] + [_inline(p) for p in intro]
    for section in sections:
        blocks.append(f"## {section.title}")
        blocks.extend(b for b in (_block(x) for x in section.blocks) if b)
    return "\n\n".join(blocks) + "\n"


def _block(block: Any) -> str | None:
    if isinstance(block, Para):
        return _inline(block.parts)
    if isinstance(block, Heading):
        return f"### {_esc(block.text)}"
    if isinstance(block, Fields):
        lines = [f"**{label}:** {NOT_PROVIDED if value is None else _inline(value)}" for label, value in block.pairs]
        # Two trailing spaces make a Markdown line break; the last line needs none.
        return "  \n".join(lines)
    if isinstance(block, Table):
        table = _table(block.header, [[_cell(c) for c in row] for row in block.rows], empty=block.empty)
        # Markdown tables have no caption: the HTML card's caption goes on a line of its own above.
        return f"*{_esc(block.caption)}*\n\n{table}" if block.caption else table
    if isinstance(block, Bullets):
        return "\n".join(f"- {_inline(item)}" for item in block.items)
    if isinstance(block, Quote):
        return f"> {_inline(block.parts)}"
    if isinstance(block, Chart):
        return None  # charts are drawn in card.html only
    raise TypeError(f"unknown block {type(block).__name__}")


def _cell(value: Any) -> str:
    return _inline(value) if isinstance(value, list) else _inline([value])


def _inline(parts: list) -> str:
    out = []
    for part in parts:
        if part is None:
            out.append("–")
        elif isinstance(part, Code):
            out.append(_code(part))
        elif isinstance(part, Strong):
            out.append(f"**{_esc(part)}**")
        else:
            out.append(_esc(part))
    return "".join(out)


# --- helpers ---------------------------------------------------------------------------------


def _esc(text: Any) -> str:
    """Text safe inside a Markdown paragraph or table cell: no line breaks, pipes or HTML tags."""
    s = str(text)
    for old, new in (("\\", "\\\\"), ("|", "\\|"), ("<", "&lt;"), (">", "&gt;"), ("\r", " "), ("\n", " ")):
        s = s.replace(old, new)
    return s


def _code(text: Any) -> str:
    """An inline code span; the fence is longer than any backtick run inside (CommonMark 0.31, 6.1)."""
    s = str(text).replace("\r", " ").replace("\n", " ").replace("|", "\\|")
    longest = current = 0
    for ch in s:
        current = current + 1 if ch == "`" else 0
        longest = max(longest, current)
    fence = "`" * (longest + 1)
    pad = " " if s.startswith("`") or s.endswith("`") else ""
    return f"{fence}{pad}{s}{pad}{fence}"


def _table(header: list[str], rows: list[list[Any]], *, empty: str | None = None) -> str:
    if not rows and empty is not None:
        return empty
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join(" --- " for _ in header) + "|"]
    lines += ["| " + " | ".join(str(v) for v in row) + " |" for row in rows]
    return "\n".join(lines)
