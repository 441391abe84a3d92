"""Step ``normalise``: make text and label spellings comparable, without setting rows aside.

Text columns (``columns``, default: the pipeline's text columns), per cell, in this order:

1. HTML (if ``html``): ``<script>``/``<style>`` blocks and ``<!-- comments -->`` are removed;
   tags of block elements (``<br>``, ``<p>``, ``<div>``, ``<li>``, ``<td>`` ...) become a space,
   tags of other HTML elements are removed; then character references that end in ``;``
   (``&amp;`` ``&#233;`` ``&#x1F600;`` ``&nbsp;``) are decoded as HTML5 decodes them.
   Only HTML element names count as tags, so ``a < b`` and placeholders such as
   ``<EMAIL>`` or ``<NAME>`` stay. Names are matched in lower case; a few elements that
   old HTML wrote in capitals (``<BR>``, ``<P>``, ``<B>`` ...) match in any case, so an
   upper-case placeholder like ``<ADDRESS>`` or ``<TIME>`` stays text.
   Tags are stripped before references are decoded, so ``&lt;b&gt;`` becomes the text ``<b>``.
   References without the closing ``;`` (``&copy`` in ``?a=1&copy=2``) are left as they are,
   unlike a browser, because in plain-text exports they are far more often URL parameters.
   Python's ``html.unescape`` decodes each distinct reference found in a column once; polars
   puts the results in place (no Python call per row).
2. Zero-width characters (U+200B..U+200D, U+2060, U+FEFF) are removed, and so are control
   characters (general category Cc) that are not white space. Removing U+200D (ZERO WIDTH
   JOINER) splits joined emoji such as a family into its single emoji; accepted, since the
   text keeps every visible emoji.
3. Unicode normalisation ``unicode_form`` (NFKC by default, UAX #15), with Python's
   ``unicodedata`` (:func:`prep.text.normalize_unicode`); cells that are pure ASCII are skipped,
   since they cannot change.
4. White space is collapsed: every run of Unicode White_Space (tab, newline, U+00A0, U+3000 ...)
   becomes one space, and the cell is trimmed. Newlines are not kept: downstream steps and
   models read a ticket as one line of words.

Steps 2 to 4 run in this order because NFKC is not closed under deleting characters
(``e`` U+200B U+0301 is NFKC, ``e`` U+0301 is not), while turning white space into one
space never creates a new composition. Invariants: a null cell stays null; a cell that
becomes empty stays ``""`` (the ``missing`` step decides about emptiness); row order,
row count and all columns are kept; nothing is set aside.

Labels (if ``labels``): the same steps 2 to 4 (no HTML), then spellings that are equal after
lower-casing are one class. Lower-casing uses polars ``str.to_lowercase`` (Unicode lower-case
mapping), not full case folding: ``STRASSE`` and ``straße`` stay two classes. A class's
canonical spelling is its most frequent spelling; ties go to the lexicographically smallest
(code point order), so the choice is deterministic.

Facts reported: ``columns`` (the text columns processed), ``changed_cells`` ({column: cells
changed}, the label column included when ``labels``), ``label_merges`` (classes that had more
than one spelling, sorted by class, with the count of each spelling).
"""

from __future__ import annotations

import functools
import html
import re
from dataclasses import dataclass
from typing import Literal

import polars as pl

from prep.errors import DataError
from prep.steps.base import StepContext
from prep.text import by_slices, collapse_whitespace, normalize_unicode, rewrite_where

NAME = "normalise"

# Zero-width characters removed from text: ZERO WIDTH SPACE, ZERO WIDTH NON-JOINER,
# ZERO WIDTH JOINER (U+200B..U+200D), WORD JOINER (U+2060), ZERO WIDTH NO-BREAK SPACE / BOM (U+FEFF).
ZERO_WIDTH = "\u200b\u200c\u200d\u2060\ufeff"
_ZERO_WIDTH_CLASS = r"\x{200B}-\x{200D}\x{2060}\x{FEFF}"

# Control characters (Cc) that are not Unicode White_Space; white-space controls (\t \n \r
# \v \f U+0085) are collapsed to a space in step 4 instead. The Rust regex engine's \s is
# Unicode White_Space.
_INVISIBLE = rf"[{_ZERO_WIDTH_CLASS}]|[\p{{Cc}}--\s]"

