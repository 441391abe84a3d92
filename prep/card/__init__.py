"""The data card: statistics, ``card.json`` (with its JSON Schema) and ``card.md``.

    card = build_card(run_facts)        # plain JSON-safe dict, deterministic
    text = render_markdown(card)        # Markdown rendered from that dict only
    validate_card(card)                 # raises CardSchemaError if it breaks card.schema.json

The schema ships as package data (``prep/card/card.schema.json``); its ``card_version`` const
is :data:`CARD_VERSION`. Validation needs the ``jsonschema`` package (a test dependency), so it
is imported only when :func:`validate_card` is called.
"""

from __future__ import annotations

import json
from importlib import resources
from typing import Any

from prep.card.build import CARD_VERSION, SECTION_ORDER, build_card
from prep.card.markdown import render_markdown
from prep.errors import PrepError

SCHEMA_FILE = "card.schema.json"

__all__ = ["CARD_VERSION", "SECTION_ORDER", "CardSchemaError", "build_card", "card_schema", "render_markdown", "validate_card"]


class CardSchemaError(PrepError):
    """The card breaks its own JSON Schema, e.g. a required section is missing: a bug in prep."""


def card_schema() -> dict[str, Any]:
    """The published JSON Schema (draft 2020-12) of ``card.json``."""
    return json.loads(resources.files(__package__).joinpath(SCHEMA_FILE).read_text(encoding="utf-8"))


def validate_card(card: dict[str, Any]) -> None:
    """Raise :class:`CardSchemaError` naming every place where ``card`` breaks the schema.

    Messages give the JSON path and the schema keyword only, never the offending value, since a
    value could in principle carry data from the rows.
    """
    try:
        from jsonschema import Draft202012Validator
    except ImportError as exc:  # pragma: no cover - depends on the environment
        raise PrepError(
            "Validating the data card needs the `jsonschema` package, which is not installed.",
            hint="Install it with `pip install jsonschema` (it is part of prep's `test` extra).",
        ) from exc
    validator = Draft202012Validator(card_schema())
    errors = sorted(validator.iter_errors(card), key=lambda e: (list(map(str, e.absolute_path)), e.validator))
    if errors:
        places = "; ".join(f"{e.json_path} ({e.validator})" for e in errors[:10])
        more = f" and {len(errors) - 10} more" if len(errors) > 10 else ""
        raise CardSchemaError(
            f"The data card breaks its schema at {len(errors)} places: {places}{more}. "
            "This is a bug in prep; please report it with the pipeline file."
        )
