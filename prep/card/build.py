"""RunFacts -> the card dict written as ``card.json``.

One function per section (``_section_<key>``), so later versions add or extend a section
without touching the others. :func:`build_card` calls them in :data:`SECTION_ORDER`.

Invariants:

- The card is plain JSON (dict, list, str, int, float, bool, None) with no NaN or infinity;
  ``json.dumps(card, sort_keys=True)`` is byte-identical for the same RunFacts.
- It holds no text value from the rows: only counts, class names, column names, step and
  reason names, file names, hashes and what the pipeline file or the steps stated.
- Nothing in it depends on time, the machine or an absolute path.
- Floats are rounded to :data:`FLOAT_DIGITS` decimals so summation noise never reaches the bytes.
"""

from __future__ import annotations

import json
from pathlib import PurePosixPath, PureWindowsPath
from typing import Any

import polars as pl

from prep.card import stats
from prep.errors import PrepError
from prep.facts import RunFacts
from prep.ledger import Reason
from prep.split import min_rows_for_all_splits

CARD_VERSION = "1.3"  # 1.2: the `engine` field; 1.3: `near_duplicates.signing`
TASK_KIND = "single-label classification"
SPLITS = ("train", "validation", "test")
ABOUT_FIELDS = ("purpose", "intended_use", "license", "maintainer", "contact")

#: Decimals kept for every float in the card (enough for weights and evenness; hides fsum noise).
FLOAT_DIGITS = 6

#: The step of the ledger that records unreadable input records (written by the readers).
READ_STEP = "read"

#: Card sections filled from one step's facts (section key -> step name). A section reads
#: {"status": "not run"} when that step is not in the pipeline.
STEP_SECTIONS = {
    "exact_duplicates": "exact_duplicates",
    "near_duplicates": "near_duplicates",
    "redaction": "redact",
    "languages": "language",
    "baseline": "baseline",
    "suspect_labels": "suspect_labels",
}
#: Kept for code written against card version 1.0.
LATER_SECTIONS = STEP_SECTIONS

#: The facts each step reports for its section (the facts contract between steps and the card).
#: A key the step did not report is null in the section; keys beyond these stay in ``steps``.
STEP_FACT_KEYS = {
    "exact_duplicates": ("groups", "rows_removed", "exact_duplicate_rows", "label_conflicts",
                         "label_conflict_rows", "keep", "conflicts", "cluster_sizes"),
    "near_duplicates": ("method", "shingles", "threshold", "permutations", "signing", "bands", "rows",
                        "expected_recall_at_threshold", "candidates", "verified_pairs", "clusters",
                        "rows_in_clusters", "rows_set_aside", "label_conflicts", "cluster_sizes",
                        "action", "keep"),
    "redact": ("kinds", "placeholders", "counts", "rows_changed", "columns"),
    "language": ("column", "backend", "min_chars", "counts", "too_short", "keep", "rows_set_aside"),
    "baseline": ("model", "features", "max_train_rows", "sampled", "seed", "metrics", "confusion", "note"),
    "suspect_labels": ("folds", "threshold_rule", "flagged", "set_aside", "policy", "noise"),
}

#: Where the runner puts facts the card needs beyond the steps' own (RunFacts.extra keys).
EXTRA_NEAR_DUPLICATE_AUDIT = "near_duplicate_audit"
EXTRA_MISSING_BY_SOURCE = "missing_by_source"

#: Splits on which metrics are measured, for the metric-noise section.
METRIC_SPLITS = ("validation", "test")

#: Observed recalls at which the Wilson interval width is reported: 0.5 gives the widest interval
#: (the worst case), 0.9 a typical value for a usable classifier (common practice, no source).
WILSON_RECALLS = {"width_at_recall_0_5": 0.5, "width_at_recall_0_9": 0.9}

#: A language with fewer rows than this over all splits is listed under cautions.
#: Rule of thumb, common practice, no source.
FEW_LANGUAGE_ROWS = 30

PERSONAL_DATA_NOTICE = (
    "Redaction of personal data is best-effort: pattern-based detection misses some personal "
    "data and may mask harmless text. It is no replacement for your own data-protection review "
    "before the data is used, shared or published."
)

