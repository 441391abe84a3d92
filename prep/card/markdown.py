"""The card dict -> ``card.md``, a document for people.

The sections follow the question groups of Datasheets for Datasets (Gebru et al. 2018, revised
2021): Motivation, Composition, Collection process, Preprocessing/cleaning/labelling, Uses,
Distribution, Maintenance; then "Risks and cautions".

Invariants:

- Rendered only from the card dict, so ``card.md`` and ``card.json`` never disagree.
- Same dict, same string (no time, no locale-dependent formatting); ends with one newline.
- Values from the pipeline file (names, class names) are escaped so they cannot break a table
  or inject HTML.
"""

from __future__ import annotations

import json
from typing import Any

NOT_PROVIDED = "not provided"

#: Section headings, in order. Tests look for each of them.
HEADINGS = (
    "Motivation",
    "Composition",
    "Collection process",
    "Preprocessing, cleaning and labelling",
    "Uses",
    "Distribution",
    "Maintenance",
    "Risks and cautions",
)

_SPLITS = ("train", "validation", "test")


def render_markdown(card: dict[str, Any]) -> str:
    """The Markdown document for ``card`` (a dict as :func:`prep.card.build_card` returns)."""
    blocks: list[str] = [f"# Data card: {_esc(card['dataset'])}", _intro(card)]
    for heading, render in zip(HEADINGS, _RENDERERS):
        blocks.append(f"## {heading}")
        blocks.extend(b for b in render(card) if b)
    return "\n\n".join(blocks) + "\n"


# --- sections --------------------------------------------------------------------------------


def _intro(card: dict) -> str:
    return (
        f"Card version {card['card_version']}, written by prep {_esc(card['provenance']['tool_version'])}. "
        "The same facts, machine-readable, are in `card.json`."
    )


def _motivation(card: dict) -> list[str]:
    about = card["about"]
    return [
        _fields(
            [
                ("Description", _opt(card["description"])),
                ("Purpose", _opt(about["purpose"])),
                ("Maintainer", _opt(about["maintainer"])),
            ]
        )
    ]


def _composition(card: dict) -> list[str]:
    task = card["task"]
    classes = card["classes"]
    out = [
        _fields(
            [
                ("Task", _esc(task["kind"])),
                ("Label column", _code(task["label_column"])),
                ("Text columns", ", ".join(_code(c) for c in task["text_columns"]) or None),
                ("Classes", str(len(classes["names"]))),
            ]
        ),
        "### Classes per split",
        _table(
            ["Class", "Train", "Validation", "Test", "Total"],
            [[_esc(r["class"]), r["train"], r["validation"], r["test"], r["total"]] for r in classes["counts"]],
            empty="No labelled rows reached the splits.",
        ),
    ]
    unlabelled = classes["rows_without_label"]
    if any(unlabelled.values()):
        out.append(
            "Rows without a label in the splits: "
            + ", ".join(f"{s} {unlabelled[s]}" for s in _SPLITS)
            + "."
        )
    imb = card["imbalance"]
    rows = []
    for name, block in [(s, imb["by_split"][s]) for s in _SPLITS] + [("overall", imb["overall"])]:
        rows.append(
            [
                name,
                block["rows"],
                block["classes_present"],
                _num(block["imbalance_ratio"]),
                _num(block["pielou_evenness"]),
                _esc(block["largest_class"]) if block["largest_class"] is not None else "–",
                _esc(block["smallest_class"]) if block["smallest_class"] is not None else "–",
            ]
        )
    out += [
        "### Class balance",
        _table(
            ["Split", "Rows", "Classes present", "Imbalance ratio", "Pielou evenness", "Largest", "Smallest"],
            rows,
        ),
        "Imbalance ratio: largest over smallest class count (– when a class has no rows). "
        "Pielou evenness: Shannon entropy divided by ln K (Pielou 1966); 1 means equal class sizes.",
    ]
    leak = card["leakage"]
    if leak["clean"]:
        leak_text = "No text occurs in more than one split."
    else:
        pairs = "; ".join(
            f"{p['splits'][0]}/{p['splits'][1]}: {p['texts']} texts ({p['rows_a']} + {p['rows_b']} rows)"
            for p in leak["pairs"]
            if p["texts"]
        )
        leak_text = f"**{_rows(leak['total'])}** share their text with another split ({pairs})."
    out += ["### Leakage between splits", leak_text, _esc(leak["method"])]
    return out


