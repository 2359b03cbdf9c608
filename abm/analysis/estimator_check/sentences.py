"""Words for a briefing: a summary row of the estimator check as a sentence."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import pandas as pd

from .summary import SUMMARY_COLUMNS
from .truth import describe_quantity



def _pct(x: float) -> str:
    """A share as a percentage: whole numbers from 10% up, one decimal below."""
    value = abs(100 * x)
    return f"{value:.0f}" if value >= 9.95 else f"{value:.1f}"


def _signed_pct(x: float) -> str:
    sign = "−" if x < 0 else "+"
    return f"{sign}{_pct(x)}%"


def _conditions(row: Mapping[str, Any], factors: Sequence[str]) -> str:
    parts = []
    for name in factors:
        value = row.get(name)
        if value is None or (isinstance(value, float) and math.isnan(value)):
            continue
        parts.append(f"under {value} behaviour" if name == "behaviour" else f"with {name} = {value}")
    return " ".join(parts)


def bias_sentence(row: Mapping[str, Any] | pd.Series, factors: Sequence[str] | None = None) -> str:
    """One summary row as a sentence, e.g. "Under adaptive behaviour the expansion estimate at 'gate'
    undercounts attempts reaching 'gate' by 23% (95% interval 18–28%) over 10 runs; ..."."""
    row = dict(row)
    if factors is None:
        factors = [k for k in row if k not in SUMMARY_COLUMNS]
    what = describe_quantity(str(row["quantity"]))
    who = str(row.get("label") or row.get("method"))
    where = _conditions(row, factors)
    n = int(row["n"])
    runs = f"{n} run" + ("" if n == 1 else "s")
    confidence = float(row.get("confidence", 0.95))
    conf = f"{100 * confidence:g}%"
    rel, low, high = (float(row[k]) for k in ("relative_bias", "relative_bias_low", "relative_bias_high"))
    head = f"{where} {who}" if where else who
    head = head[0].upper() + head[1:]
    if not math.isfinite(rel):
        body = f"{head} has no relative bias to report on {what} (the truth is zero) over {runs}"
    elif not (math.isfinite(low) and math.isfinite(high)):
        verb = "overcounts" if rel > 0 else "undercounts"
        body = f"{head} {verb} {what} by {_pct(rel)}% over {runs} (too few runs for an interval)"
    elif low > 0 or high < 0:
        verb = "overcounts" if rel > 0 else "undercounts"
        ends = sorted((abs(low), abs(high)))
        body = f"{head} {verb} {what} by {_pct(rel)}% ({conf} interval {_pct(ends[0])}–{_pct(ends[1])}%) over {runs}"
    else:
        body = (
            f"{head} shows no bias distinguishable from zero on {what}: {_signed_pct(rel)} "
            f"({conf} interval {_signed_pct(low)} to {_signed_pct(high)}) over {runs}"
        )
    level = row.get("level")
    if level is not None and math.isfinite(float(level)):
        cov_low, cov_high = float(row["coverage_low"]), float(row["coverage_high"])
        body += (
            f"; its {100 * float(level):g}% intervals covered the truth in {int(row['covered'])} of {n} "
            f"({_pct(float(row['coverage']))}%, {conf} interval {_pct(cov_low)}–{_pct(cov_high)}%)"
        )
    return body + "."


def briefing_sentences(summary: pd.DataFrame) -> list[str]:
    """:func:`bias_sentence` for every row of a summary."""
    factors = summary.attrs.get("factors")
    return [bias_sentence(row, factors) for _, row in summary.iterrows()]
