"""`prep compare OLD NEW`: what changed between two versions of a prepared data set.

Reads two prep output folders (their three split files and ``card.json``) and reports:

- class distribution shift per class (counts and shares) and overall, as the Jensen-Shannon
  distance (base 2, so 0 = same distribution, 1 = disjoint; Lin 1991, the distance being the
  square root of the divergence, as ``scipy.spatial.distance.jensenshannon`` returns it),
  over all rows and per split; new and vanished classes;
- the language mix shift (JS distance over the ``language`` column) when both versions have one;
- the text length shift: characters of the text columns joined, quantiles and means, and the
  two-sample Kolmogorov-Smirnov statistic (scipy);
- rows whose split changed (by ``row_id``), rows only in the new version, rows no longer in a split;
- cross-version leakage: rows of the new validation and test splits that are near duplicates
  (or exact copies) of a row of the old train split, counted with :mod:`prep.neardup`.

Outputs: ``compare.json`` (sorted keys, deterministic: same two folders, same bytes) and
``compare.html`` (self-contained, inline SVG bars, every value escaped), plus a short summary for
the terminal. Only counts, shares, class and language names and row ids appear; never a text.
"""

from __future__ import annotations

import html
import json
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl

from prep.errors import InputError

SPLITS = ("train", "validation", "test")
COMPARE_VERSION = "1.0"
DECIMALS = 6
LENGTH_QUANTILES = (0.1, 0.5, 0.9)
MOVED_EXAMPLES = 20            # row ids of moved rows listed in compare.json (provenance, not text)
LEAKAGE_THRESHOLD = 0.8        # Jaccard of character shingles, the near_duplicates step's default


def js_distance(p: dict[str, float], q: dict[str, float]) -> float:
    """Jensen-Shannon distance (base 2) between two count or share mappings over the union of keys."""
    from scipy.spatial.distance import jensenshannon

    keys = sorted(set(p) | set(q), key=str)
    a = np.array([float(p.get(k, 0)) for k in keys])
    b = np.array([float(q.get(k, 0)) for k in keys])
    if a.sum() == 0 or b.sum() == 0:
        return 0.0 if a.sum() == b.sum() else 1.0
    return round(float(jensenshannon(a, b, base=2)), DECIMALS)