# HTML element names (WHATWG HTML Living Standard, section "Elements", from memory), plus
# obsolete ones still common in e-mail bodies (center, font, big, strike, tt, nobr) and
# Outlook's ``o:p``. Block elements start a new line in a browser, so their tags become a space.
_BLOCK_ELEMENTS = (
    "address article aside blockquote body br caption center dd details dialog div dl dt "
    "fieldset figcaption figure footer form h1 h2 h3 h4 h5 h6 head header hgroup hr html li "
    "main menu nav ol option p pre search section summary table tbody td textarea tfoot th "
    "thead title tr ul"
).split()
_INLINE_ELEMENTS = (
    "a abbr area audio b base bdi bdo big button canvas cite code col colgroup data datalist "
    "del dfn em embed font i iframe img input ins kbd label legend link map mark meta meter "
    "nobr noscript object optgroup output param picture progress q rp rt ruby s samp select "
    "script slot small source span strike strong style sub sup template time track tt u var video wbr o:p"
).split()
# Elements that old HTML often wrote in capitals; these match in any case (common practice, no source).
_ANY_CASE_ELEMENTS = frozenset(
    "a b body br center div font h1 h2 h3 h4 h5 h6 head hr html i img li ol p pre span strong "
    "em table tbody td th tr u ul".split()
)


def _tag_pattern(names: list[str]) -> str:
    """A regex for start/end/self-closing tags of ``names``.

    Shape (as the brief asks): ``</?NAME(\\s[^<>]*)?/?>``; NAME is followed by white space,
    ``/`` or ``>``, so ``<bx>`` is not a ``<b>`` tag.
    """
    lower = sorted((n for n in names if n not in _ANY_CASE_ELEMENTS), key=lambda n: (-len(n), n))
    any_case = sorted((n for n in names if n in _ANY_CASE_ELEMENTS), key=lambda n: (-len(n), n))
    alternatives = []
    if any_case:
        alternatives.append("(?i:" + "|".join(map(re.escape, any_case)) + ")")
    if lower:
        alternatives.append("|".join(map(re.escape, lower)))
    return r"</?(?:" + "|".join(alternatives) + r")(?:\s[^<>]*)?/?>"


_BLOCK_TAG = _tag_pattern(_BLOCK_ELEMENTS)
_INLINE_TAG = _tag_pattern(_INLINE_ELEMENTS)
# Script and style bodies are code, not text; comments are not shown. (?s) lets . cross newlines.
# An unclosed <script> or <style> keeps its body; only the tag itself goes (as an inline tag).
_HIDDEN = r"(?is)<script(?:\s[^<>]*)?>.*?</script\s*>|<style(?:\s[^<>]*)?>.*?</style\s*>|<!--.*?-->"

# A character reference closed by ";": numeric (decimal or hex) or named (HTML5 names are ASCII alphanumeric).
_ENTITY = r"&(?:#[0-9]+|#[xX][0-9A-Fa-f]+|[A-Za-z][A-Za-z0-9]*);"


@dataclass(frozen=True)
class Config:
    """``normalise`` options. ``columns: null`` means the pipeline's text columns."""

    columns: list[str] | None = None
    html: bool = True
    labels: bool = True
    unicode_form: Literal["NFKC", "NFC"] = "NFKC"


def _decode_references(column: pl.Series) -> pl.Series:
    """Decode every ``;``-terminated character reference, one distinct reference at a time.

    Python's ``html.unescape`` implements the HTML5 rules for one reference (the named table,
    the Windows-1252 remapping of ``&#128;``..``&#159;``, U+FFFD for ``&#0;``, surrogates and
    values beyond U+10FFFF); it runs once per distinct reference found in the column, and
    polars puts the results in place. A reference holds no ``&`` or ``;`` inside, so two
    references never overlap and a single left-to-right pass equals decoding each in turn:
    ``&amp;lt;`` becomes ``&lt;``, not ``<``.
    """
    found = column.str.extract_all(_ENTITY).explode().drop_nulls().unique().sort()
    refs = [r for r in found.to_list() if html.unescape(r) != r]
    if not refs:
        return column
    return column.str.replace_many(refs, [html.unescape(r) for r in refs])


def _strip_html(column: pl.Series) -> pl.Series:
    """Remove hidden blocks and tags, then decode ``;``-terminated character references."""
    stripped = rewrite_where(
        column, "<",
        lambda rows: rows.str.replace_all(_HIDDEN, " ").str.replace_all(_BLOCK_TAG, " ").str.replace_all(_INLINE_TAG, ""),
    )
    return rewrite_where(stripped, "&", _decode_references)