def _collection(card: dict) -> list[str]:
    src = card["sources"]
    rows = [
        [
            _esc(s["name"]),
            _code(s["path"]),
            _esc(s["format"] + (f" ({s['compression']})" if s["compression"] else "")),
            _esc(s["encoding"]) if s["encoding"] else "–",
            s["rows_read"],
            s["rows_unreadable"],
            s["bytes"],
            _code(s["sha256"]),
        ]
        for s in src["items"]
    ]
    t = src["totals"]
    return [
        _table(["Source", "File", "Format", "Encoding", "Rows read", "Unreadable", "Bytes", "SHA-256"], rows,
               empty="No sources were read."),
        f"Rows read in total: {t['rows_read']} from {t['sources']} source{'' if t['sources'] == 1 else 's'} "
        f"({t['rows_unreadable']} unreadable, {t['bytes']} bytes).",
    ]


def _preprocessing(card: dict) -> list[str]:
    steps = card["steps"]
    out = [
        "### Steps",
        _table(
            ["#", "Step", "Rows in", "Rows out", "Set aside"],
            [[i + 1, _esc(s["name"]), s["rows_in"], s["rows_out"], sum(s["set_aside"].values())]
             for i, s in enumerate(steps)],
            empty="No steps ran.",
        ),
    ]
    aside = card["set_aside"]
    out += [
        "### Rows set aside",
        _table(
            ["Step", "Reason", "Rows"],
            [[_esc(e["step"]), _esc(r), n] for e in aside["by_step"] for r, n in e["by_reason"].items()],
            empty="No rows were set aside.",
        ),
        f"Rows set aside in total: {aside['total']}, each listed with its reason in `set_aside.parquet`.",
    ]
    merges = card["label_merges"]
    if merges["status"] == "reported":
        out += ["### Label spelling merges", _merges(merges["merges"])]
    later = [
        (title, card[key]["status"])
        for title, key in (("Near duplicates", "near_duplicates"), ("Redaction", "redaction"), ("Languages", "languages"))
    ]
    out.append(
        "Described in later card versions: "
        + "; ".join(f"{title}: {status}" for title, status in later)
        + "."
    )
    return out


def _uses(card: dict) -> list[str]:
    avg = card["recommended_averaging"]
    cw = card["class_weights"]
    return [
        _fields([("Intended use", _opt(card["about"]["intended_use"]))]),
        f"**Recommended averaging for metrics:** {avg['average']}. {_esc(avg['reason'])}",
        "### Class weights",
        f"Computed on {cw['basis']}: {_esc(cw['formula'])}.",
        _table(["Class", "Weight"], [[_esc(c), _num(w)] for c, w in cw["weights"].items()],
               empty="No classes in train."),
    ]


def _distribution(card: dict) -> list[str]:
    splits = card["splits"]
    cfg = splits["config"]
    out = [
        _fields([("License", _opt(card["about"]["license"]))]),
        _table(
            ["Split", "File", "Rows", "SHA-256"],
            [[s, _code(f["file"]), f["rows"], _code(f["sha256"])] for s, f in _in_split_order(splits["files"])],
            empty="No split files were written.",
        ),
        "Split configuration: " + (", ".join(f"{_esc(k)} = {_esc(_value(v))}" for k, v in cfg.items()) or "none") + ".",
    ]
    first = next((f for _, f in _in_split_order(splits["files"])), None)
    if first is not None:
        out.append("Columns: " + ", ".join(f"{_code(c['name'])} ({_esc(c['type'])})" for c in first["columns"]) + ".")
    if splits["notes"]:
        out.append("Notes from the splitter:\n\n" + "\n".join(f"- {_esc(n)}" for n in splits["notes"]))
    return out


def _maintenance(card: dict) -> list[str]:
    about = card["about"]
    prov = card["provenance"]
    return [
        _fields(
            [
                ("Maintainer", _opt(about["maintainer"])),
                ("Contact", _opt(about["contact"])),
                ("Tool", _esc(f"{prov['tool']} {prov['tool_version']}")),
                ("Pipeline file SHA-256", _code(prov["pipeline_sha256"])),
                ("Seed", str(prov["seed"])),
            ]
        ),
        "Running the same pipeline file on the same inputs with the same version of prep gives "
        "byte-identical outputs.",
    ]


