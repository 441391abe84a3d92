"""The card dict -> ``card.html``: one self-contained page for people.

The page says what ``card.md`` says (both render :mod:`prep.card.document`) and adds charts
where a picture reads faster than a table. It loads nothing: styles are inline, charts are
inline SVG (:mod:`prep.card.charts`), there are no scripts, fonts or images from elsewhere, and
the only links are to anchors in the page itself.

Accessibility and layout: ``lang="en"``, one ``h1``, sections with ``h2``/``h3``, real
``<table>`` elements with ``<caption>`` and ``<th scope>``, every chart a ``<figure>`` whose
``<svg role="img">`` carries an ``aria-label`` (its alt text) and a ``<title>``, and a
``<figcaption>``. Wide tables scroll inside their own box on a narrow screen; charts scale to
the page width; print styles avoid breaking a figure or a table row across pages.

Same card, same bytes (charts are deterministic; no time, no locale).
"""

from __future__ import annotations

import html
from typing import Any

from prep.card import charts
from prep.card.document import (
    NOT_PROVIDED,
    Bullets,
    Chart,
    Code,
    Fields,
    Heading,
    Para,
    Quote,
    Strong,
    Table,
    build_document,
)

__all__ = ["render_html"]

_CSS = """
:root { --ink: #1d1d1f; --muted: #5b5b66; --rule: #d9dbe1; --band: #f4f6f9; --accent: #0a5c99; }
* { box-sizing: border-box; }
html { -webkit-text-size-adjust: 100%; }
body { margin: 0; color: var(--ink); background: #fff;
  font: 16px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 72rem; margin: 0 auto; padding: 1rem 1.25rem 3rem; }
h1 { font-size: 1.7rem; line-height: 1.2; margin: 0.5rem 0 0.25rem; }
h2 { font-size: 1.35rem; margin: 2.2rem 0 0.6rem; padding-top: 0.4rem; border-top: 2px solid var(--rule); }
h3 { font-size: 1.08rem; margin: 1.6rem 0 0.4rem; }
p { margin: 0.5rem 0; }
.intro { color: var(--muted); }
nav ol { margin: 0.5rem 0; padding-left: 1.4rem; columns: 2 14rem; }
a { color: var(--accent); }
code { font: 0.86em/1.3 ui-monospace, "SFMono-Regular", Menlo, Consolas, "DejaVu Sans Mono", monospace;
  background: var(--band); padding: 0.05em 0.25em; border-radius: 3px; overflow-wrap: anywhere; }
dl.fields { display: grid; grid-template-columns: minmax(8rem, max-content) 1fr; gap: 0.2rem 1rem; margin: 0.6rem 0; }
dl.fields dt { font-weight: 600; }
dl.fields dd { margin: 0; overflow-wrap: anywhere; }
.absent { color: var(--muted); font-style: italic; }
.table-wrap { overflow-x: auto; margin: 0.6rem 0 1rem; border: 1px solid var(--rule); border-radius: 4px; }
table { border-collapse: collapse; width: 100%; font-size: 0.88rem; }
caption { text-align: left; font-weight: 600; padding: 0.45rem 0.6rem; background: var(--band); }
th, td { padding: 0.3rem 0.6rem; border-top: 1px solid var(--rule); text-align: left; vertical-align: top; }
thead th { background: var(--band); border-top: none; white-space: nowrap; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: 1rem 0; }
figure svg { width: 100%; height: auto; display: block; }
figcaption { color: var(--muted); font-size: 0.88rem; margin-top: 0.3rem; }
blockquote { margin: 0.8rem 0; padding: 0.5rem 0.9rem; border-left: 4px solid #c77700; background: #fff7e8; }
ul { padding-left: 1.3rem; }
@media (max-width: 40rem) {
  body { font-size: 15px; }
  main { padding: 0.6rem 0.7rem 2rem; }
  dl.fields { grid-template-columns: 1fr; }
  dl.fields dd { margin-bottom: 0.35rem; }
  nav ol { columns: 1; }
}
@media print {
  body { font-size: 10.5pt; }
  main { max-width: none; padding: 0; }
  nav { display: none; }
  a { color: inherit; text-decoration: none; }
  h2, h3 { break-after: avoid; }
  figure, tr, blockquote { break-inside: avoid; }
  .table-wrap { overflow: visible; border: none; }
  thead { display: table-header-group; }
}
""".strip()


