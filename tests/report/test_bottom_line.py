"""The bottom line's rules on constructed comparisons (no simulation).

A batch of three policies (a baseline and two others) in one scenario, with a comparison table written
here by hand, so each rule is checked on a case made for it: a policy whose detection gain has a paired
interval holding zero is never "the policy to prefer"; one whose interval excludes zero is; a harm
worsened beyond chance is said whatever the gain; a roster with no extra hours "needs no extra
staff-hours".
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import pandas as pd

from abm.analysis.policy_table import DelayLimits
from abm.report.bottom_line import bottom_line, named_policy
from abm.report.context import Context
from abm.report.store_view import BatchView, FactorView
from abm.report.tables import means

POLICIES = {0: "current", 1: "more_checks", 2: "patrols"}
LABELS = {"current": "Current roster", "more_checks": "More checks", "patrols": "Yard patrols"}
# figure -> (baseline mean, per policy point: (difference, low, high)); a policy's mean is baseline + difference
NEUTRAL: dict[str, tuple[float, dict[int, tuple[float, float, float]]]] = {
    "detections": (40.0, {1: (3.6, -1.0, 8.2), 2: (1.0, -2.0, 4.0)}),
    "crossings": (140.0, {1: (6.4, -5.5, 18.3), 2: (-3.0, -9.0, 3.0)}),
    "crossings_after_checks": (60.0, {1: (2.0, -4.0, 8.0), 2: (-1.0, -5.0, 3.0)}),
    "displaced_out": (8.0, {1: (-2.8, -7.4, 1.8), 2: (0.5, -2.0, 3.0)}),
    "hazard_weighted_share": (0.43, {1: (0.01, -0.02, 0.04), 2: (-0.01, -0.03, 0.01)}),
    "staff_hours": (4704.0, {1: (336.0, 336.0, 336.0), 2: (0.0, 0.0, 0.0)}),
}


def _batch() -> BatchView:
    points = pd.DataFrame({"point": list(POLICIES), "policy": list(POLICIES.values()), "runs": 5}).set_index("point")
    factor = FactorView(label="policy", path=None, levels=tuple(POLICIES.values()), display=LABELS, baseline="current")
    return BatchView(
        out=Path("."), name="constructed", note="", experiment_file="", command=(), design="grid", days=28, warmup=7,
        replications=5, seed=1, seeds=(1, 2, 3, 4, 5), world_name="a fictional terminal",
        world={"departures": {"service": "train"}, "site": "terminal"}, factors=(factor,), summary=pd.DataFrame(),
        policy="policy", baseline="current", baseline_source="the file", behaviour=None,
        compare_to={0: None, 1: 0, 2: 0}, points=points,
    )


def _context(changes: dict[str, dict[int, tuple[float, float, float]]] | None = None) -> Context:
    """A context over the three policies, with ``changes`` replacing the neutral paired differences."""
    figures = {key: (base, {**diffs, **(changes or {}).get(key, {})}) for key, (base, diffs) in NEUTRAL.items()}
    rows = []
    for point in POLICIES:
        for figure, (base, diffs) in figures.items():
            diff, low, high = diffs.get(point, (math.nan, math.nan, math.nan))
            mean = base + (0.0 if point == 0 else diff)
            rows.append({"point": point, "figure": figure, "mean": mean, "low": mean * 0.9, "high": mean * 1.1,
                         "difference": diff, "difference_low": low, "difference_high": high})
    table = pd.DataFrame(rows)
    status = pd.DataFrame({"point": list(POLICIES), "time_in_port_change": [0.0, 0.039, 0.0],
                           "missed_change_points": [0.0, 0.04, 0.0], "within": [True, True, True]}).set_index("point")
    return Context(batch=_batch(), evidence=None, runs=pd.DataFrame(), table=table,  # type: ignore[arg-type]
                   means=means(table), status=status, best={}, on_frontier=pd.Series(dtype=bool),
                   limits=DelayLimits(), contrast=pd.DataFrame(), scenario_points={(): list(POLICIES)})


def _sentences(line: str) -> list[str]:
    return [s for s in re.split(r"(?<=[.])\s+(?=[A-Z])", line) if s]


def test_a_gain_whose_interval_holds_zero_is_never_the_policy_to_prefer() -> None:
    line = bottom_line(_context())
    sentences = _sentences(line)
    assert len(sentences) <= 3, sentences
    assert "to prefer" not in line
    assert sentences[0].startswith("Across all runs, no policy is shown to detect more than Current roster within "
                                   "the delay limits")
    largest = ("the largest (not distinguishable from chance) gain is under More checks: "
               "+3.6 (95% interval −1.0 to +8.2)")
    assert largest in sentences[0]
    assert named_policy(_context(), ()) == (1, False)


def test_a_gain_whose_interval_excludes_zero_is_the_policy_to_prefer() -> None:
    ctx = _context({"detections": {1: (3.6, 0.4, 6.8)}})
    sentences = _sentences(bottom_line(ctx))
    assert sentences[0].startswith("Across all runs, More checks is the policy to prefer within the delay limits")
    assert "+3.6 (95% interval +0.4 to +6.8)" in sentences[0]
    assert "needs 336 more staff-hours" in sentences[1]


def test_a_sure_gain_is_preferred_over_a_larger_gain_that_chance_could_give() -> None:
    ctx = _context({"detections": {2: (2.0, 0.5, 3.5)}})  # More checks: +3.6 but holds zero; Yard patrols: sure
    assert named_policy(ctx, ()) == (2, True)
    assert bottom_line(ctx).startswith("Across all runs, Yard patrols is the policy to prefer")


def test_a_harm_beyond_chance_is_said_with_its_interval() -> None:
    ctx = _context({"crossings_after_checks": {1: (24.8, 7.9, 41.7)},
                    "hazard_weighted_share": {1: (0.047, 0.0002, 0.094)}})
    sentences = _sentences(bottom_line(ctx))
    assert len(sentences) <= 3, sentences
    people = sentences[-1]
    assert "raises crossings of people who boarded after the last check by +24.8 (95% interval +7.9 to +41.7)" \
        in people
    hazard = "hazard of where and how deep they board (a 0–1 score) by +0.047 (95% interval +0.0002 to +0.094)"
    assert hazard in people
    assert "beyond what chance could give" in people
    # a harm is said when the policy is preferred too
    sure = _context({"detections": {1: (3.6, 0.4, 6.8)}, "crossings": {1: (12.0, 2.0, 22.0)}})
    line = bottom_line(sure)
    assert "is the policy to prefer" in line and "raises crossings by +12.0 (95% interval +2.0 to +22.0)" in line


def test_harms_within_chance_are_not_called_worse() -> None:
    line = bottom_line(_context())
    assert "raises" not in line and "beyond what chance" not in line
    assert "none distinguishable from chance" in line


def test_a_roster_with_no_extra_hours_needs_none() -> None:
    ctx = _context({"detections": {2: (5.0, 1.0, 9.0)}})  # Yard patrols: sure gain, no extra hours
    line = bottom_line(ctx)
    assert "Yard patrols is the policy to prefer" in line
    assert "It needs no extra staff-hours" in line and "0 staff-hours" not in line


def test_without_a_gain_no_policy_is_named() -> None:
    ctx = _context({"detections": {1: (-1.0, -3.0, 1.0), 2: (-0.5, -2.0, 1.0)}})
    line = bottom_line(ctx)
    assert line.startswith("Across all runs, no policy tested finds more people than Current roster")
    assert "More checks" not in line and "Yard patrols" not in line


def test_an_interval_end_that_is_not_zero_never_prints_as_zero() -> None:
    from abm.report.document import interval

    assert interval(0.00017, 0.094, "index", True, like=0.047) == "+0.0002 to +0.094"
    assert interval(0.0, 0.094, "index", True, like=0.047) == "0.000 to +0.094"
    assert interval(-0.00004, 0.0001, "percent", True, like=0.0) == "−0.004 pp to +0.01 pp"
