"""Charts for ``card.html``: inline SVG drawn with matplotlib, from the card dict only.

Each chart function takes the card and returns a :class:`ChartSVG` (the SVG markup, its alt
text and a caption) or None when the card has nothing to draw. The SVG is made to live inside
an HTML page that loads nothing: the XML prolog, DOCTYPE, ``<metadata>`` (which names URLs of
vocabularies) and namespace declarations are removed (the HTML parser puts ``<svg>`` in the SVG
namespace by itself), text is drawn as paths so no font is needed, and the result is checked to
hold no ``http:`` / ``https:`` reference at all.

Deterministic: fixed ``svg.hashsalt``, no date in the metadata, the same rcParams every time,
so the same card gives the same bytes.

matplotlib is imported only when a chart is drawn, with the object-oriented API
(``matplotlib.figure.Figure``), so no GUI backend and no global pyplot state are involved.
"""

from __future__ import annotations

import functools
import io
import json
import re
from dataclasses import dataclass
from typing import Any

from prep.card.document import SPLITS, cluster_size_groups
from prep.errors import PrepError

#: Okabe and Ito's colour-blind safe palette ("Color Universal Design", 2002; values from memory).
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442", "#000000")
SPLIT_COLOURS = {"train": PALETTE[0], "validation": PALETTE[1], "test": PALETTE[2]}

_RC = {
    "svg.hashsalt": "prep-card",     # stable ids inside the SVG
    "svg.fonttype": "path",          # glyphs as paths: no font to load, same look everywhere
    "font.family": "DejaVu Sans",    # ships with matplotlib
    "font.size": 9,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.titlesize": 10,
    "path.simplify": True,
}

WIDTH_IN = 7.0  # figure width in inches; the SVG scales to the page width in the HTML


@dataclass(frozen=True)
class ChartSVG:
    name: str
    svg: str
    alt: str
    caption: str


class ChartError(PrepError):
    """A chart could not be made self-contained (it would reference something outside the page): a bug."""


#: The card sections each chart reads; a chart is drawn again only when they change.
CHART_INPUTS = {
    "class_counts": ("classes",),
    "text_length": ("text_length",),
    "language_mix": ("languages",),
    "missing_values": ("missing_values",),
    "rows_removed": ("set_aside",),
    "cluster_sizes": ("exact_duplicates", "near_duplicates"),
}


def render(name: str, card: dict[str, Any]) -> ChartSVG | None:
    """The chart ``name`` (one of :data:`CHARTS`) for ``card``, or None when there is no data."""
    key = json.dumps({k: card.get(k) for k in CHART_INPUTS[name]}, sort_keys=True, ensure_ascii=False)
    return _render_cached(name, key)


@functools.lru_cache(maxsize=32)
def _render_cached(name: str, inputs: str) -> ChartSVG | None:
    """Drawing is the slow part of rendering a card (about a second a chart): same inputs, same SVG."""
    import matplotlib

    # rcParams apply when artists are created, so the whole drawing runs inside the context.
    with matplotlib.rc_context(_RC):
        return CHARTS[name](json.loads(inputs))


# --- the charts ------------------------------------------------------------------------------


def class_counts(card: dict) -> ChartSVG | None:
    rows = card.get("classes", {}).get("counts") or []
    if not rows:
        return None
    classes = [r["class"] for r in rows]
    fig = _figure(height=0.9 + 0.28 * len(classes))
    axes = fig.subplots(1, 3, sharey=True)
    y = list(range(len(classes)))
    for ax, split in zip(axes, SPLITS):
        values = [r[split] for r in rows]
        ax.barh(y, values, color=SPLIT_COLOURS[split])
        ax.set_title(split)
        ax.set_yticks(y, labels=[_short(c) for c in classes])
        ax.invert_yaxis()
        ax.set_xlabel("rows")
        _label_bars(ax, values)
    _margins(fig, left_labels=[_short(c) for c in classes], wspace=0.12, bottom=0.5)
    largest = max(rows, key=lambda r: (r["total"], r["class"]))
    smallest = min(rows, key=lambda r: (r["total"], r["class"]))
    alt = (
        f"Bar charts of rows per class in train, validation and test for {len(classes)} classes. "
        f"Largest class {largest['class']} with {largest['total']} rows in total, smallest {smallest['class']} "
        f"with {smallest['total']}. The table below gives every count."
    )
    return _finish("class_counts", fig, alt, "Rows per class in each split (each panel has its own scale).")