def _read_version(folder: Path, shown: str) -> tuple[dict[str, pl.DataFrame], dict[str, Any]]:
    if not folder.is_dir():
        raise InputError("is not a folder; give two prep output folders.", file=shown)
    card_path = folder / "card.json"
    if not card_path.is_file():
        raise InputError("has no card.json; is it a prep output folder?", file=shown)
    try:
        card = json.loads(card_path.read_text("utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise InputError("card.json is not valid JSON.", file=f"{shown}/card.json") from exc
    splits = {}
    for name in SPLITS:
        path = folder / f"{name}.parquet"
        if not path.is_file():
            raise InputError(f"has no {name}.parquet; is it a prep output folder?", file=shown)
        try:
            splits[name] = pl.read_parquet(path)
        except Exception as exc:  # polars/pyarrow errors, translated at the reading boundary
            raise InputError(f"cannot read this split file ({type(exc).__name__}).", file=f"{shown}/{name}.parquet") from exc
    return splits, card


def _label_and_text(card: dict[str, Any], shown: str) -> tuple[str, list[str]]:
    task = card.get("task") or {}
    label = task.get("label_column")
    text = task.get("text_columns")
    if not isinstance(label, str) or not isinstance(text, list):
        raise InputError("card.json does not name the label and text columns.", file=f"{shown}/card.json")
    return label, [str(t) for t in text]


def _counts(frame: pl.DataFrame, column: str) -> dict[str, int]:
    if column not in frame.columns or frame.height == 0:
        return {}
    rows = frame.group_by(column).len().iter_rows()
    return {("(missing)" if k is None else str(k)): int(n) for k, n in rows}


def _all(splits: dict[str, pl.DataFrame]) -> pl.DataFrame:
    return pl.concat([f for f in splits.values()], how="diagonal_relaxed")


def _shares(counts: dict[str, int]) -> dict[str, float]:
    total = sum(counts.values())
    return {k: round(v / total, DECIMALS) if total else 0.0 for k, v in counts.items()}


def _class_shift(old: dict[str, pl.DataFrame], new: dict[str, pl.DataFrame], label: str) -> dict[str, Any]:
    old_all, new_all = _counts(_all(old), label), _counts(_all(new), label)
    old_share, new_share = _shares(old_all), _shares(new_all)
    per_class = []
    for k in sorted(set(old_all) | set(new_all)):
        per_class.append({
            "class": k, "old_rows": old_all.get(k, 0), "new_rows": new_all.get(k, 0),
            "old_share": old_share.get(k, 0.0), "new_share": new_share.get(k, 0.0),
            "share_change": round(new_share.get(k, 0.0) - old_share.get(k, 0.0), DECIMALS),
        })
    return {
        "js_distance": js_distance(old_all, new_all),
        "js_distance_per_split": {s: js_distance(_counts(old[s], label), _counts(new[s], label)) for s in SPLITS},
        "per_class": per_class,
        "new_classes": sorted(set(new_all) - set(old_all)),
        "vanished_classes": sorted(set(old_all) - set(new_all)),
    }


def _language_shift(old: dict[str, pl.DataFrame], new: dict[str, pl.DataFrame]) -> dict[str, Any]:
    if not all("language" in f.columns for f in [*old.values(), *new.values()]):
        return {"available": False, "reason": "a version has no `language` column (the language step did not run)."}
    a, b = _counts(_all(old), "language"), _counts(_all(new), "language")
    sa, sb = _shares(a), _shares(b)
    return {
        "available": True,
        "js_distance": js_distance(a, b),
        "per_language": [{"language": k, "old_share": sa.get(k, 0.0), "new_share": sb.get(k, 0.0)}
                         for k in sorted(set(a) | set(b))],
    }


def _lengths(splits: dict[str, pl.DataFrame], text: list[str]) -> np.ndarray:
    frame = _all(splits)
    present = [c for c in text if c in frame.columns]
    if not present or frame.height == 0:
        return np.zeros(0)
    joined = pl.concat_str([pl.col(c).cast(pl.String).fill_null("") for c in present], separator="\n")
    return frame.select(joined.str.len_chars()).to_series().to_numpy().astype(np.float64)


def _length_shift(old: dict[str, pl.DataFrame], new: dict[str, pl.DataFrame], text: list[str]) -> dict[str, Any]:
    from scipy.stats import ks_2samp

    a, b = _lengths(old, text), _lengths(new, text)

    def summary(x: np.ndarray) -> dict[str, Any]:
        if x.size == 0:
            return {"rows": 0, "mean": None, **{f"q{int(q * 100)}": None for q in LENGTH_QUANTILES}}
        return {"rows": int(x.size), "mean": round(float(x.mean()), 2),
                **{f"q{int(q * 100)}": float(np.quantile(x, q)) for q in LENGTH_QUANTILES}}

    ks = round(float(ks_2samp(a, b).statistic), DECIMALS) if a.size and b.size else None
    return {"unit": "characters of the text columns joined", "old": summary(a), "new": summary(b), "ks_statistic": ks}


def _moves(old: dict[str, pl.DataFrame], new: dict[str, pl.DataFrame]) -> dict[str, Any]:
    def ids(splits):
        return pl.concat([f.select(pl.col("row_id").cast(pl.String), pl.lit(s).alias("split")) for s, f in splits.items()])

    a, b = ids(old).rename({"split": "old"}), ids(new).rename({"split": "new"})
    both = a.join(b, on="row_id", how="full", coalesce=True).sort("row_id")
    moved = both.filter(pl.col("old").is_not_null() & pl.col("new").is_not_null() & (pl.col("old") != pl.col("new")))
    transitions = {f"{o}->{n}": int(k) for o, n, k in moved.group_by("old", "new").len().sort("old", "new").iter_rows()}
    return {
        "rows_in_both": int(both.filter(pl.col("old").is_not_null() & pl.col("new").is_not_null()).height),
        "moved": moved.height,
        "transitions": transitions,
        "moved_examples": moved.get_column("row_id").head(MOVED_EXAMPLES).to_list(),
        "added": int(both.filter(pl.col("old").is_null()).height),
        "added_per_split": {s: int(both.filter(pl.col("old").is_null() & (pl.col("new") == s)).height) for s in SPLITS},
        "removed": int(both.filter(pl.col("new").is_null()).height),
    }


def _leakage(old: dict[str, pl.DataFrame], new: dict[str, pl.DataFrame], text: list[str]) -> dict[str, Any]:
    from prep.neardup.audit import leakage_audit
    from prep.neardup.search import Settings

    settings = Settings(threshold=LEAKAGE_THRESHOLD)
    result: dict[str, Any] = {"threshold": LEAKAGE_THRESHOLD, "similarity": "jaccard of character shingles",
                              "rows": {}, "pairs": {}}
    for name in ("validation", "test"):
        audit = leakage_audit({"train": old["train"], "validation": new[name]}, text, settings)
        result["method"] = audit["method"]
        result["rows"][name] = audit["rows"]["validation"]
        result["pairs"][name] = audit["pairs"]["validation~train"]
    return result


def compare(old_folder: Path, new_folder: Path, *, old_shown: str | None = None, new_shown: str | None = None) -> dict[str, Any]:
    """The comparison of two output folders as a JSON-safe dict (see the module docstring)."""
    old_shown = old_shown or str(old_folder)
    new_shown = new_shown or str(new_folder)
    old, old_card = _read_version(Path(old_folder), old_shown)
    new, new_card = _read_version(Path(new_folder), new_shown)
    label, text = _label_and_text(new_card, new_shown)
    old_label, old_text = _label_and_text(old_card, old_shown)
    for name in SPLITS:
        for splits, shown in ((old, old_shown), (new, new_shown)):
            if "row_id" not in splits[name].columns:
                raise InputError("has no `row_id` column.", file=f"{shown}/{name}.parquet")
    classes = _class_shift(old, new, label)
    moves = _moves(old, new)
    lengths = _length_shift(old, new, text)
    result = {
        "compare_version": COMPARE_VERSION,
        "old": {"folder": Path(old_folder).name, "rows": {s: old[s].height for s in SPLITS}, "dataset": old_card.get("dataset")},
        "new": {"folder": Path(new_folder).name, "rows": {s: new[s].height for s in SPLITS}, "dataset": new_card.get("dataset")},
        "label": label,
        "text": text,
        "columns_changed": label != old_label or text != old_text,
        "classes": classes,
        "languages": _language_shift(old, new),
        "text_length": lengths,
        "splits": moves,
        "leakage": _leakage(old, new, text),
    }
    result["identical"] = (
        classes["js_distance"] == 0 and not classes["new_classes"] and not classes["vanished_classes"]
        and moves["moved"] == 0 and moves["added"] == 0 and moves["removed"] == 0
        and lengths["ks_statistic"] in (0.0, None)
        and all(_frames_equal(old[s], new[s]) for s in SPLITS)
    )
    return result


def _frames_equal(a: pl.DataFrame, b: pl.DataFrame) -> bool:
    return a.columns == b.columns and a.schema == b.schema and a.equals(b)


def summary_lines(result: dict[str, Any]) -> list[str]:
    """A few lines for the terminal."""
    c, s, leak = result["classes"], result["splits"], result["leakage"]
    old_rows, new_rows = sum(result["old"]["rows"].values()), sum(result["new"]["rows"].values())
    lines = [
        f"rows in splits: {old_rows:,} -> {new_rows:,} ({s['added']:,} new, {s['removed']:,} no longer in a split)"
        + (" — identical" if result["identical"] else ""),
        f"class shift: Jensen-Shannon distance {c['js_distance']:.4f}"
        + (f"; new classes: {', '.join(c['new_classes'])}" if c["new_classes"] else "")
        + (f"; vanished classes: {', '.join(c['vanished_classes'])}" if c["vanished_classes"] else ""),
    ]
    lang = result["languages"]
    lines.append(f"language shift: Jensen-Shannon distance {lang['js_distance']:.4f}" if lang["available"]
                 else "language shift: not available (no `language` column)")
    t = result["text_length"]
    if t["ks_statistic"] is not None:
        lines.append(f"text length: median {t['old']['q50']:g} -> {t['new']['q50']:g} characters, KS statistic {t['ks_statistic']:.4f}")
    lines.append(f"rows whose split changed: {s['moved']:,}"
                 + (f" ({', '.join(f'{k} {v:,}' for k, v in s['transitions'].items())})" if s["transitions"] else ""))
    lines.append(f"new validation/test rows near-duplicating an old train row: validation {leak['rows']['validation']:,}, "
                 f"test {leak['rows']['test']:,} (threshold {leak['threshold']})")
    return lines


# --- HTML ------------------------------------------------------------------------------------------


def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _bars(rows: list[tuple[str, float, float]], title: str) -> str:
    """Inline SVG: per item, two bars (old, new) of its share."""
    if not rows:
        return ""
    width, label_w, bar_w, h = 640, 200, 400, 14
    height = len(rows) * (2 * h + 8) + 30
    top = max([1e-9] + [max(a, b) for _, a, b in rows])
    parts = [f'<svg role="img" aria-label="{_e(title)}" width="{width}" height="{height}" xmlns="http://www.w3.org/2000/svg">',
             f'<title>{_e(title)}</title>']
    y = 10
    for name, a, b in rows:
        parts.append(f'<text x="0" y="{y + h}" font-size="12">{_e(name)}</text>')
        for value, colour, tag in ((a, "#8c8c8c", "old"), (b, "#1f6fb2", "new")):
            w = bar_w * value / top
            parts.append(f'<rect x="{label_w}" y="{y}" width="{w:.1f}" height="{h - 2}" fill="{colour}"><title>{tag} {value:.2%}</title></rect>')
            parts.append(f'<text x="{label_w + w + 4:.1f}" y="{y + h - 3}" font-size="11">{tag} {value:.1%}</text>')
            y += h
        y += 8
    parts.append("</svg>")
    return "".join(parts)


def _table(head: list[str], rows: list[list[Any]]) -> str:
    th = "".join(f"<th>{_e(h)}</th>" for h in head)
    body = "".join("<tr>" + "".join(f"<td>{_e(v)}</td>" for v in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>"


def render_html(result: dict[str, Any]) -> str:
    """A self-contained page saying what compare.json says."""
    c, s, t, leak, lang = result["classes"], result["splits"], result["text_length"], result["leakage"], result["languages"]
    title = f"prep compare: {result['old']['folder']} → {result['new']['folder']}"
    out = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">', f"<title>{_e(title)}</title>",
        "<style>body{font-family:system-ui,sans-serif;max-width:60rem;margin:2rem auto;padding:0 1rem;line-height:1.4}"
        "table{border-collapse:collapse;margin:1rem 0}td,th{border:1px solid #ccc;padding:.2rem .5rem;text-align:left}"
        "td:not(:first-child){text-align:right}</style></head><body>",
        f"<h1>{_e(title)}</h1>",
        "<ul>" + "".join(f"<li>{_e(line)}</li>" for line in summary_lines(result)) + "</ul>",
        "<h2>Rows per split</h2>",
        _table(["Split", "Old", "New", "New rows"], [[n, result["old"]["rows"][n], result["new"]["rows"][n], s["added_per_split"][n]] for n in SPLITS]),
        "<h2>Class distribution</h2>",
        f"<p>Jensen-Shannon distance (base 2): {c['js_distance']:.4f} over all rows; per split: "
        + _e(", ".join(f"{k} {v:.4f}" for k, v in c["js_distance_per_split"].items())) + ".</p>",
        _bars([(r["class"], r["old_share"], r["new_share"]) for r in c["per_class"]], "Class shares, old and new"),
        _table(["Class", "Old rows", "New rows", "Old share", "New share", "Change"],
               [[r["class"], r["old_rows"], r["new_rows"], f"{r['old_share']:.2%}", f"{r['new_share']:.2%}", f"{r['share_change']:+.2%}"]
                for r in c["per_class"]]),
        f"<p>New classes: {_e(', '.join(c['new_classes']) or 'none')}. Vanished classes: {_e(', '.join(c['vanished_classes']) or 'none')}.</p>",
        "<h2>Languages</h2>",
    ]
    if lang["available"]:
        out.append(f"<p>Jensen-Shannon distance: {lang['js_distance']:.4f}.</p>")
        out.append(_bars([(r["language"], r["old_share"], r["new_share"]) for r in lang["per_language"]], "Language shares, old and new"))
    else:
        out.append(f"<p>Not available: {_e(lang['reason'])}</p>")
    out += [
        "<h2>Text length</h2>",
        _table(["Version", "Rows", "Mean", "10%", "Median", "90%"],
               [[v, t[v]["rows"], t[v]["mean"], t[v]["q10"], t[v]["q50"], t[v]["q90"]] for v in ("old", "new")]),
        f"<p>Unit: {_e(t['unit'])}. Two-sample Kolmogorov-Smirnov statistic: {_e(t['ks_statistic'])}.</p>",
        "<h2>Rows whose split changed</h2>",
        f"<p>{s['moved']:,} of the {s['rows_in_both']:,} rows present in both versions changed split; "
        f"{s['added']:,} rows are new; {s['removed']:,} are no longer in a split.</p>",
        _table(["From -> to", "Rows"], [[k, v] for k, v in s["transitions"].items()]) if s["transitions"] else "",
        "<h2>Cross-version leakage</h2>",
        f"<p>Rows of the new validation and test splits that are exact or near duplicates (Jaccard of character "
        f"shingles at least {leak['threshold']}, method {_e(leak.get('method'))}) of a row in the old train split: "
        f"validation {leak['rows']['validation']:,}, test {leak['rows']['test']:,}. A model trained on the old "
        "train split has seen these texts.</p>",
        "</body></html>",
    ]
    return "\n".join(part for part in out if part) + "\n"


def write(result: dict[str, Any], folder: Path) -> list[Path]:
    """Write compare.json and compare.html into ``folder`` (created if needed)."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = [folder / "compare.json", folder / "compare.html"]
    paths[0].write_text(json.dumps(result, indent=2, sort_keys=True, ensure_ascii=False) + "\n", encoding="utf-8")
    paths[1].write_text(render_html(result), encoding="utf-8")
    return paths
