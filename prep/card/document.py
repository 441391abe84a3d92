"""The card dict -> a document for people: sections of blocks that Markdown and HTML both render.

The sections follow the question groups of Datasheets for Datasets (Gebru et al. 2018, revised
2021): Motivation, Composition, Collection process, Preprocessing/cleaning/labelling, Uses,
Distribution, Maintenance; then "Risks and cautions". Building the document once keeps
``card.md`` and ``card.html`` saying the same thing; each renderer only decides how it looks.

Invariants:

- Built only from the card dict (so ``prep card`` can re-render from ``card.json``), and
  tolerant of sections a step did not fill: a missing key reads "not reported", a step that did
  not run reads "not run".
- Same dict, same document (no time, no locale).
- Text is plain; renderers escape it. Inline formatting is limited to :class:`Code` and
  :class:`Strong` spans.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any, Union

NOT_PROVIDED = "not provided"
NOT_RUN = "not run"
NOT_REPORTED = "not reported"

#: Section headings, in order.
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

SPLITS = ("train", "validation", "test")


# --- the document model ----------------------------------------------------------------------


class Code(str):
    """Inline code (file names, column names, hashes)."""


class Strong(str):
    """Emphasised inline text."""


Inline = Union[str, Code, Strong, int, float, None]
Parts = list  # a list of Inline


@dataclass
class Para:
    parts: Parts


@dataclass
class Fields:
    """Labelled values; a value of None reads "not provided"."""

    pairs: list[tuple[str, Parts | None]]


@dataclass
class Table:
    header: list[str]
    rows: list[list[Any]]          # cells: Inline or a list of Inline
    caption: str
    empty: str = "None."
    numeric: tuple[int, ...] = ()  # columns aligned right in HTML


@dataclass
class Bullets:
    items: list[Parts]


@dataclass
class Quote:
    parts: Parts


@dataclass
class Heading:
    text: str
    anchor: str


@dataclass
class Chart:
    """A chart drawn by :mod:`prep.card.charts` (HTML only; the tables beside it hold the numbers)."""

    name: str


Block = Union[Para, Fields, Table, Bullets, Quote, Heading, Chart]


@dataclass
class Section:
    title: str
    anchor: str
    blocks: list[Block] = field(default_factory=list)


def build_document(card: dict[str, Any]) -> tuple[str, list[Parts], list[Section]]:
    """(title, intro paragraphs, sections) for ``card``."""
    title = f"Data card: {card['dataset']}"
    prov = card.get("provenance", {})
    intro = [
        [
            f"Card version {card['card_version']}, written by prep {prov.get('tool_version', '?')} "
            f"({'on a Dask cluster' if card.get('engine') == 'dask' else 'in one process'}). "
            "The same facts, machine-readable, are in ",
            Code("card.json"),
            "; Croissant metadata for the split files is in ",
            Code("croissant.json"),
            ".",
        ]
    ]
    sections = []
    for heading, build in zip(HEADINGS, _BUILDERS):
        sections.append(Section(heading, _anchor(heading), [b for b in build(card) if b is not None]))
    return title, intro, sections


# --- sections --------------------------------------------------------------------------------


def _motivation(card: dict) -> list[Block]:
    about = card.get("about", {})
    return [
        Fields(
            [
                ("Dataset", [card["dataset"]]),
                ("Description", _opt(card.get("description"))),
                ("Purpose", _opt(about.get("purpose"))),
                ("Maintainer", _opt(about.get("maintainer"))),
            ]
        )
    ]


def _composition(card: dict) -> list[Block]:
    task = card["task"]
    classes = card["classes"]
    out: list[Block] = [
        Fields(
            [
                ("Task", [task["kind"]]),
                ("Label column", [Code(task["label_column"])]),
                ("Text columns", _join([Code(c) for c in task["text_columns"]]) or None),
                ("Classes", [str(len(classes["names"]))]),
            ]
        ),
        Heading("Classes per split", "classes"),
        Chart("class_counts"),
        Table(
            ["Class", "Train", "Validation", "Test", "Total"],
            [[r["class"], r["train"], r["validation"], r["test"], r["total"]] for r in classes["counts"]],
            caption="Rows per class and split",
            empty="No labelled rows reached the splits.",
            numeric=(1, 2, 3, 4),
        ),
    ]
    unlabelled = classes.get("rows_without_label", {})
    if any(unlabelled.values()):
        out.append(Para(["Rows without a label in the splits: " + ", ".join(f"{s} {unlabelled.get(s, 0)}" for s in SPLITS) + "."]))
    out += _balance(card)
    out += _metric_noise(card)
    out += _text_length(card)
    out += _languages(card)
    out += _leakage(card)
    return out


def _balance(card: dict) -> list[Block]:
    imb = card["imbalance"]
    distance = imb.get("imbalance_degree_distance", "hellinger")
    rows = []
    for name, block in [(s, imb["by_split"][s]) for s in SPLITS] + [("overall", imb["overall"])]:
        rows.append(
            [
                name,
                block["rows"],
                block["classes_present"],
                _num(block["imbalance_ratio"]),
                _num(block["pielou_evenness"]),
                _num(block.get("imbalance_degree")),
                block["largest_class"] if block["largest_class"] is not None else "–",
                block["smallest_class"] if block["smallest_class"] is not None else "–",
            ]
        )
    return [
        Heading("Class balance", "balance"),
        Table(
            ["Split", "Rows", "Classes present", "Imbalance ratio", "Pielou evenness", "Imbalance degree", "Largest", "Smallest"],
            rows,
            caption="Imbalance measures per split",
            numeric=(1, 2, 3, 4, 5),
        ),
        Para(
            [
                "Imbalance ratio: largest over smallest class count (– when a class has no rows). "
                "Pielou evenness: Shannon entropy divided by ln K (Pielou 1966); 1 means equal class sizes. "
                "Imbalance degree (Ortigosa-Hernández, Inza and Lozano, Pattern Recognition Letters 98, 2017), "
                f"with the {distance.replace('_', ' ')} distance: 0 means balanced; its integer part is the "
                "number of minority classes minus one, at most K − 1."
            ]
        ),
    ]


def _metric_noise(card: dict) -> list[Block]:
    noise = card.get("metric_noise")
    if not noise:
        return []
    val = {r["class"]: r for r in noise["by_split"].get("validation", [])}
    test = {r["class"]: r for r in noise["by_split"].get("test", [])}
    rows = []
    for c in sorted(set(val) | set(test)):
        v, t = val.get(c, {}), test.get(c, {})
        rows.append(
            [c, v.get("support", 0), _pm(v.get("width_at_recall_0_5")), _pm(v.get("width_at_recall_0_9")),
             t.get("support", 0), _pm(t.get("width_at_recall_0_5")), _pm(t.get("width_at_recall_0_9"))]
        )
    return [
        Heading("How noisy validation and test metrics will be", "metric-noise"),
        Table(
            ["Class", "Validation support", "± (recall 0.5)", "± (recall 0.9)", "Test support", "± (recall 0.5)", "± (recall 0.9)"],
            rows,
            caption="Half-width of the 95% Wilson interval of a per-class recall, by support",
            empty="No classes.",
            numeric=(1, 2, 3, 4, 5, 6),
        ),
        Para(
            [
                "A per-class recall measured on n rows is uncertain: the table gives half the width of its 95% "
                f"{noise['interval']} (z = {noise['z']:.4f}) when the observed recall is 0.5 (the widest case) "
                f"and 0.9. Formula: {noise['formula']}. Source: {noise['source']}. A class with a wide interval "
                "cannot show a small improvement on that split."
            ]
        ),
    ]


def _text_length(card: dict) -> list[Block]:
    tl = card.get("text_length")
    if not tl:
        return []
    return [
        Heading("Text length per class", "text-length"),
        Chart("text_length"),
        Table(
            ["Class", "Rows", "Min", "10%", "25%", "Median", "75%", "90%", "Max", "Mean"],
            [[r["class"], r["rows"], r["min"], r["p10"], r["p25"], r["median"], r["p75"], r["p90"], r["max"], r["mean"]]
             for r in tl["by_class"]],
            caption="Text length per class in characters, all splits",
            empty="No labelled rows.",
            numeric=tuple(range(1, 10)),
        ),
        Para([f"Length: {tl['unit']} ({', '.join(tl['text_columns'])}), over all splits; quantiles by the {tl['quantile_rule']}."]),
    ]


def _languages(card: dict) -> list[Block]:
    lang = card.get("languages", {"status": NOT_RUN})
    out: list[Block] = [Heading("Languages", "languages")]
    if lang.get("status") == "ran":
        out.append(
            Fields(
                [
                    ("Detector", _opt(lang.get("backend"))),
                    ("Minimum characters for a guess", _opt(lang.get("min_chars"))),
                    ("Too short to guess (rows reaching the language step)", _opt(lang.get("too_short"))),
                    ("Languages kept", _opt(", ".join(lang["keep"]) if lang.get("keep") else ("all" if "keep" in lang else None))),
                    ("Rows set aside for their language", _opt(lang.get("rows_set_aside"))),
                ]
            )
        )
        counts = lang.get("counts")
        if isinstance(counts, dict):
            out.append(Table(["Language", "Rows"], [[k, v] for k, v in sorted(counts.items())],
                             caption="Languages detected in the rows reaching the language step (later steps set some "
                                     "of them aside; the languages of the splits are in the table below)", numeric=(1,)))
    else:
        out.append(Para(["Language detection: not run."]))
    mix = lang.get("mix")
    if isinstance(mix, dict):
        by_split = mix.get("by_split", {})
        langs = sorted({k for v in by_split.values() for k in v})
        out.append(Chart("language_mix"))
        out.append(
            Table(
                ["Language", *[s.capitalize() for s in SPLITS]],
                [[lg, *[by_split.get(s, {}).get(lg, 0) for s in SPLITS]] for lg in langs],
                caption=f"Rows per language and split (column {mix['column']})",
                empty="No rows.",
                numeric=(1, 2, 3),
            )
        )
        by_class = mix.get("by_class", {})
        if by_class:
            out.append(
                Table(
                    ["Class", "Languages (rows)"],
                    [[c, ", ".join(f"{lg} {n}" for lg, n in v.items())] for c, v in by_class.items()],
                    caption="Languages per class, all splits",
                )
            )
    return out


def _leakage(card: dict) -> list[Block]:
    leak = card["leakage"]
    if leak["clean"]:
        leak_text: Parts = ["No text occurs in more than one split."]
    else:
        pairs = "; ".join(
            f"{p['splits'][0]}/{p['splits'][1]}: {p['texts']} texts ({p['rows_a']} + {p['rows_b']} rows)"
            for p in leak["pairs"]
            if p["texts"]
        )
        leak_text = [Strong(_rows(leak["total"])), f" share their text with another split ({pairs})."]
    out: list[Block] = [Heading("Leakage between splits", "leakage"), Para(leak_text), Para([leak["method"]])]
    audit = leak.get("near_duplicate_audit", {"status": NOT_RUN})
    if audit.get("status") == "ran":
        pairs = audit.get("pairs") or {}
        rows = audit.get("rows") or {}
        out.append(
            Table(
                ["Splits", "Near-duplicate pairs"],
                [[k.replace("~", " ~ "), v] for k, v in pairs.items()],
                caption=f"Near-duplicate leakage audit (threshold {_value(audit.get('threshold'))}, method {_value(audit.get('method'))})",
                empty="No pairs were reported.",
                numeric=(1,),
            )
        )
        if rows:
            out.append(Para(["Rows with a near duplicate in an earlier split: " + ", ".join(f"{k} {v}" for k, v in rows.items()) + "."]))
    else:
        out.append(Para(["Near-duplicate leakage audit: not run."]))
    return out


def _collection(card: dict) -> list[Block]:
    src = card["sources"]
    rows = [
        [
            s["name"],
            Code(s["path"]),
            s["format"] + (f" ({s['compression']})" if s["compression"] else ""),
            s["encoding"] if s["encoding"] else "–",
            s["rows_read"],
            s["rows_unreadable"],
            s["bytes"],
            Code(s["sha256"]),
        ]
        for s in src["items"]
    ]
    t = src["totals"]
    out: list[Block] = [
        Table(["Source", "File", "Format", "Encoding", "Rows read", "Unreadable", "Bytes", "SHA-256"], rows,
              caption="Input files", empty="No sources were read.", numeric=(4, 5, 6)),
        Para(
            [
                f"Rows read in total: {t['rows_read']} from {t['sources']} source{'' if t['sources'] == 1 else 's'} "
                f"({t['rows_unreadable']} unreadable, {t['bytes']} bytes)."
            ]
        ),
        Heading("Missing values by source and column", "missing-values"),
    ]
    mv = card.get("missing_values", {"status": "not recorded"})
    if mv.get("status") != "recorded" or not mv.get("by_source"):
        out.append(Para(["Missing values per source: not recorded."]))
        return out
    columns = list(dict.fromkeys(r["column"] for r in mv["by_source"]))
    sources = list(dict.fromkeys(r["source"] for r in mv["by_source"]))
    cell = {(r["source"], r["column"]): r for r in mv["by_source"]}
    table_rows = []
    for s in sources:
        first = next(r for r in mv["by_source"] if r["source"] == s)
        table_rows.append([s, first["rows"], *[_missing_cell(cell.get((s, c))) for c in columns]])
    out += [
        Chart("missing_values"),
        Table(["Source", "Rows", *columns], table_rows, caption="Missing cells per source and column, as read",
              numeric=tuple(range(1, len(columns) + 2))),
        Para([f"Counted {mv.get('when', 'as read')}: {mv.get('definition') or 'null or empty cells'}."]),
    ]
    return out


def _preprocessing(card: dict) -> list[Block]:
    steps = card["steps"]
    out: list[Block] = [
        Heading("Steps", "steps"),
        Chart("rows_removed"),
        Table(
            ["#", "Step", "Rows in", "Rows out", "Set aside"],
            [[i + 1, s["name"], s["rows_in"], s["rows_out"], sum(s["set_aside"].values())] for i, s in enumerate(steps)],
            caption="What each step did",
            empty="No steps ran.",
            numeric=(0, 2, 3, 4),
        ),
    ]
    if steps:
        out.append(
            Table(
                ["Step", "Parameters"],
                [[s["name"], Code(_compact(s["params"]))] for s in steps],
                caption="Parameters of each step, as run",
            )
        )
    aside = card["set_aside"]
    out += [
        Heading("Rows set aside", "set-aside"),
        Table(
            ["Step", "Reason", "Rows"],
            [[e["step"], r, n] for e in aside["by_step"] for r, n in e["by_reason"].items()],
            caption="Rows set aside, by step and reason",
            empty="No rows were set aside.",
            numeric=(2,),
        ),
        Para([f"Rows set aside in total: {aside['total']}, each listed with its reason in ", Code("set_aside.parquet"), "."]),
    ]
    merges = card["label_merges"]
    out.append(Heading("Label spelling merges", "label-merges"))
    if merges["status"] == "reported":
        out.append(_merges(merges["merges"]))
        if merges.get("omitted"):
            out.append(Para(["Spellings merged but not classes of the splits (missing-value tokens or classes set aside later), not listed: "
                             + ", ".join(merges["omitted"]) + "."]))
    else:
        out.append(Para([f"Label spelling merges: {merges['status']}."]))
    out += _duplicates(card)
    out += _redaction(card)
    out += _suspect_labels(card)
    return out


def _duplicates(card: dict) -> list[Block]:
    exact = card.get("exact_duplicates", {"status": NOT_RUN})
    near = card.get("near_duplicates", {"status": NOT_RUN})
    out: list[Block] = [Heading("Duplicates", "duplicates")]
    if exact.get("status") == "ran":
        out.append(
            Fields(
                [
                    ("Exact-duplicate groups", _opt(exact.get("groups"))),
                    ("Rows set aside as exact copies", _opt(exact.get("exact_duplicate_rows"))),
                    ("Rows set aside for conflicting labels", _opt(exact.get("label_conflict_rows"))),
                    ("Groups with conflicting labels", _opt(exact.get("label_conflicts"))),
                    ("Kept copy", _opt(exact.get("keep"))),
                    ("Conflict policy", _opt(exact.get("conflicts"))),
                ]
            )
        )
    else:
        out.append(Para(["Exact duplicates: not run."]))
    if near.get("status") == "ran":
        shingles = near.get("shingles")
        shingle_text = (
            f"{shingles.get('kind', '?')} {shingles.get('n', '?')}-grams" if isinstance(shingles, dict) else None
        )
        out.append(
            Fields(
                [
                    ("Near-duplicate search", _opt(_METHOD_TEXT.get(near.get("method"), near.get("method")))),
                    ("Shingles", _opt(shingle_text)),
                    ("Jaccard threshold", _opt(near.get("threshold"))),
                    ("MinHash signing", _opt(_SIGNING_TEXT.get(near.get("signing")))),
                    ("Permutations, bands × rows", _opt(_band_text(near))),
                    ("Expected recall at the threshold", _opt(near.get("expected_recall_at_threshold"))),
                    ("Candidate pairs, verified pairs", _opt(_pair_text(near))),
                    ("Clusters (rows in them)", _opt(_cluster_text(near))),
                    ("Rows set aside", _opt(near.get("rows_set_aside"))),
                    ("Clusters with conflicting labels", _opt(near.get("label_conflicts"))),
                    ("Action, kept copy", _opt(_join_opt(near.get("action"), near.get("keep")))),
                ]
            )
        )
    else:
        out.append(Para(["Near duplicates: not run."]))
    groups = cluster_size_groups(card)
    if groups:
        grouped = any("-" in label for label, *_ in groups)
        out.append(Chart("cluster_sizes"))
        out.append(
            Table(
                ["Cluster size", "Exact-duplicate clusters", "Near-duplicate clusters"],
                [[label, e, n] for label, _, _, e, n in groups],
                caption="Duplicate clusters by size" + (" (larger sizes in ranges)" if grouped else ""),
                numeric=(0, 1, 2),
            )
        )
    return out


def _redaction(card: dict) -> list[Block]:
    red = card.get("redaction", {"status": NOT_RUN})
    out: list[Block] = [Heading("Redaction of personal data", "redaction")]
    if red.get("status") != "ran":
        return out + [Para(["Redaction: not run. The texts may contain personal data."])]
    counts = red.get("counts") if isinstance(red.get("counts"), dict) else {}
    placeholders = red.get("placeholders") if isinstance(red.get("placeholders"), dict) else {}
    kinds = red.get("kinds") or sorted(set(counts) | set(placeholders))
    out += [
        Fields(
            [
                ("Columns", _join([Code(c) for c in red.get("columns") or []]) or None),
                ("Rows changed", _opt(red.get("rows_changed"))),
            ]
        ),
        Table(
            ["Kind", "Placeholder", "Values replaced"],
            [[k, Code(placeholders[k]) if k in placeholders else "–", counts.get(k, NOT_REPORTED)] for k in kinds],
            caption="Values found and replaced, by kind",
            empty="No kinds were reported.",
            numeric=(2,),
        ),
        Para([red.get("best_effort") or card.get("personal_data_notice", "")]),
    ]
    return out


def _suspect_labels(card: dict) -> list[Block]:
    sl = card.get("suspect_labels", {"status": NOT_RUN})
    out: list[Block] = [Heading("Suspect labels", "suspect-labels")]
    if sl.get("status") != "ran":
        return out + [Para(["Suspect-label check: not run."])]
    out.append(
        Fields(
            [
                ("Folds", _opt(sl.get("folds"))),
                ("Rule", _opt(sl.get("threshold_rule"))),
                ("Rows flagged", _opt(sl.get("flagged"))),
                ("Rows set aside", _opt(sl.get("set_aside"))),
                ("Policy", _opt(sl.get("policy"))),
            ]
        )
    )
    noise = sl.get("noise")
    if isinstance(noise, list) and noise:
        out.append(
            Table(
                ["Given label", "Suggested label", "Rows"],
                [[n.get("given", "?"), n.get("suggested", "?"), n.get("rows", 0)] for n in noise if isinstance(n, dict)],
                caption="Flagged rows by given and suggested label",
                numeric=(2,),
            )
        )
    return out


def _uses(card: dict) -> list[Block]:
    avg = card["recommended_averaging"]
    cw = card["class_weights"]
    return [
        Fields([("Intended use", _opt(card["about"].get("intended_use")))]),
        Para([Strong("Recommended averaging for metrics:"), f" {avg['average']}. {avg['reason']}"]),
        Heading("Class weights", "class-weights"),
        Para([f"Computed on {cw['basis']}: {cw['formula']}."]),
        Table(["Class", "Weight"], [[c, _num(w)] for c, w in cw["weights"].items()],
              caption="Balanced class weights", empty="No classes in train.", numeric=(1,)),
        *_baseline(card),
    ]


def _baseline(card: dict) -> list[Block]:
    base = card.get("baseline", {"status": NOT_RUN})
    out: list[Block] = [Heading("Baseline model", "baseline")]
    if base.get("status") != "ran":
        return out + [Para(["Baseline: not run."])]
    out.append(
        Fields(
            [
                ("Model", _opt(base.get("model"))),
                ("Features", _opt(_features_text(base.get("features")))),
                ("Training rows used", _opt(_sample_text(base))),
                ("Seed", _opt(base.get("seed"))),
            ]
        )
    )
    metrics = base.get("metrics") if isinstance(base.get("metrics"), dict) else {}
    if metrics:
        names = ("accuracy", "balanced_accuracy", "macro_f1")
        out.append(
            Table(
                ["Split", "Accuracy", "Balanced accuracy", "Macro F1"],
                [[s, *[_num(metrics[s].get(n)) for n in names]] for s in SPLITS if isinstance(metrics.get(s), dict)],
                caption="Baseline metrics",
                numeric=(1, 2, 3),
            )
        )
        per_class = {s: metrics[s].get("per_class_f1") or {} for s in SPLITS if isinstance(metrics.get(s), dict)}
        classes = sorted({c for v in per_class.values() for c in v})
        if classes:
            splits = list(per_class)
            out.append(
                Table(["Class", *[f"F1 {s}" for s in splits]], [[c, *[_num(per_class[s].get(c)) for s in splits]] for c in classes],
                      caption="Baseline F1 per class", numeric=tuple(range(1, len(splits) + 1)))
            )
    confusion = base.get("confusion") if isinstance(base.get("confusion"), dict) else {}
    for split in SPLITS:
        cm = confusion.get(split)
        if isinstance(cm, dict) and isinstance(cm.get("labels"), list) and isinstance(cm.get("matrix"), list):
            labels = cm["labels"]
            out.append(
                Table(
                    ["True \\ predicted", *labels],
                    [[labels[i], *row] for i, row in enumerate(cm["matrix"]) if i < len(labels)],
                    caption=f"Baseline confusion matrix, {split} (rows: true class, columns: predicted class)",
                    numeric=tuple(range(1, len(labels) + 1)),
                )
            )
    if base.get("note"):
        out.append(Para([base["note"]]))
    return out


def _distribution(card: dict) -> list[Block]:
    splits = card["splits"]
    cfg = splits["config"]
    files = [(s, splits["files"][s]) for s in SPLITS if s in splits["files"]]
    out: list[Block] = [
        Fields([("License", _opt(card["about"].get("license")))]),
        Table(
            ["Split", "File", "Rows", "SHA-256"],
            [[s, Code(f["file"]), f["rows"], Code(f["sha256"])] for s, f in files],
            caption="Split files",
            empty="No split files were written.",
            numeric=(2,),
        ),
        Para(["Split configuration: " + (", ".join(f"{k} = {_value(v)}" for k, v in cfg.items()) or "none") + "."]),
    ]
    if files:
        first = files[0][1]
        same = all(f["columns"] == first["columns"] for _, f in files)
        for name, f in files if not same else files[:1]:
            out.append(
                Table(["Column", "Type"], [[Code(c["name"]), c["type"]] for c in f["columns"]],
                      caption="Columns of every split file" if same else f"Columns of {f['file']}")
            )
    if splits["notes"]:
        out.append(Para(["Notes from the splitter:"]))
        out.append(Bullets([[n] for n in splits["notes"]]))
    out.append(Para(["Other files: ", Code("set_aside.parquet"), " (the ledger), ", Code("manifest.json"),
                     " (hashes and sizes of every file, run times), ", Code("croissant.json"),
                     " (Croissant 1.1 metadata of the split files)."]))
    return out


def _maintenance(card: dict) -> list[Block]:
    about = card["about"]
    prov = card["provenance"]
    out: list[Block] = [
        Fields(
            [
                ("Maintainer", _opt(about.get("maintainer"))),
                ("Contact", _opt(about.get("contact"))),
                ("Tool", [f"{prov['tool']} {prov['tool_version']}"]),
                ("Pipeline file SHA-256", [Code(prov["pipeline_sha256"])]),
                ("Seed", [str(prov["seed"])]),
            ]
        ),
    ]
    inputs = prov.get("inputs")
    if inputs:
        out.append(Table(["Input", "File", "Bytes", "SHA-256"], [[i["name"], Code(i["path"]), i["bytes"], Code(i["sha256"])] for i in inputs],
                         caption="Input files of the run", numeric=(2,)))
    out.append(
        Para(
            [
                "Running the same pipeline file on the same inputs with the same version of prep gives "
                "byte-identical splits, ledger and card.json (with either engine, apart from card.json's "
                "engine); the manifest's run times and croissant.json's date change with every run. "
                "To fix a hand-written field, edit ",
                Code("card.json"),
                " and run ",
                Code("prep card OUTPUT_DIR"),
                " to render this card again.",
            ]
        )
    )
    return out


_METHOD_TEXT = {
    "minhash_lsh": "MinHash with LSH banding; every candidate pair verified exactly",
    "exhaustive": "exhaustive: every pair compared exactly",
}


def _features_text(features: Any) -> str | None:
    """The baseline's features in words when they have the usual keys; otherwise compact JSON."""
    if features is None or isinstance(features, str):
        return features
    f = features if isinstance(features, dict) else {}
    usual = ("word_ngrams", "char_ngrams", "char_analyzer", "text_columns", "hashed_columns_per_analyzer", "weighting")
    if not all(k in f for k in usual) or not all(isinstance(f[k], list) and len(f[k]) == 2 for k in ("word_ngrams", "char_ngrams")):
        return _compact(features)
    (w0, w1), (c0, c1) = f["word_ngrams"], f["char_ngrams"]
    return (
        f"word {w0}-{w1}-grams and character {c0}-{c1}-grams ({f['char_analyzer']}) of "
        f"{', '.join(map(str, f['text_columns']))}; {f['hashed_columns_per_analyzer']:,} hashed columns per kind; "
        f"{f['weighting']}"
    )


