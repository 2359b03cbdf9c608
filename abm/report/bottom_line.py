"""The briefing's bottom line: at most three plain sentences a decision-maker reads first.

Which policy; what it gains (detections and crossings, each with its paired
interval); what it costs (staff-hours, the 95th percentile of time at the
crossing, missed departures); and what it does to the people who try (pushed out of the
crossing, and the hazard of where and how deep they board). It speaks about the
headline scenario (adaptive behaviour when the batch has it) and the policy the
headline names, with the same figures as the comparison table.
"""

from __future__ import annotations

from .context import Context, delay_change_text
from .document import excludes_zero, interval, is_number, number

FIGURE_KIND = {"detections": "count", "crossings": "count", "staff_hours": "hours", "displaced_out": "count",
               "hazard_weighted_share": "index", "time_in_port_p95_min": "minutes"}


def _change(ctx: Context, point: int, figure: str) -> tuple[str, bool] | None:
    """ "+12 (95% interval +4 to +20)" and whether the interval excludes zero; None without the figure."""
    row = ctx.cell(point, figure)
    if row is None or not is_number(row["difference"]):
        return None
    kind = FIGURE_KIND[figure]
    shown = number(row["difference"], kind, signed=True)
    if not is_number(row["difference_low"]):
        return f"{shown} (no interval: too few replications)", False
    sure = excludes_zero(row["difference_low"], row["difference_high"])
    if float(row["difference_low"]) == float(row["difference_high"]):
        return shown, True  # the same in every replication (staff-hours)
    spread = interval(row["difference_low"], row["difference_high"], kind, True, like=row["difference"])
    return f"{shown} (95% interval {spread})", sure


def _other_behaviour(ctx: Context, scenario: tuple, best: int, sure: bool) -> str:
    """"; under static behaviour ... " when the batch also ran the same policy under another behaviour model
    (saying the answer depends on the assumption when the gain is clear under one model and not the other)."""
    if ctx.batch.behaviour is None:
        return ""
    parts, differs = [], False
    for other, points in ctx.scenario_points.items():
        if other == scenario:
            continue
        twin = next((p for p in points if ctx.batch.policy_of(p) == ctx.batch.policy_of(best)), None)
        change = _change(ctx, twin, "detections") if twin is not None else None
        if change is not None:
            reading = "" if change[1] else ", not distinguishable from chance"
            parts.append(f"under {ctx.scenario_text(other)} it changes detections by {change[0]}{reading}")
            differs = differs or change[1] != sure
    if not parts:
        return ""
    return "; " + "; ".join(parts) + (", so the answer depends on how people are assumed to behave" if differs else "")


def bottom_line(ctx: Context) -> str:
    """At most three sentences: the policy and its gain, its cost, its effect on the people who try."""
    scenario = ctx.primary()
    under = ctx.under(scenario)
    best = ctx.best.get(scenario)
    others = [p for p in ctx.scenario_points[scenario] if ctx.batch.compare_to.get(p) is not None]
    if ctx.batch.policy is None or not others:
        return ("This batch compares no policies with a baseline; see the tables for each design point's figures, "
                "which are model estimates, not counts.")
    if best is None or ctx.batch.compare_to.get(best) is None:
        return (f"{under}no policy tested finds more people than {ctx.baseline_name} within the delay limits "
                f"({ctx.limits.describe(ctx.baseline_name, ctx.words)}), so the evidence here does not favour a change. "
                "Every figure is a model estimate, not a count.")
    policy = ctx.batch.policy_of(best)
    detections, crossings = _change(ctx, best, "detections"), _change(ctx, best, "crossings")
    gain = (f"changes detections by {detections[0]} people over {ctx.batch.days} days" if detections
            else "changes detections")
    if crossings:
        gain += f" and changes crossings by {crossings[0]}"
    sure = bool(detections and detections[1])
    first = (f"{under}{policy} is the policy to prefer within the delay limits: against {ctx.baseline_name} it {gain}"
             + ("" if sure else ", though its gain in detections is not distinguishable from chance")
             + _other_behaviour(ctx, scenario, best, sure) + ".")
    costs = []
    staff = _change(ctx, best, "staff_hours")
    if staff:
        costs.append(f"It takes {staff[0]} staff-hours")
    status = ctx.status.loc[best] if best in ctx.status.index else None
    if status is not None and is_number(status["time_in_port_change"]):
        costs.append(f"changes the delay ({delay_change_text(ctx, best)})")
    second = ("; it ".join(costs) if staff else "It " + costs[0]) + "." if costs else ""
    moved, hazard = _change(ctx, best, "displaced_out"), _change(ctx, best, "hazard_weighted_share")
    people = []
    if moved:
        people.append(f"changes the number pushed out of the crossing to other routes by {moved[0]}")
    if hazard:
        people.append(f"changes the hazard of where and how deep they board by {hazard[0]} on a 0-1 scale")
    third = f"For the people who try, it {' and '.join(people)}." if people else ""
    return " ".join(part for part in (first, second, third) if part)
