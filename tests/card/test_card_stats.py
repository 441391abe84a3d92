"""Tests for ``prep.card.stats`` against references outside the project.

References used:
- scikit-learn ``compute_class_weight("balanced")`` (general-purpose reference library).
- Pielou, E. C. (1966), "The measurement of diversity in different types of biological
  collections", J. Theoretical Biology 13: J = H / ln K (formula quoted from memory).
- Shannon, C. E. (1948), entropy H = -sum p ln p; scipy.stats.entropy as the reference
  implementation (natural log by default).
- The Unicode Standard, section 3.13 "Default Case Folding", through Python's ``str.casefold``
  (a general-purpose reference implementation).
- Unicode PropList.txt, property White_Space (list of code points written from memory).
- Exhaustive comparison: a brute-force pairwise check for the leakage counts.
"""

from __future__ import annotations

import itertools
import random

import numpy as np
import polars as pl
import pytest
from sklearn.utils.class_weight import compute_class_weight

from prep.card import stats

COUNT_CASES = [
    {"a": 10, "b": 10, "c": 10},
    {"a": 90, "b": 10},
    {"billing": 37, "unlock": 5, "app": 1, "other": 12},
    {"only": 4},
    {"x": 1, "y": 2, "z": 3, "w": 1000},
]


def _labels(counts: dict[str, int]) -> np.ndarray:
    return np.array([c for c, n in sorted(counts.items()) for _ in range(n)])


# --- class weights ---------------------------------------------------------------------------


@pytest.mark.parametrize("counts", COUNT_CASES)
def test_class_weights_match_scikit_learn_balanced(counts):
    # Reference: sklearn.utils.class_weight.compute_class_weight("balanced") = n / (K * n_c).
    y = _labels(counts)
    classes = np.unique(y)
    expected = dict(zip(classes.tolist(), compute_class_weight("balanced", classes=classes, y=y).tolist()))
    result = stats.class_weights(counts)
    assert list(result) == sorted(counts)
    assert result == pytest.approx(expected, rel=1e-12)


def test_class_weight_of_absent_class_is_none_and_others_match_scikit_learn():
    counts = {"a": 6, "b": 2, "gone": 0}
    y = _labels(counts)
    # scikit-learn refuses a class that has no samples; the card gives it no weight instead.
    with pytest.raises(ValueError):
        compute_class_weight("balanced", classes=np.array(["a", "b", "gone"]), y=y)
    present = np.array(["a", "b"])
    expected = dict(zip(present.tolist(), compute_class_weight("balanced", classes=present, y=y).tolist()))
    result = stats.class_weights(counts)
    assert result["gone"] is None
    assert {k: v for k, v in result.items() if v is not None} == pytest.approx(expected, rel=1e-12)


# --- entropy and evenness --------------------------------------------------------------------


@pytest.mark.parametrize("counts", COUNT_CASES + [{"a": 3, "b": 0, "c": 7}])
def test_shannon_entropy_matches_scipy(counts):
    scipy_stats = pytest.importorskip("scipy.stats")
    # Reference: scipy.stats.entropy(pk) normalises pk and uses the natural log by default.
    expected = float(scipy_stats.entropy([counts[c] for c in sorted(counts)]))
    assert stats.shannon_entropy(counts) == pytest.approx(expected, rel=1e-12, abs=1e-15)


def test_shannon_entropy_of_no_rows_is_none():
    assert stats.shannon_entropy({}) is None
    assert stats.shannon_entropy({"a": 0, "b": 0}) is None


@pytest.mark.parametrize("k", [2, 3, 7, 40])
def test_pielou_evenness_is_one_for_equal_counts(k):
    # Pielou 1966: J = H / ln K and H = ln K when all K classes are equally frequent, so J = 1.
    counts = {f"c{i}": 13 for i in range(k)}
    assert stats.pielou_evenness(counts) == pytest.approx(1.0, abs=1e-12)
    assert stats.pielou_evenness(counts) <= 1.0


