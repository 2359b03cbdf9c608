"""The briefing as plain data, rendered to HTML (:mod:`abm.report.html`) and Markdown (:mod:`abm.report.markdown`).

Blocks hold plain text only: renderers escape it, so text from world and
experiment files (names, notes) can never become markup. Cells and list items
may carry ``data`` (name -> value) that the HTML renderer writes as
``data-*`` attributes, so the numbers behind a formatted cell or a generated
sentence can be read back from the page exactly.

Numbers are formatted here, in one place, so the two renderers agree.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

MINUS = "\u2212"


@dataclass(frozen=True)
class Paragraph:
    text: str
    lead: str = ""  # a few words shown in bold before the text


@dataclass(frozen=True)
class Item:
    text: str
    data: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class Bullets:
    items: tuple[Item, ...]
    ordered: bool = False


@dataclass(frozen=True)
class Cell:
    text: str
    data: Mapping[str, Any] = field(default_factory=dict)
    header: bool = False  # a row header


@dataclass(frozen=True)
class Table:
    key: str  # stable id, e.g. "comparison-adaptive"
    caption: str
    columns: tuple[str, ...]
    rows: tuple[tuple[Cell, ...], ...]
    note: str = ""


@dataclass(frozen=True)
class FigureBlock:
    key: str
    title: str
    caption: str  # states the record set and the number of replications
    png: bytes
    alt: str


Block = Paragraph | Bullets | Table | FigureBlock


@dataclass(frozen=True)
class Section:
    key: str
    title: str
    blocks: tuple[Block, ...]


@dataclass(frozen=True)
class Document:
    title: str
    subtitle: str
    sections: tuple[Section, ...]
    footer: str
    bottom_line: str = ""  # at most three sentences shown before everything else


# -- numbers ------------------------------------------------------------------------------------


def is_number(x: Any) -> bool:
    """True for a finite number."""
    try:
        return x is not None and math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def _digits(kind: str, size: float) -> int:
    if kind in ("percent", "relative"):
        return 2 if size < 1 else (1 if size < 10 else 0)
    return {"index": 3, "hours": 0, "minutes": 1, "rate": 1, "ratio": 2}.get(kind, 0 if size >= 100 else 1)


def number(x: Any, kind: str = "count", signed: bool = False, like: Any = None) -> str:
    """A value as the briefing prints it; ``kind`` as in :class:`abm.report.tables.Measure`.

    count: whole numbers from 100 up, one decimal below; rate and minutes: one
    decimal; percent: a share as a percentage (signed: percentage points, pp);
    relative: a relative change as a percentage; index: three decimals; ratio:
    two; hours: whole hours. Decimals follow the size of ``like`` when given,
    so an interval prints as its mean does. Negative numbers take a true minus
    sign; a value that rounds to zero takes none; n/a for a missing value.
    """
    if not is_number(x):
        return "n/a"
    x = float(x)
    scale = 100 if kind in ("percent", "relative") else 1
    suffix = " pp" if kind == "percent" and signed else ("%" if kind in ("percent", "relative") else "")
    size = abs(scale * float(like)) if is_number(like) else abs(scale * x)
    value = scale * x
    text = f"{abs(value):,.{_digits(kind, size)}f}"
    if float(text.replace(",", "")) == 0:
        return f"{text}{suffix}"
    sign = MINUS if value < 0 else ("+" if signed else "")
    return f"{sign}{text}{suffix}"


def interval(low: Any, high: Any, kind: str = "count", signed: bool = False, like: Any = None) -> str:
    """An interval as "a to b" (with "to", so minus signs never read as a dash)."""
    if not (is_number(low) and is_number(high)):
        return "no interval"
    return f"{_end(low, kind, signed, like)} to {_end(high, kind, signed, like)}"


def _end(x: Any, kind: str, signed: bool, like: Any) -> str:
    """An interval's end as :func:`number` prints it, but one that is not zero never prints as zero: it gets
    one significant digit more than it would, so "+0.0002 to +0.094" does not read as an interval touching zero."""
    text = number(x, kind, signed, like)
    if float(x) == 0 or any(c in "123456789" for c in text):
        return text
    scale = 100 if kind in ("percent", "relative") else 1
    digits = max(0, -math.floor(math.log10(abs(scale * float(x)))))
    suffix = " pp" if kind == "percent" and signed else ("%" if kind in ("percent", "relative") else "")
    sign = MINUS if x < 0 else ("+" if signed else "")
    return f"{sign}{abs(scale * float(x)):.{digits}f}{suffix}"


def with_interval(value: Any, low: Any, high: Any, kind: str = "count", signed: bool = False, pct: str = "95%") -> str:
    """ "96.2 (95% interval 79.3 to 113.1)" """
    if not is_number(value):
        return "n/a"
    if not (is_number(low) and is_number(high)):
        return f"{number(value, kind, signed)} (too few runs for an interval)"
    return f"{number(value, kind, signed)} ({pct} interval {interval(low, high, kind, signed, like=value)})"


def excludes_zero(low: Any, high: Any) -> bool:
    """True when an interval lies wholly on one side of zero."""
    return is_number(low) and is_number(high) and (float(low) > 0 or float(high) < 0)