LEAKAGE_METHOD = (
    "Exact-text leakage: the text columns of each row are whitespace-collapsed (Unicode White_Space "
    "runs to one space, ends trimmed), joined and case-folded (Unicode full case folding); a row leaks "
    "when its key occurs in another split. Rows with empty text are not compared. Expected to be 0 "
    "after exact-duplicate removal; reported, never enforced."
)

SECTION_ORDER = (
    "card_version",
    "dataset",
    "description",
    "about",
    "task",
    "sources",
    "steps",
    "set_aside",
    "classes",
    "imbalance",
    "class_weights",
    "recommended_averaging",
    "label_merges",
    "leakage",
    "splits",
    "provenance",
    "engine",
    "accounting",
    "personal_data_notice",
    "metric_noise",
    "text_length",
    "missing_values",
    "exact_duplicates",
    "near_duplicates",
    "redaction",
    "languages",
    "baseline",
    "suspect_labels",
    "cautions",
)


def build_card(facts: RunFacts) -> dict[str, Any]:
    """The card for one run, as a plain JSON-safe dict with keys in :data:`SECTION_ORDER`."""
    derived = _Derived(facts)
    card: dict[str, Any] = {}
    for key in SECTION_ORDER:
        section = globals()[f"_section_{key}"]
        card[key] = _plain(section(facts, derived), where=f"card section `{key}`")
    return card


class _Derived:
    """Values several sections share, computed once: classes and their counts per split."""

    def __init__(self, facts: RunFacts) -> None:
        frames = {name: facts.splits.get(name, pl.DataFrame()) for name in SPLITS}
        names: set[str] = set()
        for frame in frames.values():
            if facts.label in frame.columns and frame.height:
                names.update(frame.get_column(facts.label).drop_nulls().unique().to_list())
        self.frames = frames
        self.classes: list[str] = sorted(names)
        self.counts: dict[str, dict[str, int]] = {
            name: stats.class_counts(frame, facts.label, self.classes) for name, frame in frames.items()
        }
        self.total: dict[str, int] = {c: sum(self.counts[s][c] for s in SPLITS) for c in self.classes}


# --- sections --------------------------------------------------------------------------------


def _section_card_version(facts: RunFacts, d: _Derived) -> str:
    return CARD_VERSION


def _section_dataset(facts: RunFacts, d: _Derived) -> str:
    return facts.dataset


def _section_description(facts: RunFacts, d: _Derived) -> str | None:
    return facts.description


def _section_about(facts: RunFacts, d: _Derived) -> dict[str, str | None]:
    about = facts.about or {}
    return {key: about.get(key) for key in ABOUT_FIELDS}


