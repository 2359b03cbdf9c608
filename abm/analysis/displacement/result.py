"""The pieces of a displacement result, and the result itself as a dict, a frame and a readable summary."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import pandas as pd

from ..net_effect import CrossingsVsDetections


TRUTH, OBSERVED = "truth", "observed"
# Share tables, each named by the attempts column it counts by ("option" is point/band/vehicle_class).
DIMENSIONS = ("option", "point", "band", "vehicle_class", "depth")
AREAS = ("response", "buffer", "control")
DIMENSION_WORDS = {"option": "options (point, band and class)", "point": "boarding points", "band": "time bands",
                   "vehicle_class": "vehicle classes", "depth": "depths"}
WEIGHTED_FIGURES = (
    "gross_effect", "net_effect", "success_measure", "buffer_displacement_measure", "wdq", "total_net_effect"
)


@dataclass(frozen=True)
class Window:
    """One side of the comparison: days ``start_day`` (inclusive) to ``end_day`` (exclusive) of a run."""

    run: str
    start_day: int
    end_day: int

    @property
    def days(self) -> int:
        return self.end_day - self.start_day

    def describe(self) -> str:
        return f"{self.run} days {self.start_day}-{self.end_day - 1} ({self.days} days)"

    def to_dict(self) -> dict[str, Any]:
        return {"run": self.run, "start_day": self.start_day, "end_day": self.end_day, "days": self.days}


@dataclass(frozen=True)
class ShareShift:
    """Attempt shares over one dimension in both windows, and the distance between them."""

    dimension: str
    keys: tuple[str, ...]
    before: tuple[float, ...]
    after: tuple[float, ...]
    total_variation: float
    jensen_shannon: float
    source: str = TRUTH

    def to_dict(self) -> dict[str, Any]:
        return {
            "dimension": self.dimension,
            "source": self.source,
            "total_variation": self.total_variation,
            "jensen_shannon": self.jensen_shannon,
            "shares": {k: {"before": b, "after": a} for k, b, a in zip(self.keys, self.before, self.after)},
        }


@dataclass(frozen=True)
class WeightedDisplacement:
    """Bowers & Johnson's measures for one response / buffer / control split (truth attempts, persons).

    ``flag`` is ``ok`` when WDQ could be read, otherwise why not: ``control_empty``
    (no control attempts in a window: no ratio is defined), ``no_buffer`` (no buffer
    options), ``no_success`` (the success measure is zero or positive, so the
    response area did not fall relative to control and WDQ has no reading).
    """

    response_before: int
    response_after: int
    buffer_before: int
    buffer_after: int
    control_before: int
    control_after: int
    gross_effect: int
    net_effect: float | None
    success_measure: float | None
    buffer_displacement_measure: float | None
    wdq: float | None
    total_net_effect: float | None
    flag: str
    note: str
    source: str = TRUTH

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class BeforeAfter:
    """One figure measured in both windows."""

    measure: str
    source: str
    before: float
    after: float

    @property
    def change(self) -> float:
        return self.after - self.before

    def to_dict(self) -> dict[str, Any]:
        return {"source": self.source, "before": self.before, "after": self.after, "change": self.change}


@dataclass(frozen=True)
class DisplacementResult:
    """Every displacement measure of one comparison; ``before`` is the first window, ``after`` the second."""

    design: str
    label: str
    before: Window
    after: Window
    shares: tuple[ShareShift, ...]
    weighted: WeightedDisplacement | None
    areas_from: str
    crossings_vs_detections: CrossingsVsDetections
    attempts_per_day: BeforeAfter
    displaced_out_per_day: BeforeAfter
    hazard_weighted_share: BeforeAfter
    notes: tuple[str, ...] = ()

    def share(self, dimension: str) -> ShareShift:
        """The share shift over ``dimension`` (one of DIMENSIONS)."""
        return next(s for s in self.shares if s.dimension == dimension)

    def to_dict(self) -> dict[str, Any]:
        """A JSON-safe nested dict (no NaN or infinity: undefined figures are None)."""
        data = {
            "design": self.design,
            "label": self.label,
            "before": self.before.to_dict(),
            "after": self.after.to_dict(),
            "shares": [s.to_dict() for s in self.shares],
            "weighted_displacement": self.weighted.to_dict() if self.weighted else None,
            "areas_from": self.areas_from,
            "crossings_vs_detections": self.crossings_vs_detections.to_dict(),
            "attempts_per_day": self.attempts_per_day.to_dict(),
            "displaced_out_per_day": self.displaced_out_per_day.to_dict(),
            "hazard_weighted_share": self.hazard_weighted_share.to_dict(),
            "notes": list(self.notes),
        }
        return _json_safe(data)

    def to_frame(self) -> pd.DataFrame:
        """One row per figure: section, measure, source, before, after, value, note.

        Paired figures fill before and after, and value holds after - before;
        single-valued figures (distances, WDQ measures, relative changes) fill value only.
        """
        rows: list[tuple[Any, ...]] = []

        def add(
            section: str, measure: str, source: str,
            before: Any = None, after: Any = None, value: Any = None, note: str = "",
        ) -> None:
            rows.append((section, measure, source, before, after, value, note))

        for s in self.shares:
            add(f"share.{s.dimension}", "total_variation", s.source, value=s.total_variation)
            add(f"share.{s.dimension}", "jensen_shannon", s.source, value=s.jensen_shannon)
            for key, b, a in zip(s.keys, s.before, s.after):
                add(f"share.{s.dimension}", key, s.source, b, a, a - b)
        if self.weighted is not None:
            w = self.weighted
            for area in AREAS:
                before, after = getattr(w, f"{area}_before"), getattr(w, f"{area}_after")
                add("weighted_displacement", f"{area}_persons", w.source, before, after)
            for name in WEIGHTED_FIGURES:
                flag = w.flag if name == "wdq" else ""
                add("weighted_displacement", name, w.source, value=getattr(w, name), note=flag)
        c = self.crossings_vs_detections
        for rate in (c.crossings, c.detections):
            add("net_effect", rate.measure, rate.source, rate.before, rate.after, rate.difference)
            add("net_effect", f"{rate.measure}_difference_low", rate.source, value=rate.low)
            add("net_effect", f"{rate.measure}_difference_high", rate.source, value=rate.high)
            add("net_effect", f"{rate.measure}_p_value", rate.source, value=rate.p_value)
            add("net_effect", f"{rate.measure}_relative_change", rate.source, value=rate.relative)
        add("net_effect", "verdict", f"{TRUTH}+{OBSERVED}", note=c.verdict)
        for figure in (self.attempts_per_day, self.displaced_out_per_day, self.hazard_weighted_share):
            add("context", figure.measure, figure.source, figure.before, figure.after, figure.change)
        return pd.DataFrame(rows, columns=["section", "measure", "source", "before", "after", "value", "note"])

    def summary(self) -> str:
        """A readable table; every line names its record set (truth / observed)."""
        lines = [
            self.label,
            f"  before: {self.before.describe()}",
            f"  after:  {self.after.describe()}",
            "  How far the pattern of attempts moved: TV (total variation) is the share of attempts that would have",
            "  to move to turn one pattern into the other (0 = the same, 1 = nothing in common); JS (Jensen-Shannon",
            "  distance, 0 to 1) is a smoother reading of the same, less moved by small options.",
            f"  {'attempt share shift':<44}{'TV':>8}{'JS':>8}",
        ]
        for s in self.shares:
            moved = f"{s.total_variation:.0%} of attempts moved to other {DIMENSION_WORDS[s.dimension]}"
            lines.append(f"    {s.dimension:<42}{s.total_variation:>8.3f}{s.jensen_shannon:>8.3f}  {s.source}"
                         f"  ({moved})")
        lines.append(f"  {'shares':<44}{'before':>8}{'after':>8}")
        for s in self.shares:
            if s.dimension == "option":
                continue  # point, band and class lines say where; the option vector is in to_frame()
            for key, b, a in zip(s.keys, s.before, s.after):
                lines.append(f"    {s.dimension + ' ' + key:<42}{b:>8.3f}{a:>8.3f}  {s.source}")
        for figure in (self.attempts_per_day, self.displaced_out_per_day, self.hazard_weighted_share):
            lines.append(_line(figure.measure.replace("_", " "), figure.before, figure.after, figure.source))
        c = self.crossings_vs_detections
        lines.append(_line("crossings per day", c.crossings.before, c.crossings.after, TRUTH))
        lines.append(_line("detections per day", c.detections.before, c.detections.after, OBSERVED))
        lines.append(f"  verdict: {c.verdict.replace('_', ' ')}: {c.reason}  {TRUTH}+{OBSERVED}")
        if self.weighted is None:
            lines.append(f"  weighted displacement quotient: not computed ({self.areas_from})  {TRUTH}")
        else:
            w = self.weighted
            lines.append(f"  weighted displacement ({self.areas_from})")
            for area in AREAS:
                before, after = getattr(w, f"{area}_before"), getattr(w, f"{area}_after")
                lines.append(f"    {area + ' persons':<42}{before:>8,}{after:>8,}  {w.source}")
            for name in WEIGHTED_FIGURES:
                value = getattr(w, name)
                shown = "n/a" if value is None else (f"{value:,}" if isinstance(value, int) else f"{value:,.3f}")
                lines.append(f"    {name.replace('_', ' '):<42}{shown:>16}  {w.source}")
            lines.append(f"    {w.note}")
        lines.extend(f"  note: {n}" for n in self.notes)
        lines.append("  (truth = simulated ground truth; observed = what an agency would hold. Model estimates, not counts.)")
        return "\n".join(lines)


def _line(label: str, before: float, after: float, source: str) -> str:
    """One summary row: label, before, after, record set."""
    return f"  {label:<44}{before:>8.3f}{after:>8.3f}  {source}"


def _json_safe(value: Any) -> Any:
    """Plain JSON types; any non-finite float (none is expected) becomes None rather than invalid JSON."""
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value