def text_length(card: dict) -> ChartSVG | None:
    rows = card.get("text_length", {}).get("by_class") or []
    if not rows:
        return None
    stats = [
        {"label": _short(r["class"]), "med": r["median"], "q1": r["p25"], "q3": r["p75"],
         "whislo": r["p10"], "whishi": r["p90"], "mean": r["mean"], "fliers": []}
        for r in rows
    ]
    fig = _figure(height=0.9 + 0.3 * len(rows))
    ax = fig.subplots()
    ax.bxp(stats, orientation="horizontal", showmeans=True, patch_artist=True,
           boxprops={"facecolor": "#cfe3f3", "edgecolor": PALETTE[0]},
           medianprops={"color": PALETTE[5]},
           meanprops={"marker": "D", "markerfacecolor": PALETTE[1], "markeredgecolor": PALETTE[1], "markersize": 4})
    ax.invert_yaxis()
    ax.set_xlabel("characters (all text columns)")
    _margins(fig, left_labels=[s["label"] for s in stats], top=0.15)
    if max(r["p90"] for r in rows) > 10 * max(1, min(r["p10"] for r in rows)):
        ax.set_xscale("log")
    longest = max(rows, key=lambda r: (r["median"], r["class"]))
    shortest = min(rows, key=lambda r: (r["median"], r["class"]))
    alt = (
        f"Box plots of text length in characters for {len(rows)} classes. Longest median: {longest['class']} "
        f"({longest['median']} characters); shortest median: {shortest['class']} ({shortest['median']}). "
        "The table below gives the quantiles."
    )
    return _finish("text_length", fig, alt,
                   "Text length per class: box from the 25% to the 75% quantile, line at the median, "
                   "diamond at the mean, whiskers at 10% and 90%.")


def language_mix(card: dict) -> ChartSVG | None:
    mix = (card.get("languages") or {}).get("mix")
    if not isinstance(mix, dict):
        return None
    by_split = mix.get("by_split") or {}
    totals: dict[str, int] = {}
    for counts in by_split.values():
        for lang, n in counts.items():
            totals[lang] = totals.get(lang, 0) + n
    if not totals:
        return None
    order = sorted(totals, key=lambda lg: (-totals[lg], lg))
    shown = order[:7]
    fig = _figure(height=1.9)
    ax = fig.subplots()
    y = list(range(len(SPLITS)))
    left = [0.0] * len(SPLITS)
    for i, lang in enumerate(shown + (["other"] if len(order) > 7 else [])):
        shares = []
        for split in SPLITS:
            counts = by_split.get(split, {})
            n = sum(counts.get(lg, 0) for lg in order[7:]) if lang == "other" else counts.get(lang, 0)
            total = sum(counts.values())
            shares.append(n / total if total else 0.0)
        ax.barh(y, shares, left=left, color=PALETTE[i % len(PALETTE)], label=lang)
        left = [a + b for a, b in zip(left, shares)]
    ax.set_yticks(y, labels=list(SPLITS))
    ax.invert_yaxis()
    ax.set_xlim(0, 1)
    ax.set_xlabel("share of rows")
    labels = shown + (["other"] if len(order) > 7 else [])
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, fontsize=8)
    _margins(fig, left_labels=list(SPLITS), right_labels=labels, top=0.15)
    top = order[0]
    alt = (
        f"Stacked bars of the share of each language in train, validation and test; {len(order)} languages, "
        f"most frequent {top} ({totals[top]} rows). The table below gives the counts."
    )
    return _finish("language_mix", fig, alt, "Language mix per split (share of rows).")