def _risks(card: dict) -> list[Block]:
    c = card["cautions"]
    acc = card["accounting"]
    rare = c["rare_classes"]["classes"]
    handled = next((st.get("facts", {}).get("classes") for st in card.get("steps", []) if st.get("name") == "rare_classes"), None)
    handled = [h for h in handled if isinstance(h, dict)] if isinstance(handled, list) else []
    aside = [h for h in handled if h.get("action") == "set_aside"]
    earlier = (
        f" The rare_classes step set aside {len(aside)} smaller "
        + ("class" if len(aside) == 1 else "classes")
        + f" before the split ({', '.join(str(h.get('class')) for h in aside)}: "
        + _rows(sum(int(h.get("rows") or 0) for h in aside))
        + ")."
        if aside
        else ""
    )
    items: list[Parts] = [
        [
            f"Rare classes left in the splits ({len(rare)}): " + ", ".join(rare) + ". Metrics on them rest on very few rows."
            + earlier
            if rare
            else "Rare classes left in the splits: none." + earlier
        ],
        [
            f"Label conflicts: {_rows(c['label_conflict_rows'])} had the same text as another row"
            + (" (or, in a near-duplicate cluster, nearly the same)" if c.get("near_duplicate_label_conflicts") else "")
            + " but a different label and were set aside; the labels of similar rows may still disagree."
            if c["label_conflict_rows"]
            else "Label conflicts: none were set aside."
        ],
    ]
    if c.get("near_duplicate_label_conflicts"):
        items.append([f"Near-duplicate clusters with conflicting labels: {c['near_duplicate_label_conflicts']}."])
    if c.get("suspect_labels_flagged") is not None:
        items.append([f"Rows flagged as possibly mislabelled: {c['suspect_labels_flagged']}."])
    items.append([f"Residual personal data: {c['residual_personal_data']}"])
    few = c.get("languages_with_few_rows")
    if few is None:
        items.append(["Languages with few rows: unknown (no language column)."])
    elif few["languages"]:
        items.append([f"Languages with few rows ({few['rule']}): " + ", ".join(few["languages"]) + "."])
    else:
        items.append([f"Languages with few rows ({few['rule']}): none."])
    if acc["balanced"]:
        items.append([f"Accounting: {acc['rows_read']} rows read = {acc['rows_in_splits']} in splits + {acc['rows_set_aside']} set aside."])
    else:
        items.append(["Accounting does ", Strong("not"), f" balance: {acc['rows_read']} rows read, "
                      f"{acc['rows_in_splits']} in splits, {acc['rows_set_aside']} set aside."])
    return [Bullets(items), Quote([card["personal_data_notice"]])]