def render_html(card: dict[str, Any]) -> str:
    """The HTML page for ``card`` (a dict as :func:`prep.card.build_card` returns)."""
    title, intro, sections = build_document(card)
    out = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        # Belt and braces: even if a value slipped through, the page may not load anything.
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src 'unsafe-inline'\">",
        f"<title>{_e(title)}</title>",
        f"<style>\n{_CSS}\n</style>",
        "</head>",
        "<body>",
        "<main>",
        f"<h1>{_e(title)}</h1>",
    ]
    out += [f'<p class="intro">{_inline(p)}</p>' for p in intro]
    out.append('<nav aria-label="Contents"><ol>')
    out += [f'<li><a href="#{s.anchor}">{_e(s.title)}</a></li>' for s in sections]
    out.append("</ol></nav>")
    used: set[str] = {s.anchor for s in sections}
    for section in sections:
        out.append(f'<section aria-labelledby="{section.anchor}">')
        out.append(f'<h2 id="{section.anchor}">{_e(section.title)}</h2>')
        for block in section.blocks:
            rendered = _block(block, card, used)
            if rendered:
                out.append(rendered)
        out.append("</section>")
    out += ["</main>", "</body>", "</html>"]
    return "\n".join(out) + "\n"


def _block(block: Any, card: dict, used: set[str]) -> str | None:
    if isinstance(block, Para):
        return f"<p>{_inline(block.parts)}</p>"
    if isinstance(block, Heading):
        anchor = _unique(block.anchor, used)
        return f'<h3 id="{anchor}">{_e(block.text)}</h3>'
    if isinstance(block, Fields):
        items = []
        for label, value in block.pairs:
            shown = f'<span class="absent">{NOT_PROVIDED}</span>' if value is None else _inline(value)
            items.append(f"<dt>{_e(label)}</dt><dd>{shown}</dd>")
        return '<dl class="fields">' + "".join(items) + "</dl>"
    if isinstance(block, Table):
        return _table(block)
    if isinstance(block, Bullets):
        return "<ul>" + "".join(f"<li>{_inline(item)}</li>" for item in block.items) + "</ul>"
    if isinstance(block, Quote):
        return f"<blockquote><p>{_inline(block.parts)}</p></blockquote>"
    if isinstance(block, Chart):
        return _chart(block.name, card, used)
    raise TypeError(f"unknown block {type(block).__name__}")


def _chart(name: str, card: dict, used: set[str]) -> str | None:
    chart = charts.render(name, card)
    if chart is None:
        return None
    anchor = _unique(f"chart-{name.replace('_', '-')}", used)
    # role="img" makes the SVG one image for assistive technology; aria-label is its alt text,
    # and <title> repeats it as the SVG's own accessible name (and a tooltip).
    svg = chart.svg.replace(
        "<svg",
        f'<svg role="img" aria-label="{_e(chart.alt)}" aria-describedby="{anchor}-caption"',
        1,
    )
    close = svg.index(">", svg.index("<svg")) + 1
    svg = svg[:close] + f"<title>{_e(chart.alt)}</title>" + svg[close:]
    return f'<figure id="{anchor}">{svg}<figcaption id="{anchor}-caption">{_e(chart.caption)}</figcaption></figure>'


def _table(t: Table) -> str:
    if not t.rows:
        return f"<p>{_e(t.empty)}</p>"
    head = "".join(
        f'<th scope="col"{_num_class(i, t)}>{_e(h)}</th>' for i, h in enumerate(t.header)
    )
    body = []
    for row in t.rows:
        cells = []
        for i, value in enumerate(row):
            content = _inline(value if isinstance(value, list) else [value])
            if i == 0:
                cells.append(f'<th scope="row"{_num_class(i, t)}>{content}</th>')
            else:
                cells.append(f"<td{_num_class(i, t)}>{content}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (
        '<div class="table-wrap"><table>'
        f"<caption>{_e(t.caption)}</caption>"
        f"<thead><tr>{head}</tr></thead>"
        f"<tbody>{''.join(body)}</tbody>"
        "</table></div>"
    )


def _num_class(i: int, t: Table) -> str:
    return ' class="num"' if i in t.numeric else ""


def _inline(parts: list) -> str:
    out = []
    for part in parts:
        if part is None:
            out.append("–")
        elif isinstance(part, Code):
            out.append(f"<code>{_e(part)}</code>")
        elif isinstance(part, Strong):
            out.append(f"<strong>{_e(part)}</strong>")
        else:
            out.append(_e(part))
    return "".join(out)


def _e(text: Any) -> str:
    """Text escaped for HTML content and double-quoted attributes."""
    return html.escape(str(text), quote=True)


def _unique(anchor: str, used: set[str]) -> str:
    candidate, n = anchor, 2
    while candidate in used:
        candidate, n = f"{anchor}-{n}", n + 1
    used.add(candidate)
    return candidate
