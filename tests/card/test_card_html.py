"""card.html: self-contained, accessible, rendered from the card only.

References used:
- WHATWG HTML Living Standard: an ``<svg>`` inside HTML is parsed into the SVG namespace
  without an xmlns attribute; ``role="img"`` with ``aria-label`` gives an image its text
  alternative (WAI-ARIA 1.2, "img" role). Python's html.parser (standard library) as the parser.
"""

from __future__ import annotations

import copy
import re
from html.parser import HTMLParser

import pytest

from card_facts import SECRET_MARKERS
from prep.card import build_card, render_html
from prep.card.document import HEADINGS


class _Collector(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.stack: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def parse(page: str) -> _Collector:
    c = _Collector()
    c.feed(page)
    return c


def assert_self_contained(page: str) -> None:
    assert not re.search(r"https?:", page, flags=re.I), "the page names a URL"
    assert not re.search(r"data:[\w.+-]+/[\w.+-]+", page), "the page embeds a data: URL"
    assert "<img" not in page and "<script" not in page and "<link" not in page
    assert "@import" not in page
    assert all(ref.startswith("#") for ref in re.findall(r"url\(\s*['\"]?([^)'\"]*)", page))  # in-page ids only
    for tag, attrs in parse(page).tags:
        for name in ("src", "href", "xlink:href"):
            if name in attrs:
                assert attrs[name].startswith("#"), (tag, name, attrs[name])  # in-page anchors only


def assert_charts_accessible(page: str) -> int:
    tags = parse(page).tags
    svgs = [a for t, a in tags if t == "svg"]
    for attrs in svgs:
        assert attrs.get("role") == "img"
        assert len(attrs.get("aria-label", "")) > 40  # a real sentence, not a placeholder
    assert page.count("<figure") == len(svgs) == page.count("<figcaption")
    assert page.count("<title>") == len(svgs) + 1  # one per chart, plus the page title
    return len(svgs)


def test_demo_card_html_is_self_contained_and_accessible(demo_output):
    page = (demo_output / "card.html").read_text(encoding="utf-8")
    assert_self_contained(page)
    # The demo has class counts, text length, missing values, rows removed and cluster sizes.
    assert assert_charts_accessible(page) >= 5
    for chart in ("class-counts", "text-length", "missing-values", "rows-removed", "cluster-sizes"):
        assert f'id="chart-{chart}"' in page
    assert page.startswith("<!DOCTYPE html>") and '<html lang="en">' in page
    headings = re.findall(r'<h2 id="[^"]+">([^<]+)</h2>', page)
    assert headings == list(HEADINGS)
    tags = parse(page).tags
    assert sum(1 for t, _ in tags if t == "table") == sum(1 for t, _ in tags if t == "caption") > 10
    assert any(t == "th" and a.get("scope") == "col" for t, a in tags)


def test_html_is_rendered_from_the_card_only_and_deterministic(make_facts):
    card = build_card(make_facts())
    page = render_html(card)
    assert page == render_html(copy.deepcopy(card))
    changed = copy.deepcopy(card)
    changed["about"]["license"] = "Invented-Licence-9"
    assert "Invented-Licence-9" in render_html(changed)
    for marker in SECRET_MARKERS:
        assert marker not in page
    assert_self_contained(page)
    assert_charts_accessible(page)


def test_absent_fields_read_not_provided(make_facts):
    page = render_html(build_card(make_facts()))
    assert '<dt>Intended use</dt><dd><span class="absent">not provided</span></dd>' in page


HOSTILE = {"app": "x<script>alert(1)</script>", "billing": 'a"b $x^2$ & co', "unlock": "https://example.com/c"}


def test_hostile_class_names_are_escaped(make_facts):
    facts = make_facts()
    renamed = {s: f.with_columns(f.get_column("label").replace(HOSTILE)) for s, f in facts.splits.items()}
    page = render_html(build_card(make_facts(splits=renamed)))
    assert "<script>" not in page and "&lt;script&gt;" in page and "a&quot;b" in page
    # A class name that looks like a URL is shown as text, never loaded: no attribute carries it.
    for tag, attrs in parse(page).tags:
        assert all(not str(v).startswith("https") for k, v in attrs.items() if k != "aria-label"), tag
    assert "https://example.com/c" in "".join(parse(page).text)


def test_no_chart_without_data(make_facts):
    facts = make_facts()
    empty = {s: f.clear() for s, f in facts.splits.items()}
    page = render_html(build_card(make_facts(splits=empty, steps=[])))
    assert 'id="chart-class-counts"' not in page and 'id="chart-text-length"' not in page
    assert "No labelled rows reached the splits." in page
