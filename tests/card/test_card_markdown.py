"""Tests for ``prep.card.render_markdown``.

References used:
- Gebru et al., "Datasheets for Datasets" (2018, revised 2021): the question groups
  Motivation, Composition, Collection process, Preprocessing/cleaning/labelling, Uses,
  Distribution, Maintenance (group names from memory of the paper).
- GitHub Flavored Markdown spec 0.29, section 4.10 "Tables (extension)": a cell's ``|``
  must be escaped as ``\\|``; every row has the header's number of cells.
"""

from __future__ import annotations

import copy
import re

import pytest

from prep.card import build_card, render_markdown
from prep.card.markdown import HEADINGS, NOT_PROVIDED

# Datasheets for Datasets question groups (Gebru et al.), then prep's own risks section.
DATASHEET_GROUPS = [
    "Motivation",
    "Composition",
    "Collection process",
    "Preprocessing, cleaning and labelling",
    "Uses",
    "Distribution",
    "Maintenance",
]


def test_every_datasheet_section_heading_in_order(make_facts):
    md = render_markdown(build_card(make_facts()))
    headings = re.findall(r"^## (.+)$", md, flags=re.M)
    assert headings == DATASHEET_GROUPS + ["Risks and cautions"]
    assert list(HEADINGS) == headings
    assert md.startswith("# Data card: spokewheel-help\n")
    assert md.endswith("\n") and not md.endswith("\n\n")


def test_absent_about_fields_read_not_provided(make_facts):
    md = render_markdown(build_card(make_facts()))
    assert f"**Intended use:** {NOT_PROVIDED}" in md
    assert f"**Contact:** {NOT_PROVIDED}" in md
    assert "**License:** CC0-1.0" in md
    assert "**Purpose:** Test the card." in md


def test_tables_for_classes_and_set_aside(make_facts):
    md = render_markdown(build_card(make_facts()))
    assert "| Class | Train | Validation | Test | Total |" in md
    assert "| billing | 6 | 1 | 1 | 8 |" in md
    assert "| Step | Reason | Rows |" in md
    assert "| exact_duplicates | label_conflict | 1 |" in md
    assert "| read | unreadable | 1 |" in md


def test_markdown_is_rendered_from_the_card_only(make_facts):
    card = build_card(make_facts())
    changed = copy.deepcopy(card)
    changed["classes"]["counts"][1]["train"] = 4242
    changed["about"]["license"] = "Invented-Licence-9"
    md = render_markdown(changed)
    assert "| billing | 4242 |" in md and "Invented-Licence-9" in md
    assert render_markdown(card) == render_markdown(copy.deepcopy(card))


def test_split_files_listed_in_split_order(make_facts):
    md = render_markdown(build_card(make_facts()))
    positions = [md.index(f"`{name}.parquet`") for name in ("train", "validation", "test")]
    assert positions == sorted(positions)


def _table_rows(md: str, header_start: str) -> list[str]:
    lines = md.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith(header_start))
    rows = []
    for line in lines[start:]:
        if not line.startswith("|"):
            break
        rows.append(line)
    return rows


@pytest.mark.parametrize("name", ["a|b", "x<script>y", "line\nbreak", "back\\slash|"])
def test_class_names_cannot_break_a_table(make_facts, name):
    facts = make_facts()
    renamed = {
        split: frame.with_columns(frame.get_column("label").replace("app", name))
        for split, frame in facts.splits.items()
    }
    md = render_markdown(build_card(make_facts(splits=renamed)))
    assert "<script>" not in md
    rows = _table_rows(md, "| Class | Train |")
    # GFM tables: cells are split on unescaped pipes only; every row keeps the header's 5 cells.
    for row in rows:
        cells = re.split(r"(?<!\\)\|", row.replace("\\\\", ""))
        assert len(cells) == 7, row  # 5 cells plus the empty strings before and after the outer pipes


def test_leakage_and_accounting_problems_are_shown(make_facts):
    card = build_card(make_facts())
    card["leakage"].update(clean=False, total=2, texts=1)
    card["leakage"]["pairs"][0].update(rows_a=1, rows_b=1, texts=1)
    card["accounting"]["balanced"] = False
    md = render_markdown(card)
    assert "**2 rows** share their text with another split (train/validation: 1 texts (1 + 1 rows))." in md
    assert "Accounting does **not** balance" in md
