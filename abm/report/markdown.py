"""A briefing as Markdown, with its figures as PNG files beside it (``figures/<key>.png``).

Every text is inert: Markdown passes raw HTML through and turns brackets,
bare addresses and emphasis marks into markup, so a name in a world or
experiment file could otherwise become a live link, an image fetched from the
network, or HTML. Each character that can start markup is backslash-escaped
(CommonMark lets any ASCII punctuation be escaped, and shows it as itself), so
no entity such as ``&amp;`` is ever written for a reader to see.
"""

from __future__ import annotations

import re

from .document import Block, Bullets, Document, FigureBlock, Paragraph, Table

FIGURES_DIR = "figures"


_MARKUP = frozenset("\\`*_{}[]<>|!~&@")  # characters that can open markup anywhere in a line
_LINE_START = re.compile(r"^(\s*)(#|[-+=]|\d+[.)])")  # headings, list items, setext underlines


def _e(text: str) -> str:
    """Text shown as itself in any CommonMark or GitHub-flavoured renderer."""
    escaped = "".join(f"\\{ch}" if ch in _MARKUP else ch for ch in str(text))
    escaped = escaped.replace("://", "\\://").replace("www.", "www\\.")  # no bare address becomes a link
    return "\n".join(_LINE_START.sub(_escape_line_start, line) for line in escaped.split("\n"))


def _escape_line_start(match: re.Match[str]) -> str:
    """``# x`` -> ``\\# x``, ``- x`` -> ``\\- x``, ``12. x`` -> ``12\\. x``: the mark is shown, not obeyed."""
    mark = match.group(2)
    return f"{match.group(1)}{mark[:-1]}\\{mark[-1]}"


def _cell(text: str) -> str:
    return "<br>".join(_e(line) for line in str(text).split("\n"))


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
    if document.bottom_line:
        parts += [f"**Bottom line.** {_e(document.bottom_line)}", ""]
    for number, section in enumerate(document.sections, start=1):
        parts += [f"## {number}. {_e(section.title)}", ""]
        for block in section.blocks:
            parts += [_block(block, counter), ""]
    parts += ["---", "", _e(document.footer), ""]
    return "\n".join(parts)
