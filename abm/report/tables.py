"""The briefing's tables as DataFrames, built from summary.parquet and briefing_runs.parquet.

Every table here is a plain pandas computation over the per-run table
:func:`run_table` (summary.parquet joined with the derived per-run figures of
:mod:`abm.report.evidence` on ``run_id``), so a test can recompute any cell
from the two Parquet files. Means and intervals over replications, and paired
differences against the baseline, come from
:func:`abm.experiment.compare.compare_points` (Student-t intervals; paired by
replication under common random numbers).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import pandas as pd

from ..analysis.frontier import efficient_frontier
from ..analysis.policy_table import DelayLimits, difference_in_differences
from ..experiment.compare import CONFIDENCE, compare_points, paired_difference
from ..experiment.store import SUMMARY_TABLE
from ..world.words import Words
from .evidence import RUNS_TABLE, Evidence
from .store_view import BatchView


@dataclass(frozen=True)
class Measure:
    """One figure of the policy table: what it is, its unit, record set, file and which way is better."""

    key: str
    label: str
    unit: str
    source: str  # truth | observed | observed (estimate)
    kind: str  # how numbers print: count, rate, minutes, percent, index, hours
    better: int  # +1 higher is better, -1 lower is better, 0 neither
    table: str  # the Parquet file the per-run values are in


MEASURES: tuple[Measure, ...] = (
    Measure("detections", "Detections", "persons", "observed", "count", +1, SUMMARY_TABLE),
    # A patrol's direct effect: people stopped before they board, which detections (found in checks) never show.
    Measure("interdictions", "Stopped at boarding points", "persons", "observed", "count", +1, SUMMARY_TABLE),
    Measure("crossings", "Crossings", "persons", "truth", "count", -1, SUMMARY_TABLE),
    Measure("crossings_after_checks", "… boarded after the last check", "persons", "truth", "count", -1, RUNS_TABLE),
    Measure("truth_past_checks", "Past the last check unfound", "person-attempts", "truth", "count", -1, RUNS_TABLE),
    Measure(
        "est_crossings", "Past the last check unfound, estimated", "person-attempts", "observed (estimate)",
        "count", -1, RUNS_TABLE,
    ),
    Measure("displaced_out", "Displaced out of the system", "persons", "truth", "count", -1, SUMMARY_TABLE),
    Measure("hazard_weighted_share", "Hazard-weighted boarding", "index 0–1", "truth", "index", -1, RUNS_TABLE),
    Measure("time_in_port_p95_min", "{Time_at_site}, 95th percentile", "minutes", "observed", "minutes", -1,
            SUMMARY_TABLE),
    Measure("missed_departure_share", "{Missed}", "% of vehicles", "observed", "percent", -1, SUMMARY_TABLE),
    Measure("staff_hours", "Staff-hours", "hours", "observed", "hours", 0, SUMMARY_TABLE),
)
# Derived from summary columns (vehicles x (1 - missed share) / days): the operator's throughput.
ON_TIME = Measure(
    "on_time_per_day", "Vehicles on their booked {service}", "vehicles a day", "observed", "rate", +1, SUMMARY_TABLE
)
# Derived (detections + interdictions): everyone enforcement stops, found in a check or at a boarding point.
STOPPED = Measure("stopped", "Stopped in all", "persons", "observed", "count", +1, SUMMARY_TABLE)
DERIVED = (ON_TIME, STOPPED)  # compared like the measures, shown where a section needs them (stakeholders)
MEASURE = {m.key: m for m in (*MEASURES, *DERIVED)}  # labels hold the crossing's words as placeholders (worded())


def worded(words: Words) -> dict[str, Measure]:
    """Every measure by key, its label in the crossing's own words ("Missed trains")."""
    return {key: replace(m, label=words.fill(m.label)) for key, m in MEASURE.items()}


