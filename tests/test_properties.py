"""Property-based tests (hypothesis) for the pure pieces: normalisation, the splitter, the accounting.

The references are the invariants themselves (stated in the docstrings of prep/steps/normalise.py and
prep/split.py) checked exhaustively on generated inputs, and the largest-remainder method as defined in
prep.split.allocate (Hamilton's method of apportionment).
"""

from __future__ import annotations

from collections import Counter
from pathlib import Path

import polars as pl
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from prep.ledger import Ledger, check_accounting
from prep.split import allocate, assign_splits
from prep.steps import step_module
from prep.steps.base import StepContext
from prep.steps.normalise import clean_chars

SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
SPLITS = ("train", "validation", "test")

# Text with the characters normalisation is about: ASCII, accents and combining marks, compatibility
# forms, white space of several kinds, zero-width and control characters, emoji and RTL letters.
SPECIAL = list("aZ09 \t\n\r\u00a0\u3000\u200b\u200c\u200d\u2060\ufeff\x00\x07\u0301\u00e9\ufb01\u2460\uff21\u0627\u05d0\U0001F600&<>;")
texts = st.text(alphabet=st.one_of(st.sampled_from(SPECIAL), st.characters(codec="utf-8")), max_size=40)


@SETTINGS
@given(st.lists(st.one_of(st.none(), texts), max_size=20), st.sampled_from(["NFKC", "NFC"]))
def test_clean_chars_is_idempotent(values, form):
    series = pl.Series("t", values, dtype=pl.String)
    once = clean_chars(series, form=form)
    assert clean_chars(once, form=form).to_list() == once.to_list()
    assert once.is_null().to_list() == series.is_null().to_list()


def _ctx(step: str, ledger: Ledger | None = None) -> StepContext:
    return StepContext(
        step=step, label="label", text=("title", "body"), ledger=ledger if ledger is not None else Ledger(),
        split_fractions={"train": 0.8, "validation": 0.1, "test": 0.1}, pipeline_dir=Path("."), seed=0,
    )


def _table(rows: list[tuple[str | None, str | None, str | None]]) -> pl.DataFrame:
    return pl.DataFrame(
        {
            "row_id": [f"t:{i}" for i in range(len(rows))],
            "source": ["t"] * len(rows),
            "source_row": pl.Series(range(len(rows)), dtype=pl.Int64),
            "title": [r[0] for r in rows],
            "body": [r[1] for r in rows],
            "label": [r[2] for r in rows],
        },
        schema={"row_id": pl.String, "source": pl.String, "source_row": pl.Int64, "title": pl.String, "body": pl.String, "label": pl.String},
    )


labels = st.sampled_from(["billing", "Billing", "BILLING ", "unlock", " unlock", "app", "n/a", "", None])
rows_strategy = st.lists(st.tuples(st.one_of(st.none(), texts), st.one_of(st.none(), texts), labels), max_size=25)


@SETTINGS
@given(rows_strategy)
def test_normalise_step_without_html_is_idempotent(rows):
    # With html on, a second pass may decode what the first produced (&amp;lt; -> &lt; -> <), by design.
    module = step_module("normalise")
    config = module.Config(html=False)
    once = module.apply(_table(rows), config, _ctx("normalise"))
    twice = module.apply(once, config, _ctx("normalise"))
    assert twice.equals(once)


# --- the splitter --------------------------------------------------------------------------------

fractions_strategy = st.sampled_from([(0.8, 0.1, 0.1), (0.7, 0.15, 0.15), (0.6, 0.2, 0.2), (0.5, 0.5, 0.0), (1.0, 0.0, 0.0), (0.34, 0.33, 0.33)])


def _split_table(classes: list[str], groups: list[str | None] | None) -> pl.DataFrame:
    data = {"row_id": [f"r:{i}" for i in range(len(classes))], "label": classes}
    if groups is not None:
        data["grp"] = groups
    return pl.DataFrame(data, schema={k: pl.String for k in data})


