"""A briefing as one self-contained HTML file: inline CSS, figures as base64 PNG data URIs, print styles.

Nothing is fetched: no scripts, fonts, stylesheets or images from elsewhere,
and a Content-Security-Policy that forbids them (images only from ``data:``),
so the file opens offline and a stray piece of markup could not load
anything. Every piece of text is HTML-escaped here.
"""

from __future__ import annotations

import base64
import html
from collections.abc import Mapping
from typing import Any

from .document import Block, Bullets, Cell, Document, FigureBlock, Paragraph, Section, Table

CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'"

CSS = """
:root { --ink: #1a1a1a; --muted: #555; --rule: #bbb; --shade: #f2f2f2; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
       color: var(--ink); background: #fff; line-height: 1.45; margin: 0 auto; max-width: 62rem;
       padding: 1.5rem 1.5rem 3rem; font-size: 16px; }
h1 { font-size: 1.7rem; margin: 0 0 .3rem; }
h2 { font-size: 1.3rem; margin: 2.2rem 0 .6rem; border-bottom: 2px solid var(--ink); padding-bottom: .2rem; }
h3 { font-size: 1.05rem; margin: 1.4rem 0 .4rem; }
.subtitle { color: var(--muted); margin: 0 0 1rem; }
.bottom-line { font-size: 1.08rem; margin: 0 0 1rem; }
.caution { border: 2px solid var(--ink); padding: .6rem .9rem; margin: 1rem 0; }
nav ol { columns: 2; margin: .5rem 0 1rem; padding-left: 1.4rem; }
nav a { color: var(--ink); }
ul.claims li { margin: .35rem 0; }
table { border-collapse: collapse; width: 100%; margin: .6rem 0 .3rem; font-size: .86rem;
        font-variant-numeric: tabular-nums; }
caption { text-align: left; font-weight: 600; padding: .3rem 0; caption-side: top; }
th, td { border: 1px solid var(--rule); padding: .3rem .45rem; vertical-align: top; text-align: right; }
th[scope=col] { background: var(--shade); text-align: center; }
th[scope=row], td.text { text-align: left; }
.sub { display: block; color: var(--muted); font-size: .8rem; }
.note { color: var(--muted); font-size: .84rem; margin: .2rem 0 1rem; }
figure { margin: 1.2rem 0; }
figure img { width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: .88rem; color: var(--muted); margin-top: .3rem; }
footer { margin-top: 3rem; border-top: 1px solid var(--rule); padding-top: .5rem; color: var(--muted);
         font-size: .85rem; }
@media print {
  @page { size: A4; margin: 14mm 12mm; }
  body { max-width: none; padding: 0; font-size: 10pt; }
  nav { display: none; }
  h2 { break-after: avoid; page-break-after: avoid; }
  h3 { break-after: avoid; page-break-after: avoid; }
  table, figure, .caution, ul.claims li { break-inside: avoid; page-break-inside: avoid; }
  figure img { max-height: 120mm; width: auto; max-width: 100%; }
  th[scope=col] { background: none; }
  a { color: inherit; text-decoration: none; }
}
"""


def _e(text: str) -> str:
    return html.escape(str(text), quote=True)


def _data(data: Mapping[str, Any]) -> str:
    """``data-*`` attributes (names lower case, letters, digits and dashes only)."""
    parts = []
    for name, value in data.items():
        safe = "".join(ch if ch.isalnum() or ch == "-" else "-" for ch in str(name).lower())
        parts.append(f' data-{safe}="{_e(value)}"')
    return "".join(parts)


def _lines(text: str) -> str:
    """Text whose first line is the value and later lines a smaller note under it."""
    first, *rest = str(text).split("\n")
    return _e(first) + "".join(f'<span class="sub">{_e(line)}</span>' for line in rest)


def _cell(cell: Cell) -> str:
    if cell.header:
        return f'<th scope="row"{_data(cell.data)}>{_lines(cell.text)}</th>'
    numeric = cell.text[:1].isdigit() or cell.text[:1] in "+\u2212"
    cls = "" if numeric else ' class="text"'
    return f"<td{cls}{_data(cell.data)}>{_lines(cell.text)}</td>"


def _table(table: Table) -> str:
    head = "".join(f'<th scope="col">{_e(c)}</th>' for c in table.columns)
    body = "\n".join("<tr>" + "".join(_cell(c) for c in row) + "</tr>" for row in table.rows)
    note = f'<p class="note">{_e(table.note)}</p>' if table.note else ""
    return (
        f'<table id="t-{_e(table.key)}" data-table="{_e(table.key)}"><caption>{_e(table.caption)}</caption>'
        f"<thead><tr>{head}</tr></thead>\n<tbody>\n{body}\n</tbody></table>{note}"
    )


def _figure(figure: FigureBlock, number: int) -> str:
    data = base64.b64encode(figure.png).decode("ascii")
    return (
        f'<figure id="f-{_e(figure.key)}" data-figure="{_e(figure.key)}">'
        f'<img src="data:image/png;base64,{data}" alt="{_e(figure.alt)}">'
        f"<figcaption><strong>Figure {number}. {_e(figure.title)}.</strong> {_e(figure.caption)}</figcaption></figure>"
    )


def _block(block: Block, counter: list[int]) -> str:
    if isinstance(block, Paragraph):
        lead = f"<strong>{_e(block.lead)}</strong> " if block.lead else ""
        cls = ' class="caution"' if block.lead.lower().startswith("caution") else ""
        return f"<p{cls}>{lead}{_e(block.text)}</p>"
    if isinstance(block, Bullets):
        tag = "ol" if block.ordered else "ul"
        items = "".join(f"<li{_data(i.data)}>{_e(i.text)}</li>" for i in block.items)
        cls = ' class="claims"' if any(i.data for i in block.items) else ""
        return f"<{tag}{cls}>{items}</{tag}>"
    if isinstance(block, Table):
        return _table(block)
    counter[0] += 1
    return _figure(block, counter[0])


def _section(section: Section, number: int, counter: list[int]) -> str:
    body = "\n".join(_block(b, counter) for b in section.blocks)
    return (
        f'<section id="s-{_e(section.key)}" data-section="{_e(section.key)}">'
        f"<h2>{number}. {_e(section.title)}</h2>\n{body}\n</section>"
    )


def render(document: Document) -> str:
    """The whole briefing as an HTML string."""
    counter = [0]
    toc = "".join(
        f'<li><a href="#s-{_e(s.key)}">{_e(s.title)}</a></li>' for s in document.sections
    )
    sections = "\n".join(_section(s, i, counter) for i, s in enumerate(document.sections, start=1))
    bottom = (f'<p class="bottom-line" data-claim="bottom-line"><strong>Bottom line.</strong> '
              f"{_e(document.bottom_line)}</p>" if document.bottom_line else "")
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="{_e(CSP)}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{_e(document.title)}</title>
<style>{CSS}</style>
</head>
<body>
<header><h1>{_e(document.title)}</h1><p class="subtitle">{_e(document.subtitle)}</p>{bottom}</header>
<nav aria-label="Contents"><ol>{toc}</ol></nav>
<main>
{sections}
</main>
<footer>{_e(document.footer)}</footer>
</body>
</html>
"""