def run_table(batch: BatchView, evidence: Evidence) -> pd.DataFrame:
    """summary.parquet with the derived per-run figures joined on run_id, and vehicles on time a day."""
    derived = evidence.per_run.drop(columns=["point", "replication", *batch.labels], errors="ignore")
    runs = batch.summary.merge(derived, on="run_id", how="left", validate="one_to_one")
    if "missed_departure_share" in runs and "vehicles" in runs:
        missed = runs["missed_departure_share"].astype(float).fillna(0.0)
        runs[ON_TIME.key] = runs["vehicles"].astype(float) * (1 - missed) / runs["days"].astype(float)
    if "detections" in runs and "interdictions" in runs:
        runs[STOPPED.key] = runs["detections"].astype(float) + runs["interdictions"].astype(float)
    return runs


def comparison(batch: BatchView, runs: pd.DataFrame, confidence: float = CONFIDENCE) -> pd.DataFrame:
    """Per design point and measure: mean and interval over replications, paired difference vs baseline.

    The long format of :func:`abm.experiment.compare.compare_points`, with each
    measure's record set in ``source``.
    """
    keys = [m.key for m in (*MEASURES, *DERIVED) if m.key in runs.columns]
    table = compare_points(runs, batch.labels, batch.compare_to, keys, confidence)
    table["source"] = table["figure"].map(lambda k: MEASURE[k].source)
    return table


def means(table: pd.DataFrame) -> pd.DataFrame:
    """Mean per point (rows) and measure (columns)."""
    return table.pivot(index="point", columns="figure", values="mean")


def delay_status(batch: BatchView, table: pd.DataFrame, limits: DelayLimits) -> pd.DataFrame:
    """Per point: its and its baseline's mean p95 time at the crossing and missed share, and whether within limits.

    A baseline point is within the limits by definition; a point without a
    baseline (no policy factor) is marked not applicable (``within`` NA).
    """
    m = means(table)
    rows = []
    for point, base in batch.compare_to.items():
        if point not in m.index:
            continue
        ref = point if base is None else base
        tip, tip_base = m.loc[point, "time_in_port_p95_min"], m.loc[ref, "time_in_port_p95_min"]
        missed = m.loc[point].get("missed_departure_share", math.nan)
        missed_base = m.loc[ref].get("missed_departure_share", math.nan)
        has_baseline = batch.policy is not None and (base is not None or point == ref)
        rows.append(
            {
                "point": point,
                "baseline_point": ref,
                "time_in_port_p95_min": tip,
                "baseline_time_in_port_p95_min": tip_base,
                "time_in_port_change": tip / tip_base - 1 if tip_base else math.nan,
                "missed_departure_share": missed,
                "baseline_missed_departure_share": missed_base,
                "missed_change_points": 100 * (missed - missed_base),
                "within": limits.within(tip, tip_base, missed, missed_base) if has_baseline else pd.NA,
            }
        )
    return pd.DataFrame(rows).set_index("point")


def is_within(status: pd.DataFrame, point: int) -> bool:
    """True when a point is within the delay limits (False when not, or when no baseline applies)."""
    if point not in status.index:
        return False
    value = status.loc[point, "within"]
    return value is not pd.NA and bool(value)


def scenarios(batch: BatchView) -> dict[tuple, list[int]]:
    """Scenario values -> its design points (in point order)."""
    out: dict[tuple, list[int]] = {}
    for point in batch.points.index:
        out.setdefault(batch.scenario_of(int(point)), []).append(int(point))
    return out


def best_within_limits(batch: BatchView, table: pd.DataFrame, status: pd.DataFrame) -> dict[tuple, int]:
    """Per scenario, the point detecting most among those within the delay limits (fewer crossings break ties)."""
    m = means(table)
    out: dict[tuple, int] = {}
    if batch.policy is None:
        return out
    for scenario, points in scenarios(batch).items():
        ok = [p for p in points if is_within(status, p)]
        if ok:
            out[scenario] = sorted(ok, key=lambda p: (-m.loc[p, "detections"], m.loc[p, "crossings"], p))[0]
    return out