def _risks(card: dict) -> list[str]:
    c = card["cautions"]
    acc = card["accounting"]
    rare = c["rare_classes"]["classes"]
    items = [
        (
            f"Rare classes ({len(rare)}): " + ", ".join(_esc(r) for r in rare)
            + ". Metrics on them rest on very few rows."
            if rare
            else "Rare classes: none."
        ),
        (
            f"Label conflicts: {_rows(c['label_conflict_rows'])} had the same text as another row but a "
            "different label and were set aside; the labels of similar rows may still disagree."
            if c["label_conflict_rows"]
            else "Label conflicts: none were set aside."
        ),
        f"Residual personal data: {_esc(c['residual_personal_data'])}",
        (
            f"Accounting: {acc['rows_read']} rows read = {acc['rows_in_splits']} in splits + "
            f"{acc['rows_set_aside']} set aside"
            if acc["balanced"]
            else f"Accounting does **not** balance: {acc['rows_read']} rows read, {acc['rows_in_splits']} "
            f"in splits, {acc['rows_set_aside']} set aside"
        )
        + ".",
    ]
    return ["\n".join(f"- {i}" for i in items), f"> {_esc(card['personal_data_notice'])}"]


_RENDERERS = (_motivation, _composition, _collection, _preprocessing, _uses, _distribution, _maintenance, _risks)


# --- helpers ---------------------------------------------------------------------------------


def _esc(text: Any) -> str:
    """Text safe inside a Markdown paragraph or table cell: no line breaks, pipes or HTML tags."""
    s = str(text)
    for old, new in (("\\", "\\\\"), ("|", "\\|"), ("<", "&lt;"), (">", "&gt;"), ("\r", " "), ("\n", " ")):
        s = s.replace(old, new)
    return s


def _code(text: Any) -> str:
    """An inline code span; the fence is longer than any backtick run inside (CommonMark 0.31, 6.1)."""
    s = str(text).replace("\r", " ").replace("\n", " ").replace("|", "\\|")
    longest = current = 0
    for ch in s:
        current = current + 1 if ch == "`" else 0
        longest = max(longest, current)
    fence = "`" * (longest + 1)
    pad = " " if s.startswith("`") or s.endswith("`") else ""
    return f"{fence}{pad}{s}{pad}{fence}"


def _opt(value: Any) -> str | None:
    """Escaped text, or None for an absent (null or empty) value."""
    return None if value is None or value == "" else _esc(value)


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


def _in_split_order(by_split: dict[str, Any]) -> list[tuple[str, Any]]:
    """Items of a split-keyed mapping as train, validation, test (JSON objects carry no order)."""
    return [(s, by_split[s]) for s in _SPLITS if s in by_split]


def _num(value: float | None) -> str:
    return "–" if value is None else f"{value:.3f}"


def _value(value: Any) -> str:
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value)


def _fields(pairs: list[tuple[str, str | None]]) -> str:
    """Bold-labelled lines (values already rendered); an absent value reads "not provided"."""
    lines = [f"**{label}:** {NOT_PROVIDED if value is None else value}" for label, value in pairs]
    # Two trailing spaces make a Markdown line break; the last line needs none.
    return "  \n".join(lines)


def _table(header: list[str], rows: list[list[Any]], *, empty: str | None = None) -> str:
    if not rows and empty is not None:
        return empty
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join(" --- " for _ in header) + "|"]
    lines += ["| " + " | ".join(str(v) for v in row) + " |" for row in rows]
    return "\n".join(lines)


def _merges(merges: Any) -> str:
    """Label merges as the normalise step reports them: ``[{"class": c, "spellings": {s: n}}]``.

    Any other JSON shape is shown as plain text, so a change in the step never breaks the card.
    """
    if not merges:
        return "No label spellings were merged."
    if isinstance(merges, list) and all(isinstance(m, dict) and {"class", "spellings"} <= m.keys() for m in merges):
        rows = [
            [_esc(m["class"]), ", ".join(f"{_esc(sp)} ({_value(n)})" for sp, n in dict(m["spellings"]).items())]
            for m in merges
        ]
        return _table(["Class", "Spellings (rows)"], rows)
    return _esc(json.dumps(merges, sort_keys=True, ensure_ascii=False))