def test_pielou_evenness_hand_example():
    # Hand example with Pielou's formula J = H / ln K for counts (3, 1):
    # H = -(0.75 ln 0.75 + 0.25 ln 0.25) = 0.5623351446188083 nats, ln 2 = 0.6931471805599453,
    # J = 0.8112781244591328, which is also the binary entropy of p = 0.25 in bits (Shannon 1948).
    assert stats.shannon_entropy({"a": 3, "b": 1}) == pytest.approx(0.5623351446188083, rel=1e-12)
    assert stats.pielou_evenness({"a": 3, "b": 1}) == pytest.approx(0.8112781244591328, rel=1e-12)
    # A third class with no rows does not change K (K counts classes present).
    assert stats.pielou_evenness({"a": 3, "b": 1, "c": 0}) == pytest.approx(0.8112781244591328, rel=1e-12)


def test_pielou_evenness_needs_two_classes():
    # ln 1 = 0: evenness is undefined for a single class (Pielou 1966 defines it for K >= 2).
    assert stats.pielou_evenness({"a": 5}) is None
    assert stats.pielou_evenness({"a": 5, "b": 0}) is None
    assert stats.pielou_evenness({}) is None


@pytest.mark.parametrize("counts", COUNT_CASES)
def test_evenness_lies_between_zero_and_one(counts):
    j = stats.pielou_evenness(counts)
    assert j is None or 0.0 <= j <= 1.0


# --- imbalance ratio and averaging -----------------------------------------------------------


def test_imbalance_ratio_is_largest_over_smallest():
    # Definition from the design: largest class count / smallest class count.
    assert stats.imbalance_ratio({"a": 90, "b": 10}) == 9.0
    assert stats.imbalance_ratio({"a": 7, "b": 7, "c": 7}) == 1.0
    assert stats.imbalance_ratio({"only": 4}) == 1.0


def test_imbalance_ratio_is_none_with_an_empty_class_or_no_classes():
    assert stats.imbalance_ratio({"a": 90, "b": 0}) is None
    assert stats.imbalance_ratio({}) is None


@pytest.mark.parametrize("counts", COUNT_CASES)
def test_measures_do_not_depend_on_class_names(counts):
    # Relabelling invariance: a bijective rename changes the names carried, nothing else.
    renamed = {f"renamed-{c[::-1]}": n for c, n in counts.items()}
    assert stats.imbalance_ratio(renamed) == stats.imbalance_ratio(counts)
    assert stats.shannon_entropy(renamed) == pytest.approx(stats.shannon_entropy(counts), rel=1e-12)
    j, j2 = stats.pielou_evenness(counts), stats.pielou_evenness(renamed)
    assert (j is None and j2 is None) or j2 == pytest.approx(j, rel=1e-12)
    w, w2 = stats.class_weights(counts), stats.class_weights(renamed)
    assert sorted(w.values()) == pytest.approx(sorted(w2.values()), rel=1e-12)


def test_largest_and_smallest_break_ties_by_name():
    assert stats.largest_and_smallest({"b": 5, "a": 5, "c": 1}) == ("a", "c")
    assert stats.largest_and_smallest({"b": 1, "a": 9, "c": 1}) == ("a", "b")
    assert stats.largest_and_smallest({}) == (None, None)


@pytest.mark.parametrize(
    ("ratio", "expected"),
    [(1.0, "micro"), (1.5, "micro"), (1.5000001, "macro"), (9.0, "macro"), (None, "macro")],
)
def test_recommended_averaging_threshold(ratio, expected):
    # Threshold 1.5 on the train imbalance ratio: rule of thumb, common practice, no source.
    average, reason = stats.recommend_averaging(ratio)
    assert average == expected
    assert reason.endswith(".")
    if ratio is not None:
        assert "common practice, no source" in reason


# --- class counts ----------------------------------------------------------------------------