# ASCII text is already in every normalisation form (UAX #15: ASCII characters have no
# decompositions and never compose), so only cells holding a non-ASCII character are normalised.
# Measured on the development machine: polars str.normalize("NFKC") takes about 4 s on 50 MB
# of plain ASCII text, while testing for a non-ASCII character takes about 0.1 s. The other
# rewrites are likewise applied only to the rows that need them (prep.text: a regex replace
# rebuilds every string).


def clean_chars(series: pl.Series, *, form: str = "NFKC") -> pl.Series:
    """Steps 2-4 of the module docstring (null in, null out); same length and name."""
    out = rewrite_where(series, _INVISIBLE, lambda rows: rows.str.replace_all(_INVISIBLE, ""))
    out = normalize_unicode(out, form)
    return collapse_whitespace(out)


def _clean_text(series: pl.Series, *, config: Config) -> pl.Series:
    """Steps 1-4 of the module docstring for one text column (or a slice of one)."""
    if config.html:
        series = _strip_html(series)
    return clean_chars(series, form=config.unicode_form)


def _check_columns(table: pl.DataFrame, columns: list[str], what: str) -> None:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        names = ", ".join(f"`{c}`" for c in missing)
        raise DataError(
            f"Step `{NAME}`: {what} {names} not in the table.",
            hint="Check the column names in the pipeline file against the canonical columns.",
        )


def _label_mapping(labels: pl.Series) -> tuple[dict[str, str], list[dict]]:
    """Spelling -> canonical spelling, and the merges to report (classes with >1 spelling)."""
    counts = labels.drop_nulls().value_counts(name="n").rename({labels.name: "spelling"})
    return label_mapping_from_counts(counts)


def label_mapping_from_counts(counts: pl.DataFrame) -> tuple[dict[str, str], list[dict]]:
    """:func:`_label_mapping` from spelling counts (columns ``spelling``, ``n``; a spelling may be
    listed more than once, e.g. once per partition of the Dask engine: its counts are added)."""
    counts = (
        counts.group_by("spelling").agg(pl.col("n").sum())
        .with_columns(pl.col("spelling").str.to_lowercase().alias("key"))
        # Most frequent first, then code point order: the first spelling of each key is canonical.
        .sort(["key", "n", "spelling"], descending=[False, True, False])
    )
    grouped = counts.group_by("key", maintain_order=True).agg(
        pl.col("spelling").first().alias("canonical"),
        pl.col("spelling"),
        pl.col("n"),
    )
    mapping: dict[str, str] = {}
    merges: list[dict] = []
    for _key, canonical, spellings, ns in grouped.iter_rows():  # one iteration per class, not per row
        for s in spellings:
            mapping[s] = canonical
        if len(spellings) > 1:
            merges.append({"class": canonical, "spellings": dict(sorted(zip(spellings, ns)))})
    merges.sort(key=lambda m: m["class"])
    return mapping, merges


def apply(table: pl.DataFrame, config: Config, ctx: StepContext) -> pl.DataFrame:
    """Normalise text columns (and label spellings); same rows, same order, same columns."""
    columns = list(ctx.text) if config.columns is None else list(config.columns)
    _check_columns(table, columns, "text column(s)" if config.columns is None else "column(s) listed in `columns`")
    if config.labels:
        _check_columns(table, [ctx.label], "the label column")

    new_columns: list[pl.Series] = []
    changed: dict[str, int] = {}
    for col in columns:
        new_columns.append(by_slices(table.get_column(col), functools.partial(_clean_text, config=config)))

    merges: list[dict] = []
    if config.labels:
        # When the label is also listed as a text column, start from its cleaned text.
        base = next((s for s in new_columns if s.name == ctx.label), table.get_column(ctx.label))
        cleaned = clean_chars(base, form=config.unicode_form).alias(ctx.label)
        mapping, merges = _label_mapping(cleaned)
        merged = cleaned.replace(list(mapping), list(mapping.values())) if mapping else cleaned
        new_columns = [s for s in new_columns if s.name != ctx.label] + [merged]

    for s in new_columns:
        before = table.get_column(s.name)
        changed[s.name] = int(before.ne_missing(s).sum())

    out = table.with_columns(new_columns)
    ctx.report("columns", columns)
    ctx.report("changed_cells", {c: changed[c] for c in sorted(changed)})
    if config.labels:
        ctx.report("label_merges", merges)
    return out
