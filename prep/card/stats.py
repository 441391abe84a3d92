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

from prep.text import collapse_whitespace, rewrite_where

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


@functools.lru_cache(maxsize=1)
def _fold_class() -> str:
    """A regex character class of the characters :func:`_fold_table` changes."""
    sources, _ = _fold_table()
    return "[" + "".join(f"\\x{{{ord(c):X}}}" for c in sources) + "]"


def _collapsed_lower(columns: Sequence[str]) -> pl.Expr:
    parts = [
        pl.col(c).fill_null("").str.replace_all(r"\s+", " ").str.strip_chars(" ") for c in columns
    ]
    joined = pl.concat_str(parts, separator=_COLUMN_SEPARATOR) if parts else pl.lit("")
    return joined.str.to_lowercase()


def text_key(columns: Sequence[str]) -> pl.Expr:
    """The leakage key: each text column whitespace-collapsed, joined by U+001F, then case-folded.

    Whitespace means Unicode White_Space (the regex class ``\\s``); runs become one space and
    the ends are trimmed. A null column counts as "". The key of a row whose text columns are
    all empty is "".
    """
    sources, targets = _fold_table()
    return _collapsed_lower(columns).str.replace_many(sources, targets)


def _keys(frame: pl.DataFrame, columns: Sequence[str]) -> pl.DataFrame:
    """One column ``key``: the non-empty leakage keys of ``frame`` (empty texts are not compared).

    Equal to :func:`text_key`; the folding table is applied only to the rows that hold one of its
    characters, and white space is collapsed only where needed
    (:mod:`prep.text`; measured: the key computation of 180k rows went from about 5 s to under one).
    """
    if frame.height == 0:
        return pl.DataFrame(schema={"key": pl.String})
    present = [c for c in columns if c in frame.columns]
    if not present:
        return pl.DataFrame(schema={"key": pl.String})
    empty = _COLUMN_SEPARATOR * (len(present) - 1)
    collapsed = pl.DataFrame([collapse_whitespace(frame.get_column(c).fill_null("")) for c in present])
    key = collapsed.select(pl.concat_str(present, separator=_COLUMN_SEPARATOR).str.to_lowercase().alias("key")).to_series()
    sources, targets = _fold_table()
    key = rewrite_where(key, _fold_class(), lambda rows: rows.str.replace_many(sources, targets))
    return key.to_frame().filter(pl.col("key") != empty)


def _keys_by_slices(frame: pl.DataFrame, columns: Sequence[str]) -> pl.DataFrame:
    """:func:`_keys` on row slices on both cores (each key depends on its row only; measured at 1M
    demo rows: 1.82 s in one piece, 1.04 s in two)."""
    from prep.text import by_slices

    return by_slices(frame, lambda part: _keys(part, columns))


def exact_text_leakage(splits: Mapping[str, pl.DataFrame], text: Sequence[str]) -> dict:
    """Rows whose case-folded, whitespace-collapsed text occurs in more than one split.

    Returns counts only::

        {"total": <rows in any split whose key occurs in another split>,
         "texts": <distinct keys found in more than one split>,
         "pairs": [{"splits": [a, b], "rows_a": n, "rows_b": m, "texts": k}, ...]}

    ``pairs`` follows :data:`SPLIT_PAIRS`; a split missing from ``splits`` counts as empty.
    Rows whose text columns are all empty are not compared.
    """
    names = ("train", "validation", "test")
    keys = [_keys_by_slices(splits.get(name, pl.DataFrame()), text).with_columns(pl.lit(name).alias("split")) for name in names]
    everything = pl.concat(keys)
    # Keys found in one split only are most of the data: find the candidates through a 64-bit hash
    # of the key (polars' own, used here only within this call, never stored), then count the
    # candidates' exact keys. A hash collision can only add candidates, never lose a key.
    hashed = everything.select(pl.col("key").hash().alias("h"), "split")
    spread = hashed.group_by("h").agg(pl.col("split").n_unique().alias("n")).filter(pl.col("n") > 1)
    candidates = everything.filter(hashed.get_column("h").is_in(spread.get_column("h").implode()))
    # Rows per split for every candidate key (one grouping, not a join per pair of splits).
    per_key = candidates.group_by("key").agg((pl.col("split") == name).sum().alias(name) for name in names)
    pairs = []
    for a, b in SPLIT_PAIRS:
        shared = per_key.filter((pl.col(a) > 0) & (pl.col(b) > 0))
        pairs.append(
            {
                "splits": [a, b],
                "rows_a": int(shared.get_column(a).sum()),
                "rows_b": int(shared.get_column(b).sum()),
                "texts": shared.height,
            }
        )
    # A key is leaked when it occurs in at least two splits.
    leaked = per_key.filter(pl.sum_horizontal([(pl.col(n) > 0).cast(pl.Int32) for n in names]) > 1)
    rows = int(leaked.select(pl.sum_horizontal(names).sum()).item()) if leaked.height else 0
    return {"total": rows, "texts": leaked.height, "pairs": pairs}