_BUILDERS = (_motivation, _composition, _collection, _preprocessing, _uses, _distribution, _maintenance, _risks)


# --- helpers ---------------------------------------------------------------------------------


def _anchor(text: str) -> str:
    return "".join(ch if ch.isalnum() else "-" for ch in text.lower()).strip("-").replace("--", "-")


def _opt(value: Any) -> Parts | None:
    """[value as text], or None for an absent (null or empty) value."""
    if value is None or value == "":
        return None
    return [_value(value)]


def _join(parts: list[Inline], sep: str = ", ") -> Parts:
    out: Parts = []
    for i, p in enumerate(parts):
        if i:
            out.append(sep)
        out.append(p)
    return out


def _join_opt(*values: Any) -> str | None:
    present = [str(v) for v in values if v is not None]
    return ", ".join(present) if present else None


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


def _num(value: float | None) -> str:
    return "–" if value is None else f"{value:.3f}"


def _pm(width: float | None) -> str:
    """± half the interval width, or – when there is no support."""
    return "–" if width is None else f"±{width / 2:.3f}"


def _value(value: Any) -> str:
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (list, dict)):
        return _compact(value)
    return str(value)


def _compact(value: Any) -> str:
    return json.dumps(value, sort_keys=True, ensure_ascii=False, separators=(", ", ": "))