def missing_values(card: dict) -> ChartSVG | None:
    mv = card.get("missing_values") or {}
    items = mv.get("by_source") or []
    if mv.get("status") != "recorded" or not items:
        return None
    sources = list(dict.fromkeys(r["source"] for r in items))
    columns = list(dict.fromkeys(r["column"] for r in items))
    cell = {(r["source"], r["column"]): r for r in items}
    grid = [[(cell[(s, c)]["missing"] / cell[(s, c)]["rows"]) if (s, c) in cell and cell[(s, c)]["rows"] else 0.0
             for c in columns] for s in sources]
    # Cells drawn as rectangles (vector), not imshow: an embedded raster image would be a
    # data: URL, which the page's content security policy does not load.
    from matplotlib.colors import Normalize
    from matplotlib.patches import Rectangle
    import matplotlib

    cmap = matplotlib.colormaps["Blues"]
    norm = Normalize(0.0, 1.0)
    fig = _figure(height=0.9 + 0.4 * len(sources))
    ax = fig.subplots()
    for i, row in enumerate(grid):
        for j, share in enumerate(row):
            ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, facecolor=cmap(norm(0.05 + 0.9 * share)), edgecolor="white"))
            ax.text(j, i, f"{share:.0%}", ha="center", va="center", color="white" if share > 0.5 else "black", fontsize=8)
    ax.set_xlim(-0.5, len(columns) - 0.5)
    ax.set_ylim(len(sources) - 0.5, -0.5)
    ax.set_xticks(range(len(columns)), labels=[_short(c, 14) for c in columns], rotation=30, ha="right")
    ax.set_yticks(range(len(sources)), labels=[_short(s, 14) for s in sources])
    ax.tick_params(length=0)
    _margins(fig, left_labels=[_short(s, 14) for s in sources], top=0.1,
             bottom=0.3 + 0.5 * _CHAR_IN * max(len(_short(c, 14)) for c in columns))
    for side in ("left", "bottom"):
        ax.spines[side].set_visible(False)
    worst = max(items, key=lambda r: ((r["missing"] / r["rows"]) if r["rows"] else 0.0, r["source"], r["column"]))
    share = worst["missing"] / worst["rows"] if worst["rows"] else 0.0
    alt = (
        f"Heat map of the share of missing cells for {len(sources)} sources and {len(columns)} columns. "
        f"Highest: column {worst['column']} of source {worst['source']}, {share:.0%} missing. "
        "The table below gives the counts."
    )
    return _finish("missing_values", fig, alt, "Share of missing cells by source and column, as read (darker = more missing).")


def rows_removed(card: dict) -> ChartSVG | None:
    by_step = (card.get("set_aside") or {}).get("by_step") or []
    if not by_step:
        return None
    steps = [e["step"] for e in by_step]
    reasons = sorted({r for e in by_step for r in e["by_reason"]})
    fig = _figure(height=0.9 + 0.32 * len(steps))
    ax = fig.subplots()
    y = list(range(len(steps)))
    left = [0] * len(steps)
    for i, reason in enumerate(reasons):
        values = [e["by_reason"].get(reason, 0) for e in by_step]
        ax.barh(y, values, left=left, color=PALETTE[i % len(PALETTE)], label=reason,
                hatch=None if i < len(PALETTE) else "//")
        left = [a + b for a, b in zip(left, values)]
    _label_bars(ax, left)
    ax.set_yticks(y, labels=steps)
    ax.invert_yaxis()
    ax.set_xlabel("rows set aside")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, fontsize=8)
    _margins(fig, left_labels=steps, right_labels=reasons, top=0.15)
    biggest = max(by_step, key=lambda e: (e["rows"], e["step"]))
    alt = (
        f"Stacked bars of rows set aside by each of {len(steps)} steps, coloured by reason; "
        f"{sum(e['rows'] for e in by_step)} rows in total, most by {biggest['step']} ({biggest['rows']}). "
        "The table below gives the counts."
    )
    return _finish("rows_removed", fig, alt, "Rows set aside per step, by reason.")


def duplicate_cluster_sizes(card: dict) -> ChartSVG | None:
    groups = cluster_size_groups(card)
    if not groups:
        return None
    fig = _figure(height=2.4)
    ax = fig.subplots()
    x = list(range(len(groups)))
    exact = [g[3] for g in groups]
    near = [g[4] for g in groups]
    width = 0.4
    ax.bar([i - width / 2 for i in x], exact, width, color=PALETTE[0], label="exact duplicates")
    ax.bar([i + width / 2 for i in x], near, width, color=PALETTE[1], label="near duplicates")
    ax.set_xticks(x, labels=[g[0] for g in groups], rotation=30 if len(groups) > 8 else 0)
    ax.set_xlabel("rows in the cluster")
    ax.set_ylabel("clusters")
    if max(exact + near) > 50 * max(1, min(v for v in exact + near if v > 0)):
        ax.set_yscale("log")
    ax.legend(frameon=False, fontsize=8)
    _margins(fig, left=0.75, top=0.15)
    alt = (
        f"Bar chart of duplicate clusters by size, from {groups[0][1]} to {groups[-1][2]} rows: "
        f"{sum(exact)} exact-duplicate clusters and {sum(near)} near-duplicate clusters. "
        "The table below gives the counts."
    )
    return _finish("cluster_sizes", fig, alt, "Duplicate clusters by size.")