@SETTINGS
@given(st.lists(st.sampled_from(["a", "b", "c", "d", "e"]), max_size=120), fractions_strategy, st.integers(0, 2**31))
def test_split_without_groups_covers_and_allocates_exactly(classes, fractions, seed):
    table = _split_table(classes, None)
    result = assign_splits(table, fractions=dict(zip(SPLITS, fractions)), seed=seed, stratify="label", group=None)
    assignment = result.assignment.to_list()
    assert len(assignment) == len(classes) and set(assignment) <= set(SPLITS)  # covering, disjoint by construction
    per_class: dict[str, Counter] = {}
    for label, split in zip(classes, assignment):
        per_class.setdefault(label, Counter())[split] += 1
    for label, counts in per_class.items():
        n = sum(counts.values())
        got = [counts[s] for s in SPLITS]
        # Each class gets floor(n*f) per split plus at most one leftover row (largest remainder).
        floors = [int(n * f + 1e-9) for f in fractions]
        assert all(0 <= g - fl <= 1 for g, fl in zip(got, floors)), (label, got, floors)
        assert sum(got) == n
        if len(per_class) == 1:
            assert got == allocate(n, fractions)
        for s, f in zip(SPLITS, fractions):
            if f == 0:
                assert counts[s] == 0


@SETTINGS
@given(
    st.lists(st.tuples(st.sampled_from(["a", "b", "c"]), st.one_of(st.none(), st.sampled_from([f"g{i}" for i in range(15)]))), max_size=120),
    fractions_strategy,
    st.integers(0, 2**31),
)
def test_split_never_cuts_a_group(rows, fractions, seed):
    table = _split_table([r[0] for r in rows], [r[1] for r in rows])
    result = assign_splits(table, fractions=dict(zip(SPLITS, fractions)), seed=seed, stratify="label", group="grp")
    assignment = result.assignment.to_list()
    assert len(assignment) == len(rows) and set(assignment) <= set(SPLITS)
    where: dict[str, set] = {}
    for (_, group), split in zip(rows, assignment):
        if group is not None:
            where.setdefault(group, set()).add(split)
    assert all(len(splits) == 1 for splits in where.values())


@SETTINGS
@given(st.lists(st.sampled_from(["a", "b", "c"]), min_size=1, max_size=60), st.integers(0, 2**31), st.randoms(use_true_random=False))
def test_split_does_not_depend_on_input_order(classes, seed, rnd):
    table = _split_table(classes, None)
    fractions = dict(zip(SPLITS, (0.6, 0.2, 0.2)))
    first = dict(zip(table["row_id"], assign_splits(table, fractions=fractions, seed=seed, stratify="label", group=None).assignment))
    order = list(range(table.height))
    rnd.shuffle(order)
    shuffled = table[order]
    second = dict(zip(shuffled["row_id"], assign_splits(shuffled, fractions=fractions, seed=seed, stratify="label", group=None).assignment))
    assert first == second


# --- accounting over random step combinations --------------------------------------------------

STEP_CONFIGS = {
    "normalise": {},
    "missing": {},
    "exact_duplicates": {},
    "rare_classes": {"min_rows": 2},
}


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rows_strategy, st.lists(st.sampled_from(sorted(STEP_CONFIGS)), max_size=5))
def test_accounting_holds_for_random_step_combinations(rows, steps):
    table = _table(rows)
    ledger = Ledger()
    for name in steps:
        module = step_module(name)
        before = table.height + len(ledger)
        table = module.apply(table, module.Config(**STEP_CONFIGS[name]), _ctx(name, ledger))
        assert table.height + len(ledger) == before  # every row removed is in the ledger
    if table.height:
        table = table.with_columns(pl.col("label").fill_null("(none)"))
        result = assign_splits(table, fractions=dict(zip(SPLITS, (0.8, 0.1, 0.1))), seed=1, stratify="label", group=None)
        splits = [table.filter(result.assignment == s) for s in SPLITS]
    else:
        splits = [table.clear() for _ in SPLITS]
    check_accounting(len(rows), splits, ledger.frame())  # raises when a row is lost or counted twice
    ids = pl.concat([*(s.select("row_id") for s in splits), ledger.frame().select("row_id")])["row_id"]
    assert sorted(ids.to_list()) == sorted(f"t:{i}" for i in range(len(rows)))