# --- imbalance degree (Ortigosa-Hernandez, Inza and Lozano 2017) -----------------------------

#: Distance used for the imbalance degree in the card. Hellinger is one of the distances the
#: paper studies (from memory: it compares Euclidean, Chebyshev, Manhattan, Kullback-Leibler,
#: Hellinger, total variation and chi-square); it is bounded and defined for zero probabilities.
IMBALANCE_DEGREE_DISTANCE = "hellinger"


def _distance(p: Sequence[float], q: Sequence[float], name: str) -> float:
    """A distance between two probability vectors of the same length, by name."""
    if name == "euclidean":
        return math.sqrt(math.fsum((a - b) ** 2 for a, b in zip(p, q)))
    if name == "hellinger":
        # H(p, q) = (1/sqrt 2) * || sqrt p - sqrt q ||_2, in [0, 1].
        return math.sqrt(math.fsum((math.sqrt(a) - math.sqrt(b)) ** 2 for a, b in zip(p, q))) / math.sqrt(2)
    if name == "total_variation":
        return 0.5 * math.fsum(abs(a - b) for a, b in zip(p, q))
    if name == "manhattan":
        return math.fsum(abs(a - b) for a, b in zip(p, q))
    if name == "chebyshev":
        return max((abs(a - b) for a, b in zip(p, q)), default=0.0)
    raise ValueError(f"unknown distance `{name}`")


def imbalance_degree(counts: Mapping[str, int], distance: str = IMBALANCE_DEGREE_DISTANCE) -> float | None:
    """Imbalance degree ID(zeta) of Ortigosa-Hernandez, Inza and Lozano, "Measuring the
    class-imbalance extent of multi-class problems", Pattern Recognition Letters 98 (2017) 32-38.

    With K classes (every class in ``counts``, also those with 0 rows), the class distribution
    zeta, the balanced distribution e = (1/K, ..., 1/K) and m the number of minority classes
    (zeta_i < 1/K)::

        ID(zeta) = (m - 1) + d(zeta, e) / d(iota_m, e)          (0 when m = 0: balanced)

    where iota_m is the distribution with m minority classes farthest from e: m classes at 0,
    K - m - 1 classes at 1/K and one class at 1 - (K - m - 1)/K. ID lies in [0, K - 1]; its
    integer part counts the minority classes beyond the first. None with fewer than two classes
    or no rows. Formula from memory of the paper; the tests check it on hand-computed examples.
    """
    k = len(counts)
    total = sum(counts.values())
    if k < 2 or total == 0:
        return None
    zeta = [counts[c] / total for c in sorted(counts)]
    # Compare counts, not floats: zeta_i < 1/K  <=>  K * n_i < n.
    m = sum(1 for c in counts if k * counts[c] < total)
    if m == 0:
        return 0.0
    e = [1.0 / k] * k
    iota = [0.0] * m + [1.0 / k] * (k - m - 1) + [1.0 - (k - m - 1) / k]
    return (m - 1) + _distance(zeta, e, distance) / _distance(iota, e, distance)


# --- how noisy a per-class recall is: the Wilson score interval ------------------------------

#: z for a two-sided 95% interval: the 0.975 quantile of the standard normal distribution.
Z_95 = 1.959963984540054


def wilson_interval(successes: int, n: int, z: float = Z_95) -> tuple[float, float] | None:
    """Wilson score interval for a binomial proportion (Wilson, "Probable inference, the law of
    succession, and statistical inference", JASA 22 (1927) 209-212; in the form of Brown, Cai and
    DasGupta, "Interval estimation for a binomial proportion", Statistical Science 16 (2001)
    101-133, eq. 4)::

        centre = (k + z^2/2) / (n + z^2)
        half   = z * sqrt(n) / (n + z^2) * sqrt(p (1 - p) + z^2 / (4 n)),   p = k / n

    None when n = 0.
    """
    if n <= 0:
        return None
    p = successes / n
    denom = n + z * z
    centre = (successes + z * z / 2) / denom
    half = z * math.sqrt(n) / denom * math.sqrt(p * (1 - p) + z * z / (4 * n))
    return max(0.0, centre - half), min(1.0, centre + half)


