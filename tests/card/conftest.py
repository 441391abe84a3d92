"""Fixture for the card tests: ``make_facts(**overrides) -> RunFacts``, see ``card_facts.py``."""

from __future__ import annotations

from collections.abc import Callable

import pytest

import card_facts
from prep.facts import RunFacts


@pytest.fixture
def make_facts() -> Callable[..., RunFacts]:
    return card_facts.make_facts


@pytest.fixture(scope="session")
def demo_output(tmp_path_factory):
    """One run of the shipped demo pipeline, shared by the card tests that need real outputs."""
    from pathlib import Path

    from prep.pipeline import load_pipeline
    from prep.run import run_pipeline

    pipeline = Path(__file__).resolve().parents[2] / "sample_inputs" / "pipeline.yaml"
    out = tmp_path_factory.mktemp("card-demo") / "out"
    run_pipeline(load_pipeline(pipeline), out=out)
    return out
