"""Fixture for the card tests: ``make_facts(**overrides) -> RunFacts``, see ``card_facts.py``."""

from __future__ import annotations

from collections.abc import Callable

import pytest

import card_facts
from prep.facts import RunFacts


@pytest.fixture
def make_facts() -> Callable[..., RunFacts]:
    return card_facts.make_facts

# `demo_output` (one run of the shipped demo, shared by every test module) lives in tests/conftest.py.