def test_class_counts_include_absent_classes_and_skip_null_labels():
    frame = pl.DataFrame({"label": ["b", "a", "b", None, "b"]})
    assert stats.class_counts(frame, "label", ["a", "b", "c"]) == {"a": 1, "b": 3, "c": 0}
    assert stats.missing_labels(frame, "label") == 1
    assert stats.class_counts(pl.DataFrame(), "label", ["a"]) == {"a": 0}


# --- the leakage key -------------------------------------------------------------------------

# Unicode PropList.txt, White_Space (from memory): U+0009..U+000D, U+0020, U+0085, U+00A0, U+1680,
# U+2000..U+200A, U+2028, U+2029, U+202F, U+205F, U+3000.
WHITE_SPACE = (
    [chr(c) for c in range(0x09, 0x0E)]
    + ["\u0020", "\u0085", "\u00a0", "\u1680"]
    + [chr(c) for c in range(0x2000, 0x200B)]
    + ["\u2028", "\u2029", "\u202f", "\u205f", "\u3000"]
)


def _reference_key(values: list[str | None]) -> str:
    # Python: str.split() with no argument splits on runs of whitespace and drops the ends;
    # str.casefold() is Unicode full case folding (Unicode Standard 3.13).
    return "\x1f".join(" ".join((v or "").split()) for v in values).casefold()


FOLD_CASES = [
    "Straße", "STRASSE", "ΣΊΣΥΦΟΣ", "σίσυφος", "ﬁle", "FILE", "İstanbul", "ꭰᏸ Ꭰ",
    "ǰ", "ŉ", "µ", "Ω Ω", "Ǆ ǅ ǆ", "ᾀ ᾈ", "plain ascii", "", "Ⅻ", "𐐀𐐨", "🙂 Emoji",
]


@pytest.mark.parametrize("text", FOLD_CASES)
def test_text_key_equals_python_casefold(text):
    frame = pl.DataFrame({"title": [text], "body": ["Ende  GUT"]})
    result = frame.select(stats.text_key(["title", "body"])).item()
    assert result == _reference_key([text, "Ende  GUT"])


@pytest.mark.parametrize("space", WHITE_SPACE, ids=lambda s: f"U+{ord(s):04X}")
def test_text_key_collapses_every_white_space_character(space):
    frame = pl.DataFrame({"body": [f"{space}a{space}{space}b{space}"]})
    assert frame.select(stats.text_key(["body"])).item() == "a b"


def test_text_key_keeps_columns_apart_and_reads_null_as_empty():
    frame = pl.DataFrame({"title": ["a b", "a", None], "body": ["", "b", "a b"]})
    keys = frame.select(stats.text_key(["title", "body"])).to_series().to_list()
    assert keys == ["a b\x1f", "a\x1fb", "\x1fa b"]
    assert len(set(keys)) == 3


def test_fold_table_covers_all_code_points():
    # The table scans code points below _FOLD_SCAN_END only; check Python's table has no
    # case-changing character above it (so the scan loses nothing).
    # One string of every code point from there to U+10FFFF (no surrogates there), folded at once.
    text = np.arange(stats._FOLD_SCAN_END, 0x110000, dtype="<u4").tobytes().decode("utf-32-le")
    assert text.casefold() == text
    # And the scan itself: every already-lowercase character whose fold differs is in the table.
    below = np.arange(0, stats._FOLD_SCAN_END, dtype="<u4")
    below = below[(below < 0xD800) | (below > 0xDFFF)].tobytes().decode("utf-32-le")
    expected = [ch for ch in below if ch.lower() == ch and ch.casefold() != ch]
    assert stats._fold_table()[0] == expected
    assert len(expected) > 100  # sharp s, final sigma, ligatures, Cherokee...


# --- leakage ---------------------------------------------------------------------------------


def _frame(pairs):
    return pl.DataFrame({"title": [p[0] for p in pairs], "body": [p[1] for p in pairs]}, schema={"title": pl.String, "body": pl.String})