def frontier(batch: BatchView, table: pd.DataFrame) -> pd.Series:
    """True for points on their scenario's efficient frontier (lower p95 time at the crossing, more detections)."""
    m = means(table)
    flags = pd.Series(False, index=m.index)
    for points in scenarios(batch).values():
        here = [p for p in points if p in m.index]
        on = efficient_frontier(m.loc[here, "time_in_port_p95_min"], m.loc[here, "detections"])
        flags.loc[here] = on
    return flags


def _series(runs: pd.DataFrame, point: int, figure: str) -> pd.Series:
    """One point's values of a figure, indexed by replication."""
    rows = runs[runs["point"] == point]
    return rows.set_index("replication")[figure].astype(float)


def behaviour_contrast(
    batch: BatchView, runs: pd.DataFrame, figures: Sequence[str], confidence: float = CONFIDENCE
) -> pd.DataFrame:
    """How a policy's paired effect changes between behaviour models, replication by replication.

    The reference model is ``static`` when the behaviour factor has it, else its
    first level. One row per policy point under another model and figure: the
    paired difference vs baseline under the reference model, under the other,
    and the difference of the two with its t-interval. Empty without a
    behaviour factor of two levels or more, or without a policy factor.
    """
    columns = ["point", "reference_point", "policy", "behaviour", "reference", "figure", "effect_reference",
               "effect", "change", "change_low", "change_high", "pairs"]
    if batch.behaviour is None or batch.policy is None:
        return pd.DataFrame(columns=columns)
    levels = list(batch.factor(batch.behaviour).levels)
    if len(levels) < 2:
        return pd.DataFrame(columns=columns)
    reference = "static" if "static" in levels else levels[0]
    pts = batch.points
    others = [label for label in batch.labels if label not in (batch.behaviour,)]
    rows = []
    for point, base in batch.compare_to.items():
        if base is None or str(pts.loc[point, batch.behaviour]) == str(reference):
            continue
        twin = [
            q for q in pts.index
            if str(pts.loc[q, batch.behaviour]) == str(reference)
            and all(str(pts.loc[q, o]) == str(pts.loc[point, o]) for o in others)
        ]
        if not twin or batch.compare_to.get(int(twin[0])) is None:
            continue
        ref_point, ref_base = int(twin[0]), int(batch.compare_to[int(twin[0])])  # type: ignore[arg-type]
        for figure in figures:
            if figure not in runs:
                continue
            effect_ref = paired_difference(_series(runs, ref_point, figure), _series(runs, ref_base, figure),
                                           confidence)[0]
            effect = paired_difference(_series(runs, point, figure), _series(runs, base, figure), confidence)[0]
            change, low, high, pairs = difference_in_differences(
                _series(runs, point, figure), _series(runs, base, figure),
                _series(runs, ref_point, figure), _series(runs, ref_base, figure), confidence,
            )
            rows.append(
                {
                    "point": point, "reference_point": ref_point, "policy": str(pts.loc[point, batch.policy]),
                    "behaviour": str(pts.loc[point, batch.behaviour]), "reference": str(reference),
                    "figure": figure, "effect_reference": effect_ref, "effect": effect, "change": change,
                    "change_low": low, "change_high": high, "pairs": pairs,
                }
            )
    return pd.DataFrame(rows, columns=columns)


@dataclass(frozen=True)
class Stakeholder:
    """Whose view, the figure they judge by (and its direction), and a tie-breaker."""

    name: str
    figure: str
    tie_break: str
    wants: str  # the figures they look at, in words (placeholders for the crossing's words, see Words.fill)
    label: str = ""  # display name with placeholders; the name when empty
    wants_without_departures: str = ""  # ``wants`` where vehicles leave when cleared; ``wants`` when empty