def _section_task(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    return {"kind": TASK_KIND, "label_column": facts.label, "text_columns": list(facts.text)}


def _section_sources(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    items = [
        {
            "name": s.name,
            "path": _relative_path(s.path),
            "format": s.format,
            "compression": s.compression,
            "encoding": s.encoding,
            "rows_read": s.rows_read,
            "rows_unreadable": s.rows_unreadable,
            "bytes": s.bytes,
            "sha256": s.sha256,
        }
        for s in facts.sources
    ]
    totals = {
        "sources": len(items),
        "rows_read": sum(s.rows_read for s in facts.sources),
        "rows_unreadable": sum(s.rows_unreadable for s in facts.sources),
        "bytes": sum(s.bytes for s in facts.sources),
    }
    return {"items": items, "totals": totals}


def _section_steps(facts: RunFacts, d: _Derived) -> list[dict[str, Any]]:
    out = []
    for index, step in enumerate(facts.steps):
        where = f"step {index} (`{step.name}`)"
        out.append(
            {
                "name": step.name,
                "params": _plain(step.params, where=f"the parameters of {where}"),
                "rows_in": step.rows_in,
                "rows_out": step.rows_out,
                "set_aside": dict(sorted(step.set_aside.items())),
                "facts": _plain(step.facts, where=f"the facts reported by {where}"),
            }
        )
    return out


def _section_set_aside(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    """Ledger totals by step (in run order: read, then the pipeline's steps, then others by name)."""
    ledger = facts.ledger
    grouped = (
        ledger.group_by("step", "reason").len().sort("step", "reason")
        if ledger.height
        else pl.DataFrame(schema={"step": pl.String, "reason": pl.String, "len": pl.UInt32})
    )
    run_order = [READ_STEP] + [s.name for s in facts.steps]
    seen = list(dict.fromkeys(grouped.get_column("step").to_list()))
    ordered = [s for s in dict.fromkeys(run_order) if s in seen] + sorted(s for s in seen if s not in run_order)
    by_step = []
    for step in ordered:
        rows = grouped.filter(pl.col("step") == step)
        reasons = {r: int(n) for r, n in zip(rows.get_column("reason"), rows.get_column("len"))}
        by_step.append({"step": step, "rows": sum(reasons.values()), "by_reason": dict(sorted(reasons.items()))})
    by_reason: dict[str, int] = {}
    for entry in by_step:
        for reason, n in entry["by_reason"].items():
            by_reason[reason] = by_reason.get(reason, 0) + n
    return {"total": ledger.height, "by_reason": dict(sorted(by_reason.items())), "by_step": by_step}


def _section_classes(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    counts = [
        {"class": c, **{s: d.counts[s][c] for s in SPLITS}, "total": d.total[c]} for c in d.classes
    ]
    absent = {c: [s for s in SPLITS if d.counts[s][c] == 0] for c in d.classes}
    return {
        "names": list(d.classes),
        "counts": counts,
        "absent_from": {c: splits for c, splits in absent.items() if splits},
        "rows_without_label": {s: stats.missing_labels(d.frames[s], facts.label) for s in SPLITS},
    }


def _balance(counts: dict[str, int]) -> dict[str, Any]:
    largest, smallest = stats.largest_and_smallest(counts)
    return {
        "rows": sum(counts.values()),
        "classes_present": sum(1 for n in counts.values() if n > 0),
        "largest_class": largest,
        "smallest_class": smallest,
        "imbalance_ratio": _round(stats.imbalance_ratio(counts)),
        "shannon_entropy": _round(stats.shannon_entropy(counts)),
        "pielou_evenness": _round(stats.pielou_evenness(counts)),
        "imbalance_degree": _round(stats.imbalance_degree(counts)),
    }


def _section_imbalance(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    return {
        "definitions": {
            "imbalance_ratio": "largest class count / smallest class count over all classes; null if a class has 0 rows",
            "shannon_entropy": "H = -sum p ln p in nats over the classes present (Shannon 1948)",
            "pielou_evenness": "H / ln K, K = classes present (Pielou 1966); null when K < 2",
            "imbalance_degree": (
                "ID = (m - 1) + d(zeta, e) / d(iota_m, e) over all K classes, m = classes below 1/K, "
                "e = the balanced distribution, iota_m = the distribution with m minority classes farthest "
                "from e; 0 = balanced, at most K - 1 (Ortigosa-Hernandez, Inza and Lozano, Pattern "
                "Recognition Letters 98, 2017); null with fewer than 2 classes"
            ),
        },
        "imbalance_degree_distance": stats.IMBALANCE_DEGREE_DISTANCE,
        "by_split": {s: _balance(d.counts[s]) for s in SPLITS},
        "overall": _balance(d.total),
    }


def _section_class_weights(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    weights = stats.class_weights(d.counts["train"])
    return {
        "basis": "train",
        "formula": "n / (K * n_c), K = classes present in train; null for a class absent from train",
        "weights": {c: _round(w) for c, w in weights.items()},
    }


def _section_recommended_averaging(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    average, reason = stats.recommend_averaging(stats.imbalance_ratio(d.counts["train"]))
    return {
        "average": average,
        "reason": reason,
        "threshold": stats.MACRO_AVERAGING_THRESHOLD,
        "threshold_source": "rule of thumb, common practice, no source",
    }


def _section_label_merges(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    """Merges of label spellings, for the classes that reached the splits only.

    ``normalise`` runs before ``missing``, so it also merges spellings of values that are later
    found to mean "no label" (e.g. "n/a" and "N/A"), and of classes set aside later as rare;
    those are not classes of the dataset and are left out (their names are in ``omitted``).
    """
    step = next((s for s in facts.steps if s.name == "normalise"), None)
    if step is None:
        return {"status": "not run"}
    if "label_merges" not in step.facts:
        return {"status": "not reported"}
    merges = step.facts["label_merges"]
    if not isinstance(merges, list) or not all(isinstance(m, dict) and "class" in m for m in merges):
        return {"status": "reported", "merges": merges, "omitted": []}
    known = set(d.classes)
    kept = [m for m in merges if m["class"] in known]
    omitted = sorted({str(m["class"]) for m in merges if m["class"] not in known})
    return {"status": "reported", "merges": kept, "omitted": omitted}


def _section_leakage(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    result = stats.exact_text_leakage(d.frames, facts.text)
    audit = facts.extra.get(EXTRA_NEAR_DUPLICATE_AUDIT)
    near = {"status": "not run"} if not isinstance(audit, dict) else {
        "status": "ran",
        "threshold": audit.get("threshold"),
        "method": audit.get("method"),
        "pairs": dict(audit.get("pairs") or {}),
        "rows": dict(audit.get("rows") or {}),
    }
    return {
        "method": LEAKAGE_METHOD,
        "text_columns": list(facts.text),
        "clean": result["total"] == 0,
        **result,
        "near_duplicate_audit": near,
    }


def _section_splits(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    files = {}
    for name in SPLITS:
        f = facts.split_files.get(name)
        if f is None:
            continue
        files[name] = {
            "file": _relative_path(f.file),
            "rows": f.rows,
            "sha256": f.sha256,
            "columns": [{"name": c, "type": t} for c, t in f.columns.items()],
        }
    return {
        "files": files,
        "config": _plain(facts.split_config, where="the split configuration"),
        "notes": list(facts.split_notes),
    }


def _section_provenance(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    return {
        "pipeline_sha256": facts.pipeline_sha256,
        "tool": "prep",
        "tool_version": facts.tool_version,
        "seed": facts.seed,
        "inputs": [
            {"name": s.name, "path": _relative_path(s.path), "sha256": s.sha256, "bytes": s.bytes}
            for s in facts.sources
        ],
    }


def _section_engine(facts: RunFacts, d: _Derived) -> str:
    """``local`` or ``dask``: the only field in which two engines' cards of the same run may differ."""
    return facts.engine


def _section_accounting(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    rows = {s: (facts.splits[s].height if s in facts.splits else 0) for s in SPLITS}
    in_splits = sum(rows.values())
    return {
        "rows_read": facts.rows_read,
        "rows_per_split": rows,
        "rows_in_splits": in_splits,
        "rows_set_aside": facts.ledger.height,
        "balanced": facts.rows_read == in_splits + facts.ledger.height,
    }


def _section_personal_data_notice(facts: RunFacts, d: _Derived) -> str:
    return PERSONAL_DATA_NOTICE


def _step(facts: RunFacts, step_name: str):
    """The first run of ``step_name`` in the pipeline, or None."""
    return next((s for s in facts.steps if s.name == step_name), None)


def _step_section(facts: RunFacts, step_name: str) -> dict[str, Any]:
    """A section filled from one step's facts: ``{"status": "not run"}`` when it did not run,
    else ``{"status": "ran", "step", "rows_in", "rows_out", "set_aside_by_reason", <contract keys>}`` with
    null for a contract key the step did not report (so a reader always finds every key)."""
    step = _step(facts, step_name)
    if step is None:
        return {"status": "not run"}
    reported = step.facts
    section: dict[str, Any] = {
        "status": "ran",
        "step": step_name,
        "rows_in": step.rows_in,
        "rows_out": step.rows_out,
        "set_aside_by_reason": dict(sorted(step.set_aside.items())),
    }
    for key in STEP_FACT_KEYS[step_name]:
        section[key] = reported.get(key)
    return section


def _section_metric_noise(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    """How far a per-class recall measured on validation or test can be trusted.

    For each class, its support in the split and the width of the 95% Wilson score interval
    for a recall observed on that support, at an observed recall of 0.5 (widest) and 0.9.
    """
    by_split = {}
    for split in METRIC_SPLITS:
        rows = []
        for c in d.classes:
            n = d.counts[split][c]
            rows.append({"class": c, "support": n, **{k: _round(stats.wilson_width(p, n)) for k, p in WILSON_RECALLS.items()}})
        by_split[split] = rows
    return {
        "interval": "Wilson score interval",
        "confidence": 0.95,
        "z": _round(stats.Z_95),
        "formula": (
            "width = 2 z sqrt(n) / (n + z^2) * sqrt(p (1 - p) + z^2 / (4 n)), p = observed recall, n = support"
        ),
        "source": (
            "Wilson, JASA 22 (1927) 209-212; form of Brown, Cai and DasGupta, Statistical Science 16 (2001) 101-133"
        ),
        "recalls": dict(WILSON_RECALLS),
        "by_split": by_split,
    }


def _section_text_length(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    return {
        "unit": "Unicode code points of all text columns together",
        "text_columns": list(facts.text),
        "splits": list(SPLITS),
        "quantile_rule": "nearest-rank method: the ceil(p n / 100)-th smallest length",
        "by_class": stats.text_length_by_class([d.frames[s] for s in SPLITS], facts.label, facts.text),
    }


def _section_missing_values(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    recorded = facts.extra.get(EXTRA_MISSING_BY_SOURCE)
    if not isinstance(recorded, dict):
        return {"status": "not recorded"}
    return {
        "status": "recorded",
        "when": "as read, before any step",
        "definition": recorded.get("definition"),
        "tokens": list(recorded.get("tokens") or []),
        "by_source": list(recorded.get("by_source") or []),
    }


def _section_exact_duplicates(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    section = _step_section(facts, STEP_SECTIONS["exact_duplicates"])
    step = _step(facts, STEP_SECTIONS["exact_duplicates"])
    if step is not None and section["cluster_sizes"] is None and isinstance(step.facts.get("clusters"), list):
        section["cluster_sizes"] = step.facts["clusters"]  # the step reports its sizes as `clusters`
    return section


def _section_near_duplicates(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    return _step_section(facts, STEP_SECTIONS["near_duplicates"])


def _section_redaction(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    section = _step_section(facts, STEP_SECTIONS["redaction"])
    if section["status"] == "ran":
        section["best_effort"] = PERSONAL_DATA_NOTICE
    return section


def _section_languages(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    """The language step's facts, and the language mix per split and class from the splits."""
    section = _step_section(facts, STEP_SECTIONS["languages"])
    column = (section.get("column") if section["status"] == "ran" else None) or "language"
    if any(column in d.frames[s].columns for s in SPLITS):
        by_split = {s: stats.value_mix(d.frames[s], column) for s in SPLITS}
        frames = [d.frames[s] for s in SPLITS if column in d.frames[s].columns and facts.label in d.frames[s].columns]
        both = pl.concat([f.select(facts.label, column) for f in frames]) if frames else pl.DataFrame()
        mix = {"column": column, "by_split": by_split, "by_class": stats.value_mix(both, column, by=facts.label)}
        if section["status"] == "not run":
            section = {"status": "not run", "mix": mix}  # a `language` column came from the sources
        else:
            section["mix"] = mix
    elif section["status"] == "ran":
        section["mix"] = None
    return section


def _section_baseline(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    return _step_section(facts, STEP_SECTIONS["baseline"])


def _section_suspect_labels(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    return _step_section(facts, STEP_SECTIONS["suspect_labels"])


def _language_totals(facts: RunFacts, d: _Derived) -> dict[str, int] | None:
    column = "language"
    step = _step(facts, STEP_SECTIONS["languages"])
    if step is not None and isinstance(step.facts.get("column"), str):
        column = step.facts["column"]
    if not any(column in d.frames[s].columns for s in SPLITS):
        return None
    totals: dict[str, int] = {}
    for s in SPLITS:
        for lang, n in stats.value_mix(d.frames[s], column).items():
            totals[lang] = totals.get(lang, 0) + n
    return dict(sorted(totals.items()))


def _section_cautions(facts: RunFacts, d: _Derived) -> dict[str, Any]:
    """What a user of the splits should know before training: rare classes, conflicts, personal data."""
    fractions = [float(facts.split_config.get(s, 0) or 0) for s in SPLITS]
    minimum = min_rows_for_all_splits(fractions) if sum(fractions) > 0 else None
    rare = [
        c
        for c in d.classes
        if any(d.counts[s][c] == 0 for s, f in zip(SPLITS, fractions) if f > 0)
        or (minimum is not None and d.total[c] < minimum)
    ]
    conflicts = int(facts.ledger.filter(pl.col("reason") == Reason.LABEL_CONFLICT.value).height)
    redaction = _step(facts, STEP_SECTIONS["redaction"])
    redacted = redaction is not None
    replaced = redaction.facts.get("counts") if redaction is not None else None
    replaced_total = sum(v for v in replaced.values() if isinstance(v, int)) if isinstance(replaced, dict) else None
    near = _step(facts, STEP_SECTIONS["near_duplicates"])
    near_conflicts = near.facts.get("label_conflicts") if near is not None else None
    suspect = _step(facts, STEP_SECTIONS["suspect_labels"])
    flagged = suspect.facts.get("flagged") if suspect is not None else None
    languages = _language_totals(facts, d)
    few = None if languages is None else [lang for lang, n in languages.items() if n < FEW_LANGUAGE_ROWS]
    return {
        "rare_classes": {
            "rule": "a class is rare when it is missing from a split that should have rows, or has fewer "
            "rows in total than the smallest class size that gives every such split at least one row",
            "min_rows_for_all_splits": minimum,
            "classes": rare,
        },
        "label_conflict_rows": conflicts,
        "near_duplicate_label_conflicts": near_conflicts if isinstance(near_conflicts, int) else None,
        "suspect_labels_flagged": flagged if isinstance(flagged, int) else None,
        "redaction_ran": redacted,
        "values_redacted": replaced_total,
        "residual_personal_data": (
            "Redaction ran"
            + (f" and replaced {replaced_total} values" if replaced_total is not None else "")
            + "; residual personal data is still possible: pattern-based redaction is best-effort and "
            "does not find names, addresses or data in unusual formats (see the personal data notice)."
            if redacted
            else "No redaction step ran: the texts may contain personal data such as names, e-mail "
            "addresses, phone and card numbers."
        ),
        "languages_with_few_rows": None if few is None else {
            "rule": f"fewer than {FEW_LANGUAGE_ROWS} rows over all splits (rule of thumb, common practice, no source)",
            "threshold": FEW_LANGUAGE_ROWS,
            "languages": few,
        },
    }


# --- helpers ---------------------------------------------------------------------------------


def _round(value: float | None) -> float | None:
    return None if value is None else round(value, FLOAT_DIGITS)


def _relative_path(path: str) -> str:
    """The path as written when relative; only the file name when absolute (never a machine path)."""
    for flavour in (PurePosixPath, PureWindowsPath):
        p = flavour(path)
        if p.is_absolute() or p.drive:
            return p.name
    return str(path)


def _plain(value: Any, *, where: str) -> Any:
    """``value`` as plain JSON (tuples become lists, keys strings); a full-sentence error otherwise."""
    try:
        return json.loads(json.dumps(value, allow_nan=False, sort_keys=True))
    except (TypeError, ValueError) as exc:
        raise PrepError(
            f"The data card cannot be written: {where} holds a value that is not plain JSON "
            f"({type(exc).__name__}). This is a bug in prep; please report it with the pipeline file."
        ) from exc


__all__ = ["CARD_VERSION", "SECTION_ORDER", "STEP_FACT_KEYS", "STEP_SECTIONS", "build_card"]

# Every section in SECTION_ORDER has a builder; fail at import rather than at the first run.
assert all(f"_section_{key}" in globals() for key in SECTION_ORDER), "a card section has no builder"