CHARTS = {
    "class_counts": class_counts,
    "text_length": text_length,
    "language_mix": language_mix,
    "missing_values": missing_values,
    "rows_removed": rows_removed,
    "cluster_sizes": duplicate_cluster_sizes,
}


# --- helpers ---------------------------------------------------------------------------------


def _figure(height: float):
    from matplotlib.figure import Figure

    # No layout engine: constrained layout measures every text twice and doubled the time to
    # draw the demo's charts; :func:`_margins` sets the margins from the label lengths instead.
    return Figure(figsize=(WIDTH_IN, max(1.6, min(height, 9.0))))


#: Width of one character of tick-label text at 9 pt DejaVu Sans, in inches (measured roughly
#: on the demo's labels; a little generous so long labels are never cut).
_CHAR_IN = 0.075


def _margins(fig, *, left_labels=(), left: float = 0.35, right: float = 0.25, top: float = 0.35,
             bottom: float = 0.55, right_labels=(), wspace: float | None = None) -> None:
    """Margins in inches, widened for the longest label on the left (and on the right, for a legend)."""
    width, height = fig.get_size_inches()
    left_in = left + _CHAR_IN * max((len(str(t)) for t in left_labels), default=0)
    right_in = right + (0.45 + _CHAR_IN * max((len(str(t)) for t in right_labels), default=0) if right_labels else 0)
    fig.subplots_adjust(
        left=min(0.5, left_in / width), right=1 - min(0.45, right_in / width),
        top=1 - min(0.4, top / height), bottom=min(0.5, bottom / height),
        **({"wspace": wspace} if wspace is not None else {}),
    )


def _short(text: Any, limit: int = 24) -> str:
    """A label that fits: long names are cut with an ellipsis (the table keeps the full name).

    ``$`` is escaped so matplotlib does not read a class name as mathematical text.
    """
    s = str(text).replace("\n", " ")
    s = s if len(s) <= limit else s[: limit - 1] + "…"
    return s.replace("$", r"\$")


def _label_bars(ax, values: list[int]) -> None:
    top = max(values, default=0)
    for i, v in enumerate(values):
        if v:
            ax.text(v + top * 0.01, i, str(v), va="center", fontsize=7)
    if top:
        ax.set_xlim(0, top * 1.18)


_PROLOG = re.compile(r"<\?xml[^>]*\?>\s*|<!DOCTYPE[^>]*>\s*", re.S)
_METADATA = re.compile(r"<metadata>.*?</metadata>\s*", re.S)
_NAMESPACES = re.compile(r'\s+xmlns(?::\w+)?="[^"]*"')
_SIZE = re.compile(r'(<svg[^>]*?)\s+width="[^"]*"\s+height="[^"]*"')


def _finish(name: str, fig, alt: str, caption: str) -> ChartSVG:
    """Save ``fig`` as SVG and make it fit for inlining in a page that loads nothing."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None, "Format": None, "Type": None})
    svg = buf.getvalue()
    svg = _PROLOG.sub("", svg)
    svg = _METADATA.sub("", svg)
    svg = _NAMESPACES.sub("", svg)
    svg = _SIZE.sub(r"\1", svg, count=1)  # the viewBox stays; CSS sets the width
    # Comments carry nothing a reader needs (matplotlib writes its own name and URL there).
    svg = re.sub(r"<!--.*?-->\s*", "", svg, flags=re.S)
    if "http:" in svg or "https:" in svg:
        raise ChartError(f"The chart `{name}` still refers to a URL after cleaning; this is a bug in prep.")
    return ChartSVG(name=name, svg=svg.strip(), alt=alt, caption=caption)
