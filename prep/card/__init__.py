"""The data card: statistics, ``card.json`` (with its JSON Schema), ``card.md``, ``card.html``
and Croissant metadata (``croissant.json``).

    card = build_card(run_facts)        # plain JSON-safe dict, deterministic
    text = render_markdown(card)        # Markdown rendered from that dict only
    page = render_html(card)            # one self-contained HTML page with inline SVG charts
    files = render_card_files(card, date_published="2026-01-31", sizes={...})
                                        # {"card.md": ..., "card.html": ..., "croissant.json": ...}
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

#: The files rendered from card.json (by ``prep run`` and again by ``prep card``).
RENDERED_FILES = ("card.md", "card.html", "croissant.json")

__all__ = [
    "CARD_VERSION", "RENDERED_FILES", "SECTION_ORDER", "CardSchemaError", "build_card", "card_schema",
    "render_card_files", "render_html", "render_markdown", "validate_card", "write_card_files",
]


def render_html(card: dict[str, Any]) -> str:
    """``card.html``: one self-contained page (see :mod:`prep.card.html`)."""
    from prep.card.html import render_html as _render

    return _render(card)


def render_card_files(card: dict[str, Any], *, date_published: str, sizes: dict[str, int] | None = None) -> dict[str, str]:
    """Every file rendered from ``card``: name -> text, in :data:`RENDERED_FILES` order.

    ``date_published`` (YYYY-MM-DD, the day of the run) and ``sizes`` (split file -> bytes) go
    into ``croissant.json`` only; ``card.md`` and ``card.html`` depend on ``card`` alone.
    """
    from prep.card.croissant import build_croissant
    from prep.write import dumps_json

    return {
        "card.md": render_markdown(card),
        "card.html": render_html(card),
        "croissant.json": dumps_json(build_croissant(card, date_published=date_published, sizes=sizes)),
    }


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


def write_card_files(folder: Any, card: dict[str, Any], started_at: str) -> None:
    """Write :data:`RENDERED_FILES` into an output folder being written (``prep.write.OutputFolder``).

    ``started_at`` is the run's ISO 8601 start time (UTC); its date is Croissant's
    ``datePublished``. Split file sizes come from what the folder has written so far.
    """
    sizes = {name: info["bytes"] for name, info in folder.files.items() if "bytes" in info}
    for name, text in render_card_files(card, date_published=started_at[:10], sizes=sizes).items():
        folder.write_text(name, text)