def test_leakage_hand_example():
    splits = {
        "train": _frame([("Hello", "World"), ("hello ", "  WORLD"), ("only", "train"), (None, None)]),
        "validation": _frame([("HELLO", "world"), ("val", "only"), ("", "")]),
        "test": _frame([("Only", "TRAIN"), ("test", "only")]),
    }
    result = stats.exact_text_leakage(splits, ["title", "body"])
    pairs = {tuple(p["splits"]): p for p in result["pairs"]}
    assert pairs["train", "validation"] == {"splits": ["train", "validation"], "rows_a": 2, "rows_b": 1, "texts": 1}
    assert pairs["train", "test"] == {"splits": ["train", "test"], "rows_a": 1, "rows_b": 1, "texts": 1}
    assert pairs["validation", "test"]["texts"] == 0
    # Empty texts (row 4 of train, row 3 of validation) are not compared.
    assert result["texts"] == 2
    assert result["total"] == 5


def test_leakage_of_clean_and_missing_splits_is_zero():
    splits = {"train": _frame([("a", "b")]), "test": _frame([("c", "d")])}
    result = stats.exact_text_leakage(splits, ["title", "body"])
    assert result["total"] == 0 and result["texts"] == 0
    assert [p["texts"] for p in result["pairs"]] == [0, 0, 0]


def test_leakage_matches_exhaustive_pairwise_comparison():
    # Reference: brute force over every pair of rows in different splits, keys from Python.
    rng = random.Random(20260101)
    words = ["Ticket", "ticket", "TICKET", "Straße", "strasse", "late", "Late ", " refund", "ＡＢ"]
    spaces = [" ", "  ", "\t", "\u00a0", "\n"]

    def text():
        n = rng.randint(0, 2)
        return rng.choice(spaces).join(rng.choice(words) for _ in range(n)) if n else rng.choice(["", None])

    splits = {name: _frame([(text(), text()) for _ in range(size)]) for name, size in (("train", 60), ("validation", 25), ("test", 25))}
    result = stats.exact_text_leakage(splits, ["title", "body"])

    keys = {
        name: [_reference_key([t, b]) for t, b in frame.iter_rows()] for name, frame in splits.items()
    }
    empty = "\x1f"
    for pair in result["pairs"]:
        a, b = pair["splits"]
        rows_a = sum(1 for ka in keys[a] if ka != empty and any(ka == kb for kb in keys[b]))
        rows_b = sum(1 for kb in keys[b] if kb != empty and any(kb == ka for ka in keys[a]))
        texts = len({ka for ka in keys[a] for kb in keys[b] if ka == kb and ka != empty})
        assert (pair["rows_a"], pair["rows_b"], pair["texts"]) == (rows_a, rows_b, texts)
    leaked_rows = 0
    for name, ks in keys.items():
        others = [k for other, oks in keys.items() if other != name for k in oks]
        leaked_rows += sum(1 for k in ks if k != empty and k in others)
    assert result["total"] == leaked_rows
    assert leaked_rows > 0  # the generator is meant to plant leaks; a zero would test nothing
    assert list(itertools.chain.from_iterable(p["splits"] for p in result["pairs"])) == [
        "train", "validation", "train", "test", "validation", "test"
    ]


def test_leakage_keys_on_slices_equal_keys_in_one_piece(monkeypatch):
    # Keys are a function of their row alone: computed on two slices on two threads they must be
    # those of the whole frame, in order (empty texts dropped in both).
    import prep.text

    from prep.card.stats import _keys, _keys_by_slices

    monkeypatch.setattr(prep.text, "usable_cores", lambda: 2)
    rows = 60_001  # above the size where slicing starts, odd so the slices differ in length
    titles = [["  Refund\tplease ", None, "ÉCHEC  du  paiement", ""][i % 4] for i in range(rows)]
    bodies = [[f"ride {i}", "", None, "Straße\u00a0zu"][i % 4] for i in range(rows)]
    frame = pl.DataFrame({"title": titles, "body": bodies}, schema={"title": pl.String, "body": pl.String})
    whole = _keys(frame, ["title", "body"])
    assert whole.height < rows  # some rows have no text at all
    assert _keys_by_slices(frame, ["title", "body"]).equals(whole)