def _missing_cell(r: dict | None) -> str:
    if r is None:
        return "–"
    share = r["missing"] / r["rows"] if r["rows"] else 0.0
    return f"{r['missing']} ({share:.0%})"


_SIGNING_TEXT = {
    "one_permutation": "one permutation hashing, optimal densification (Li et al. 2012; Shrivastava 2017)",
    "permutations": "one hash function per permutation (Broder 1997)",
}


def _band_text(near: dict) -> str | None:
    if near.get("permutations") is None and near.get("bands") is None:
        return None
    return f"{_value(near.get('permutations'))}, {_value(near.get('bands'))} × {_value(near.get('rows'))}"


def _pair_text(near: dict) -> str | None:
    if near.get("candidates") is None and near.get("verified_pairs") is None:
        return None
    return f"{_value(near.get('candidates'))}, {_value(near.get('verified_pairs'))}"


def _cluster_text(near: dict) -> str | None:
    if near.get("clusters") is None:
        return None
    return f"{near['clusters']} ({_value(near.get('rows_in_clusters'))})"


def _sample_text(base: dict) -> str | None:
    if base.get("max_train_rows") is None and base.get("sampled") is None:
        return None
    sampled = "a seeded sample" if base.get("sampled") else "all train rows"
    return f"{sampled} (at most {_value(base.get('max_train_rows'))})"


