"""The step registry: pipeline-file step names to their modules (imported on first use)."""

from __future__ import annotations

import importlib
from types import ModuleType

STEP_MODULES: dict[str, str] = {
    "normalise": "prep.steps.normalise",
    "missing": "prep.steps.missing",
    "exact_duplicates": "prep.steps.exact_duplicates",
    "schema": "prep.steps.schema",
    "rare_classes": "prep.steps.rare_classes",
    "near_duplicates": "prep.steps.near_duplicates",
    "redact": "prep.steps.redact",
    "language": "prep.steps.language",
    "baseline": "prep.steps.baseline",            # runs after the split (PHASE = "splits")
    "suspect_labels": "prep.steps.suspect_labels",  # runs after the split (PHASE = "splits")
}


def step_module(name: str) -> ModuleType:
    """The module implementing step ``name``; KeyError if there is none."""
    return importlib.import_module(STEP_MODULES[name])