def wilson_width(p: float, n: int, z: float = Z_95) -> float | None:
    """Width of the Wilson interval for an observed proportion ``p`` on ``n`` trials (k = p n,
    which need not be an integer here: this is the width the formula gives at that proportion).

    The width is largest at p = 0.5, so ``wilson_width(0.5, n)`` is the worst case for a
    per-class recall measured on a class with support n. None when n = 0.
    """
    if n <= 0:
        return None
    return 2 * z * math.sqrt(n) / (n + z * z) * math.sqrt(p * (1 - p) + z * z / (4 * n))


# --- text length, missing values, language mix -----------------------------------------------

#: Quantiles (in percent) of text length per class kept in the card (the box chart draws them).
LENGTH_QUANTILES = {"p10": 10, "p25": 25, "median": 50, "p75": 75, "p90": 90}


def text_length_by_class(frames: Sequence[pl.DataFrame], label: str, text: Sequence[str]) -> list[dict]:
    """Per class: rows, min, p10, p25, median, p75, p90, max and mean of the text length.

    Length = Unicode code points of all text columns together (a null column counts 0).
    Quantiles use the nearest-rank method: the p-th percentile of n sorted values is the
    ceil(p n / 100)-th smallest (computed in integers, so no float rounding decides a rank);
    every value is a length that occurs. Classes sorted by name; rows without a label are skipped.
    """
    parts = [f for f in frames if f.height and label in f.columns]
    if not parts:
        return []
    present = [c for c in text if c in parts[0].columns]
    length = pl.sum_horizontal([pl.col(c).fill_null("").str.len_chars() for c in present]) if present else pl.lit(0)
    data = pl.concat([f.select(pl.col(label).alias("c"), length.cast(pl.Int64).alias("n")) for f in parts])
    data = data.filter(pl.col("c").is_not_null())
    aggs = [
        pl.len().alias("rows"),
        pl.col("n").min().alias("min"),
        *[
            pl.col("n").sort().gather(((pl.len().cast(pl.Int64) * p + 99) // 100 - 1).clip(0)).first().alias(k)
            for k, p in LENGTH_QUANTILES.items()
        ],
        pl.col("n").max().alias("max"),
        pl.col("n").mean().alias("mean"),
    ]
    out = data.group_by("c").agg(aggs).sort("c")
    rows = []
    for r in out.iter_rows(named=True):
        item = {"class": r["c"], "rows": int(r["rows"])}
        for key in ("min", *LENGTH_QUANTILES, "max"):
            item[key] = int(r[key])
        item["mean"] = round(float(r["mean"]), 1)
        rows.append(item)
    return rows


def missing_by_source(table: pl.DataFrame, columns: Sequence[str], tokens: Sequence[str], blank: str) -> list[dict]:
    """Missing cells per source and column in the table as read (before any step).

    A cell is missing when it is null, holds only characters of ``blank`` (white space and
    zero-width characters), or equals a token of ``tokens`` case-insensitively after trimming.
    Returns ``[{"source", "column", "rows", "missing"}]`` in source order (first appearance),
    then the order of ``columns``.
    """
    if table.height == 0 or "source" not in table.columns:
        return []
    lowered = [t.lower() for t in tokens]
    # Lower-casing never shortens a string, so a cell longer than every token cannot equal one:
    # only a prefix one character longer than the longest token is lower-cased (much cheaper on
    # long texts, same answer).
    longest = max((len(t) for t in [*tokens, *lowered]), default=0)
    exprs = []
    for c in columns:
        trimmed = pl.col(c).cast(pl.String).str.strip_chars(blank)
        missing = pl.col(c).is_null() | (trimmed == "") | trimmed.str.slice(0, longest + 1).str.to_lowercase().is_in(lowered)
        exprs.append(missing.sum().alias(c))
    grouped = table.group_by("source", maintain_order=True).agg(pl.len().alias("_rows"), *exprs)
    out = []
    for r in grouped.iter_rows(named=True):
        for c in columns:
            out.append({"source": r["source"], "column": c, "rows": int(r["_rows"]), "missing": int(r[c])})
    return out


def value_mix(frame: pl.DataFrame, column: str, by: str | None = None) -> dict:
    """Counts of each value of ``column`` (null counted as "und"), overall or per value of ``by``.

    ``{value: n}`` sorted by value, or ``{group: {value: n}}`` sorted by group then value.
    """
    if frame.height == 0 or column not in frame.columns:
        return {}
    col = pl.col(column).cast(pl.String).fill_null("und").alias("_v")
    if by is None:
        counts = frame.select(col).group_by("_v").len().sort("_v")
        return {v: int(n) for v, n in counts.iter_rows()}
    data = frame.select(pl.col(by).alias("_g"), col).filter(pl.col("_g").is_not_null())
    counts = data.group_by("_g", "_v").len().sort("_g", "_v")
    out: dict[str, dict[str, int]] = {}
    for g, v, n in counts.iter_rows():
        out.setdefault(g, {})[v] = int(n)
    return out