STAKEHOLDERS: tuple[Stakeholder, ...] = (
    Stakeholder("Operator", "time_in_port_p95_min", "missed_departure_share",
                "throughput on time, {time_at_site}, {missed}", "{Site} operator", "throughput, {time_at_site}"),
    # Enforcement judges by everyone stopped, not detections alone: a patrol that stops people before they board
    # serves enforcement as a check that finds them does, and detections alone would make it look useless.
    Stakeholder("Enforcement", "stopped", "crossings",
                "people stopped (found in checks or at boarding points), crossings"),
    Stakeholder("Safeguarding", "hazard_weighted_share", "displaced_out",
                "hazard-weighted boarding, displacement out of the system"),
)


def _indistinguishable(runs: pd.DataFrame, a: int, b: int, figure: str, confidence: float) -> bool:
    """True when the paired difference of two points on a figure has an interval holding zero (or none at all)."""
    _, low, high, _ = paired_difference(_series(runs, a, figure), _series(runs, b, figure), confidence)
    return not (math.isfinite(low) and math.isfinite(high)) or low <= 0 <= high


def stakeholder_view(
    batch: BatchView, table: pd.DataFrame, runs: pd.DataFrame, scenario: tuple, confidence: float = CONFIDENCE
) -> pd.DataFrame:
    """Per stakeholder: the policy they would pick in one scenario and what it costs the others.

    Each picks the point best on their own figure. Points whose paired
    difference from that best holds zero are tied with it (indistinguishable
    over the replications), and the tie goes to the best of them on the
    stakeholder's next figure; ``tied_with`` lists the others. ``cost:<other>``
    is how much worse the other stakeholder's own figure is under this pick
    than under their own pick (positive = a cost, whichever way the figure
    runs; ``cost:<other>_low`` / ``_high`` its paired interval; zero when they agree).
    """
    m = means(table)
    points = [p for p in scenarios(batch).get(scenario, []) if p in m.index]
    picks: dict[str, int] = {}
    ties: dict[str, list[int]] = {}
    for s in STAKEHOLDERS:
        if s.figure not in m.columns or m.loc[points, s.figure].isna().all():
            continue
        sign = MEASURE[s.figure].better
        top = sorted(points, key=lambda p: (-sign * m.loc[p, s.figure], p))[0]
        tied = [p for p in points if p == top or _indistinguishable(runs, p, top, s.figure, confidence)]
        tie = MEASURE[s.tie_break].better if s.tie_break in m.columns else 0
        picks[s.name] = sorted(
            tied, key=lambda p: (-tie * m.loc[p, s.tie_break] if tie else 0, -sign * m.loc[p, s.figure], p)
        )[0]
        ties[s.name] = [p for p in tied if p != picks[s.name]]
    rows = []
    for s in STAKEHOLDERS:
        if s.name not in picks:
            continue
        pick = picks[s.name]
        row = {"stakeholder": s.name, "point": pick, "policy": batch.policy_of(pick), "figure": s.figure,
               "value": m.loc[pick, s.figure], "tied_with": ", ".join(batch.policy_of(p) for p in ties[s.name]),
               # the figure that settled a tie; the main figure itself when the next one is absent (no departures)
               "tie_break": s.tie_break if s.tie_break in m.columns else s.figure}
        for other in STAKEHOLDERS:
            if other.name == s.name or other.name not in picks:
                continue
            theirs = picks[other.name]
            if theirs == pick:
                diff, low, high = 0.0, 0.0, 0.0
            else:
                diff, low, high, _ = paired_difference(
                    _series(runs, pick, other.figure), _series(runs, theirs, other.figure), confidence
                )
                if MEASURE[other.figure].better > 0:  # higher is better for them: less is the cost
                    diff, low, high = -diff, -high, -low
            row.update({f"cost:{other.name}": diff, f"cost:{other.name}_low": low, f"cost:{other.name}_high": high,
                        f"pick:{other.name}": theirs})
        rows.append(row)
    return pd.DataFrame(rows)
