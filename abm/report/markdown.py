"""A briefing as Markdown, with its figures as PNG files beside it (``figures/<key>.png``).

Text is HTML-escaped (Markdown passes raw HTML through, so a name with markup
would otherwise become markup), and table cells also escape ``|``.
"""

from __future__ import annotations

import html

from .document import Block, Bullets, Document, FigureBlock, Paragraph, Table

FIGURES_DIR = "figures"


def _e(text: str) -> str:
    return html.escape(str(text), quote=False)


def _cell(text: str) -> str:
    return "<br>".join(_e(line).replace("|", "\\|") for line in str(text).split("\n"))


def _table(table: Table) -> str:
    lines = [f"**{_e(table.caption)}**", ""]
    lines.append("| " + " | ".join(_cell(c) for c in table.columns) + " |")
    lines.append("|" + "|".join(":---" if i == 0 else "---:" for i in range(len(table.columns))) + "|")
    for row in table.rows:
        lines.append("| " + " | ".join(_cell(c.text) for c in row) + " |")
    if table.note:
        lines += ["", f"*{_e(table.note)}*"]
    return "\n".join(lines)


def figure_path(figure: FigureBlock) -> str:
    """Where a figure's PNG goes, relative to the Markdown file."""
    return f"{FIGURES_DIR}/{figure.key}.png"


def _block(block: Block, counter: list[int]) -> str:
    if isinstance(block, Paragraph):
        return (f"**{_e(block.lead)}** " if block.lead else "") + _e(block.text)
    if isinstance(block, Bullets):
        marks = (f"{i}." for i in range(1, len(block.items) + 1)) if block.ordered else ("-" for _ in block.items)
        return "\n".join(f"{mark} {_e(item.text)}" for mark, item in zip(marks, block.items))
    if isinstance(block, Table):
        return _table(block)
    counter[0] += 1
    return (
        f"![{_e(block.alt)}]({figure_path(block)})\n\n"
        f"*Figure {counter[0]}. {_e(block.title)}.* {_e(block.caption)}"
    )


def render(document: Document) -> str:
    """The whole briefing as Markdown text."""
    counter = [0]
    parts = [f"# {_e(document.title)}", "", _e(document.subtitle), ""]
    for number, section in enumerate(document.sections, start=1):
        parts += [f"## {number}. {_e(section.title)}", ""]
        for block in section.blocks:
            parts += [_block(block, counter), ""]
    parts += ["---", "", _e(document.footer), ""]
    return "\n".join(parts)
