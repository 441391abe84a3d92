"""Pure statistics for the data card: class balance measures and the exact-text leakage check.

Every function here is deterministic and free of I/O. Functions over class counts take a
mapping ``class name -> count`` and never look at row values; the leakage check reads the
text columns but returns counts only, never a text.

Invariants (each has a test in ``tests/card/test_stats.py``):

- :func:`class_weights` equals scikit-learn's ``compute_class_weight("balanced")`` for the
  classes present.
- :func:`pielou_evenness` is 1.0 for equal counts and lies in [0, 1] otherwise.
- :func:`text_key` equals Python's ``str.casefold`` of the whitespace-collapsed texts, joined.
- Relabelling the classes (a bijective rename) changes no measure except the names it carries.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping, Sequence

import polars as pl

#: Train imbalance ratio above which macro averaging is recommended.
#: Rule of thumb, common practice, no source.
MACRO_AVERAGING_THRESHOLD = 1.5

#: Separator between text columns in the leakage key. U+001F (INFORMATION SEPARATOR ONE) is a
#: control character, not Unicode White_Space, so whitespace collapsing leaves it alone and the
#: columns cannot run into one another ("a b" + "" never equals "a" + "b").
_COLUMN_SEPARATOR = "\x1f"

#: Highest code point scanned for case-folding exceptions. All cased scripts of Unicode 15 lie
#: below U+20000 (the highest, Adlam, ends at U+1E943); checked against Python's own table by
#: ``test_fold_table_covers_all_code_points``.
_FOLD_SCAN_END = 0x20000

SPLIT_PAIRS: tuple[tuple[str, str], ...] = (("train", "validation"), ("train", "test"), ("validation", "test"))


# --- class balance ---------------------------------------------------------------------------


def imbalance_ratio(counts: Mapping[str, int]) -> float | None:
    """Largest class count divided by the smallest, over every class in ``counts``.

    None when ``counts`` is empty or a class has 0 rows (the ratio would be infinite).
    A single class gives 1.0.
    """
    values = list(counts.values())
    if not values or min(values) <= 0:
        return None
    return max(values) / min(values)


def shannon_entropy(counts: Mapping[str, int]) -> float | None:
    """Shannon entropy H = -sum p_i ln p_i in nats over the classes with rows (Shannon 1948).

    Zero counts contribute nothing (0 ln 0 = 0 by continuity). None when there are no rows.
    Summed with ``math.fsum`` over counts sorted by class name, so the result does not depend
    on the order of ``counts``.
    """
    present = [counts[c] for c in sorted(counts) if counts[c] > 0]
    total = sum(present)
    if total == 0:
        return None
    return -math.fsum((n / total) * math.log(n / total) for n in present)


def pielou_evenness(counts: Mapping[str, int]) -> float | None:
    """Pielou's evenness J = H / ln K (Pielou 1966), K = number of classes with at least one row.

    1.0 when all present classes are equally frequent; None when K < 2 (ln 1 = 0).
    """
    k = sum(1 for n in counts.values() if n > 0)
    if k < 2:
        return None
    h = shannon_entropy(counts)
    assert h is not None  # k >= 2 means there are rows
    # Clamp rounding noise: for equal counts fsum can land a hair above 1.
    return min(1.0, max(0.0, h / math.log(k)))


def class_weights(counts: Mapping[str, int]) -> dict[str, float | None]:
    """Balanced class weights n / (K * n_c), with K the number of classes present (count > 0).

    This is scikit-learn's "balanced" heuristic (its documentation credits King and Zeng 2001,
    "Logistic Regression in Rare Events Data"; citation from memory).
    A class with no rows gets None: it has no weight to give (scikit-learn refuses such a class).
    Keys come back sorted by class name.
    """
    present = {c: n for c, n in counts.items() if n > 0}
    k = len(present)
    total = sum(present.values())
    return {c: (total / (k * present[c]) if c in present else None) for c in sorted(counts)}


def largest_and_smallest(counts: Mapping[str, int]) -> tuple[str | None, str | None]:
    """The class with the most rows and the class with the fewest; ties go to the first name in sort order."""
    if not counts:
        return None, None
    names = sorted(counts)
    largest = min(names, key=lambda c: (-counts[c], c))
    smallest = min(names, key=lambda c: (counts[c], c))
    return largest, smallest


def recommend_averaging(train_ratio: float | None) -> tuple[str, str]:
    """("macro" | "micro", reason) from the train imbalance ratio.

    Macro averaging gives every class the same say, so a model that ignores a small class is
    seen to do so; micro averaging equals accuracy for single-label tasks and suits balanced
    classes. The threshold :data:`MACRO_AVERAGING_THRESHOLD` is a rule of thumb (common
    practice, no source). A ratio of None (a class absent from train, or no train rows) counts
    as imbalanced.
    """
    if train_ratio is None:
        return "macro", (
            "At least one class has no rows in train, so the train imbalance ratio is undefined; "
            "macro averaging keeps every class visible in the metric."
        )
    if train_ratio > MACRO_AVERAGING_THRESHOLD:
        return "macro", (
            f"The train imbalance ratio is {train_ratio:.3f}, above {MACRO_AVERAGING_THRESHOLD} "
            "(rule of thumb, common practice, no source); macro averaging keeps small classes visible."
        )
    return "micro", (
        f"The train imbalance ratio is {train_ratio:.3f}, at most {MACRO_AVERAGING_THRESHOLD} "
        "(rule of thumb, common practice, no source); with balanced classes micro averaging "
        "(equal to accuracy for single-label tasks) is adequate."
    )


def class_counts(frame: pl.DataFrame, label: str, classes: Sequence[str]) -> dict[str, int]:
    """Rows per class in ``frame`` for every name in ``classes`` (0 where absent), sorted by name.

    Rows whose label is null are not counted; see :func:`missing_labels`.
    """
    counts = {c: 0 for c in classes}
    if frame.height and label in frame.columns:
        grouped = frame.filter(pl.col(label).is_not_null()).group_by(label).len()
        for name, n in grouped.iter_rows():
            counts[name] = int(n)
    return dict(sorted(counts.items()))


def missing_labels(frame: pl.DataFrame, label: str) -> int:
    """Rows of ``frame`` with a null label (a whole missing column counts every row)."""
    if label not in frame.columns:
        return frame.height
    return int(frame.get_column(label).null_count())


# --- exact-text leakage ----------------------------------------------------------------------


@functools.cache
def _fold_table() -> tuple[list[str], list[str]]:
    """Characters that are already lowercase but change under full case folding, and their folds.

    Full case folding (Unicode Standard, section 3.13, "Default Case Folding"; CaseFolding.txt
    statuses C and F) differs from lowercasing for e.g. U+00DF sharp s -> "ss", U+03C2 final
    sigma -> sigma, U+FB01 ligature fi -> "fi" and Cherokee small letters -> capitals. Python's
    ``str.casefold`` implements it; polars has only lowercasing, so :func:`text_key` lowercases
    with polars and then applies this table. Because casefold(lower(x)) == casefold(x), mapping
    each remaining character to its fold gives the full folding of the text.
    """
    sources: list[str] = []
    targets: list[str] = []
    for cp in range(_FOLD_SCAN_END):
        ch = chr(cp)
        folded = ch.casefold()
        if folded != ch and ch.lower() == ch:
            sources.append(ch)
            targets.append(folded)
    return sources, targets


def text_key(columns: Sequence[str]) -> pl.Expr:
    """The leakage key: each text column whitespace-collapsed, joined by U+001F, then case-folded.

    Whitespace means Unicode White_Space (the regex class ``\\s``); runs become one space and
    the ends are trimmed. A null column counts as "". The key of a row whose text columns are
    all empty is "".
    """
    parts = [
        pl.col(c).fill_null("").str.replace_all(r"\s+", " ").str.strip_chars(" ") for c in columns
    ]
    joined = pl.concat_str(parts, separator=_COLUMN_SEPARATOR) if parts else pl.lit("")
    sources, targets = _fold_table()
    return joined.str.to_lowercase().str.replace_many(sources, targets)


def _keys(frame: pl.DataFrame, columns: Sequence[str]) -> pl.DataFrame:
    """One column ``key``: the non-empty leakage keys of ``frame`` (empty texts are not compared)."""
    if frame.height == 0:
        return pl.DataFrame(schema={"key": pl.String})
    present = [c for c in columns if c in frame.columns]
    if not present:
        return pl.DataFrame(schema={"key": pl.String})
    empty = _COLUMN_SEPARATOR * (len(present) - 1)
    keys = frame.select(text_key(present).alias("key"))
    return keys.filter(pl.col("key") != empty)


def exact_text_leakage(splits: Mapping[str, pl.DataFrame], text: Sequence[str]) -> dict:
    """Rows whose case-folded, whitespace-collapsed text occurs in more than one split.

    Returns counts only::

        {"total": <rows in any split whose key occurs in another split>,
         "texts": <distinct keys found in more than one split>,
         "pairs": [{"splits": [a, b], "rows_a": n, "rows_b": m, "texts": k}, ...]}

    ``pairs`` follows :data:`SPLIT_PAIRS`; a split missing from ``splits`` counts as empty.
    Rows whose text columns are all empty are not compared.
    """
    keys = {name: _keys(splits.get(name, pl.DataFrame()), text) for name in ("train", "validation", "test")}
    distinct = {name: k.unique() for name, k in keys.items()}
    pairs = []
    for a, b in SPLIT_PAIRS:
        shared = distinct[a].join(distinct[b], on="key", how="semi")
        pairs.append(
            {
                "splits": [a, b],
                "rows_a": keys[a].join(shared, on="key", how="semi").height,
                "rows_b": keys[b].join(shared, on="key", how="semi").height,
                "texts": shared.height,
            }
        )
    # A key is leaked when it occurs in at least two splits.
    occurrences = pl.concat(list(distinct.values())).group_by("key").len()
    leaked = occurrences.filter(pl.col("len") > 1).select("key")
    rows = sum(k.join(leaked, on="key", how="semi").height for k in keys.values())
    return {"total": rows, "texts": leaked.height, "pairs": pairs}