def _cluster_sizes(card: dict) -> dict[int, tuple[int, int]]:
    """size -> (exact clusters, near clusters) from the two duplicate sections."""
    out: dict[int, list[int]] = {}
    for i, key in enumerate(("exact_duplicates", "near_duplicates")):
        sizes = card.get(key, {}).get("cluster_sizes")
        if not isinstance(sizes, list):
            continue
        for item in sizes:
            if isinstance(item, dict) and isinstance(item.get("size"), int) and isinstance(item.get("clusters"), int):
                out.setdefault(item["size"], [0, 0])[i] += item["clusters"]
    return {k: (v[0], v[1]) for k, v in out.items()}


# Up to this many distinct cluster sizes are listed one by one; beyond it, sizes above 5 are
# grouped into ranges of a 1-2-5 series (a table of hundreds of sizes helps nobody, and drawing
# one bar per size took ~10 s for the 259 sizes of a million-row run). Common practice, no source.
MAX_SINGLE_SIZES = 12


def cluster_size_groups(card: dict) -> list[tuple[str, int, int, int, int]]:
    """(label, smallest size present, largest size present, exact clusters, near clusters) per row of the card's
    cluster-size table and bar of its chart, smallest sizes first; every size is in exactly one
    group. Sizes one by one when there are at most MAX_SINGLE_SIZES of them, else 2, 3, 4, 5 and
    then the ranges 6-10, 11-20, 21-50, 51-100, 101-200, ... (only ranges holding a cluster)."""
    sizes = _cluster_sizes(card)
    if len(sizes) <= MAX_SINGLE_SIZES:
        return [(str(k), k, k, e, n) for k, (e, n) in sorted(sizes.items())]
    edges = [1, 2, 3, 4, 5]
    while edges[-1] < max(sizes):
        step = edges[-1]
        edges.append(step * 2 if str(step)[0] in "15" else step * 5 // 2)
    out = []
    for lo_edge, hi in zip(edges[:-1], edges[1:]):
        lo = lo_edge + 1
        inside = sorted(k for k in sizes if lo <= k <= hi)
        if not inside:
            continue
        label = str(hi) if lo == hi else f"{lo:,}-{hi:,}"
        counts = [sizes[k] for k in inside]
        out.append((label, inside[0], inside[-1], sum(e for e, _ in counts), sum(n for _, n in counts)))
    return out


def _merges(merges: Any) -> Block:
    """Label merges as the normalise step reports them: ``[{"class": c, "spellings": {s: n}}]``.

    Any other JSON shape is shown as plain text, so a change in the step never breaks the card.
    """
    if not merges:
        return Para(["No label spellings were merged."])
    if isinstance(merges, list) and all(isinstance(m, dict) and {"class", "spellings"} <= m.keys() for m in merges):
        rows = [[m["class"], ", ".join(f"{sp} ({_value(n)})" for sp, n in dict(m["spellings"]).items())] for m in merges]
        return Table(["Class", "Spellings (rows)"], rows, caption="Label spellings merged into each class")
    return Para([_compact(merges)])
