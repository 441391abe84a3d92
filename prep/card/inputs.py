"""Facts about the table as read, before any step, that the card needs (RunFacts.extra).

The runner calls :func:`input_facts` once, right after reading the sources; the result is
counts only (no cell values), keyed by :data:`prep.card.build.EXTRA_MISSING_BY_SOURCE`.
"""

from __future__ import annotations

from typing import Any

import polars as pl

from prep.card import stats
from prep.card.build import EXTRA_MISSING_BY_SOURCE


def input_facts(pipeline: Any, table: pl.DataFrame) -> dict[str, Any]:
    """``{"missing_by_source": {...}}`` for the card's "missing values by source and column".

    A cell counts as missing as the ``missing`` step would see it: null, blank (white space or
    zero-width characters only) or one of the step's missing-value tokens (its configured
    tokens when the pipeline has the step, else its defaults).
    """
    from prep.steps.missing import DEFAULT_TOKENS, WHITE_SPACE
    from prep.steps.normalise import ZERO_WIDTH

    tokens = list(DEFAULT_TOKENS)
    for spec in getattr(pipeline, "steps", []):
        if spec.name == "missing" and getattr(spec.config, "tokens", None) is not None:
            tokens = list(spec.config.tokens)
            break
    columns = list(getattr(pipeline, "canonical_columns", []))
    by_source = stats.missing_by_source(table, columns, tokens, WHITE_SPACE + ZERO_WIDTH)
    return {
        EXTRA_MISSING_BY_SOURCE: {
            "definition": "null, blank (white space or zero-width characters only) or a missing-value token, "
            "case-insensitive after trimming",
            "tokens": tokens,
            "by_source": by_source,
        }
    }
