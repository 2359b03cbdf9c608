"""Did a policy change how many get through, or only how many are found? A test on the days, not a tolerance.

Crossings per day (truth) and detections per day (observed) are compared
between two windows. Days of one run are correlated (people learn, weather
persists), so the days are grouped into blocks of a week and each block's mean
is one observation: the method of batch means for simulation output (Law,
Simulation Modeling and Analysis, 5th ed., section 9.5.3; from memory). Windows
shorter than two weeks fall back to single days, with a note.

Between two runs with the same seed (common random numbers) block r of one is
paired with block r of the other, and the mean difference gets a paired
Student-t interval and test; otherwise (before and after a day of one run, or
runs of different seeds) the two sets of blocks are compared by Welch's t-test.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special  # t quantiles and tails without scipy.stats's import cost

TRUTH, OBSERVED = "truth", "observed"
BLOCK_DAYS = 7
CONFIDENCE = 0.95
FEW_BLOCKS = 4  # fewer means than this leave a t-test little power (common practice, no source)


@dataclass(frozen=True)
class RateChange:
    """A rate per day in two windows, the difference (after - before), its interval and the test's p-value."""

    measure: str
    source: str
    before: float
    after: float
    difference: float
    low: float
    high: float
    p_value: float
    blocks: int  # observations per window (weeks, or days for short windows)
    block_days: int
    paired: bool

    @property
    def relative(self) -> float | None:
        """after / before - 1; None when the rate was zero before."""
        return self.after / self.before - 1 if self.before else None

    @property
    def direction(self) -> int:
        """+1 when the interval of the difference lies above zero, -1 below, 0 when it holds zero."""
        return 1 if self.low > 0 else (-1 if self.high < 0 else 0)

    def describe(self) -> str:
        """E.g. "crossings per day 10.00 -> 4.00, difference -6.00 (95% interval -6.9 to -5.1, p < 0.001)"."""
        test = "paired t-test" if self.paired else "Welch t-test"
        unit = "weekly" if self.block_days == BLOCK_DAYS else "daily"
        interval = f"{CONFIDENCE:.0%} interval {self.low:+.2f} to {self.high:+.2f}"
        few = f"; only {self.blocks} means, a weak test" if self.blocks < FEW_BLOCKS else ""
        return (f"{self.measure.replace('_', ' ')} {self.before:.2f} -> {self.after:.2f}, difference "
                f"{self.difference:+.2f} ({interval}, {_p_text(self.p_value)}; {test} on {self.blocks} {unit} means"
                f"{few})")

    def to_dict(self) -> dict[str, Any]:
        return {
            "source": self.source, "before": self.before, "after": self.after, "relative_change": self.relative,
            "difference": self.difference, "difference_low": self.low, "difference_high": self.high,
            "p_value": self.p_value, "blocks": self.blocks, "block_days": self.block_days, "paired": self.paired,
        }


def _p_text(p: float) -> str:
    if not math.isfinite(p):
        return "no test"
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def _blocks(daily: np.ndarray, block_days: int) -> np.ndarray:
    """Means of whole blocks of ``block_days`` days (a last partial block is left out)."""
    whole = daily.size // block_days * block_days
    return daily[:whole].reshape(-1, block_days).mean(axis=1)


def rate_change(
    measure: str, source: str, before: np.ndarray, after: np.ndarray, paired: bool, confidence: float = CONFIDENCE
) -> RateChange:
    """Compare two daily series (one value per day of each window); ``paired`` needs windows of equal length."""
    before, after = np.asarray(before, dtype=float), np.asarray(after, dtype=float)
    block_days = BLOCK_DAYS if min(before.size, after.size) >= 2 * BLOCK_DAYS else 1
    b, a = _blocks(before, block_days), _blocks(after, block_days)
    mean_b, mean_a = float(before.mean()), float(after.mean())
    difference = mean_a - mean_b
    if paired:
        d = a - b
        spread = float(d.std(ddof=1)) if d.size > 1 else math.nan
        dof = d.size - 1
        se = spread / math.sqrt(d.size) if d.size > 1 else math.nan
    else:
        va = float(a.var(ddof=1)) / a.size if a.size > 1 else math.nan
        vb = float(b.var(ddof=1)) / b.size if b.size > 1 else math.nan
        se = math.sqrt(va + vb)
        dof = (va + vb) ** 2 / (va**2 / (a.size - 1) + vb**2 / (b.size - 1)) if va + vb > 0 else math.inf
    if not math.isfinite(se):
        return RateChange(measure, source, mean_b, mean_a, difference, math.nan, math.nan, math.nan,
                          min(a.size, b.size), block_days, paired)
    if se == 0:  # no spread at all: the difference is what it is (synthetic records), zero or not
        p = 1.0 if difference == 0 else 0.0
        return RateChange(measure, source, mean_b, mean_a, difference, difference, difference, p,
                          min(a.size, b.size), block_days, paired)
    t = float(special.stdtrit(dof, 0.5 + confidence / 2))
    p = float(2 * special.stdtr(dof, -abs(difference) / se))
    return RateChange(measure, source, mean_b, mean_a, difference, difference - t * se, difference + t * se, p,
                      min(a.size, b.size), block_days, paired)


@dataclass(frozen=True)
class CrossingsVsDetections:
    """Net effect on crossings (truth) read against the change in detections (observed); see :func:`read_verdict`."""

    crossings: RateChange
    detections: RateChange
    verdict: str
    reason: str

    def to_dict(self) -> dict[str, Any]:
        return {
            "crossings_per_day": self.crossings.to_dict(),
            "detections_per_day": self.detections.to_dict(),
            "confidence": CONFIDENCE,
            "verdict": self.verdict,
            "reason": self.reason,
        }


def read_verdict(crossings: RateChange, detections: RateChange) -> tuple[str, str]:
    """Read the net effect of a policy; returns ``(verdict, reason)``. Checked in this order:

    * ``success``: the interval of the change in crossings per day lies below zero
      (fewer people got through, whatever happened to detections);
    * ``crossings_rose``: it lies above zero;
    * ``displacement``: detections rose (interval above zero) while the change in
      crossings holds zero: more are found but no fewer get through, so the extra
      finds are attempts moved onto the checks' path, not success;
    * ``no_clear_change``: neither moved beyond chance (or only detections fell).
    """
    moved = f"{crossings.describe()}; {detections.describe()}"
    if crossings.direction < 0:
        return "success", f"fewer got through: {moved}"
    if crossings.direction > 0:
        return "crossings_rose", f"more got through: {moved}"
    if detections.direction > 0:
        return "displacement", f"more found but no fewer got through: {moved}"
    return "no_clear_change", f"no change beyond chance: {moved}"


def net_effect(
    crossings: tuple[np.ndarray, np.ndarray], detections: tuple[np.ndarray, np.ndarray], paired: bool
) -> CrossingsVsDetections:
    """The verdict from daily crossings (truth) and detections (observed) of the two windows."""
    c = rate_change("crossings_per_day", TRUTH, *crossings, paired=paired)
    d = rate_change("detections_per_day", OBSERVED, *detections, paired=paired)
    verdict, reason = read_verdict(c, d)
    return CrossingsVsDetections(c, d, verdict, reason)
