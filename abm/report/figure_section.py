"""Briefing section 5: the figures, each saying what it shows, from which record set, and what it leaves out."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from .document import FigureBlock, Paragraph, Section
from .evidence import ALL_BEHAVIOURS
from .figures import DailyLine, SeriesPoint, daily_figure, estimator_figure, frontier_figure, heatmap_figure
from .context import Context, gain_point, intervention_of
from .tables import is_within


# -- 5. figures -------------------------------------------------------------------------------------------


def _frontier_block(ctx: Context) -> FigureBlock:
    groups: dict[str, list[SeriesPoint]] = {}
    limits: dict[str, float] = {}
    for scenario, points in ctx.scenario_points.items():
        name = ctx.scenario_text(scenario)
        series = []
        for p in points:
            tip, det = ctx.cell(p, "time_in_port_p95_min"), ctx.cell(p, "detections")
            series.append(SeriesPoint(
                ctx.batch.policy_of(p), (tip["mean"], tip["low"], tip["high"]), (det["mean"], det["low"], det["high"]),
                bool(ctx.on_frontier.get(p, False)), ctx.batch.compare_to.get(p) is None or is_within(ctx.status, p),
            ))
        groups[name] = series
        base = ctx.baseline_point(scenario)
        if base is not None:
            limits[name] = ctx.means.loc[base, "time_in_port_p95_min"] * (1 + ctx.limits.time_in_port_increase)
    return frontier_figure(groups, limits, ctx.batch.days, ctx.batch.replications, ctx.words)


def _heatmap_block(ctx: Context) -> FigureBlock | None:
    shares, per_run = ctx.evidence.shares, ctx.evidence.per_run
    panels = []
    for scenario, points in ctx.scenario_points.items():
        base = ctx.baseline_point(scenario)
        for p in points:
            if p == base or base is None:
                continue
            a = per_run[per_run["point"] == p].set_index("replication")["run_id"]
            b = per_run[per_run["point"] == base].set_index("replication")["run_id"]
            common = a.index.intersection(b.index)
            if common.empty:
                continue
            diffs = [shares[a[r]] - shares[b[r]] for r in common]
            change = 100 * sum(diffs) / len(diffs)
            title = f"{ctx.batch.policy_of(p)} vs {ctx.baseline_name}"
            if ctx.batch.scenario_labels:
                title += f"\n{ctx.scenario_text(scenario)}"
            panels.append((title, change, len(common), _beyond_noise(diffs)))
    if not panels:
        return None
    policies = max(len(points) - 1 for points in ctx.scenario_points.values())
    cols = min(3, policies)
    left_out = [title.replace("\n", ", ") for title, *_ in panels[3 * cols:]]
    return heatmap_figure(panels[: 3 * cols], ctx.batch.replications, cols, left_out)


def _beyond_noise(diffs: list[pd.DataFrame]) -> pd.DataFrame:
    """Cells whose paired 95% t-interval of the change in share excludes zero (False with under two pairs)."""
    stack = np.stack([d.to_numpy(dtype=float) for d in diffs])
    if stack.shape[0] < 2:
        return pd.DataFrame(False, index=diffs[0].index, columns=diffs[0].columns)
    mean, sd = stack.mean(axis=0), stack.std(axis=0, ddof=1)
    half = float(special.stdtrit(stack.shape[0] - 1, 0.975)) * sd / math.sqrt(stack.shape[0])
    return pd.DataFrame(np.abs(mean) > half, index=diffs[0].index, columns=diffs[0].columns)


def _daily_block(ctx: Context) -> FigureBlock | None:
    from .evidence import daily_series

    iv = intervention_of(ctx.batch)
    if iv is None:
        return None
    day, name = iv
    window = (max(0, day - 30), min(ctx.batch.end_day, day + 60))
    smooth = 7 if window[1] - window[0] >= 28 else 1
    panels = []
    hidden: dict[str, None] = {}
    for scenario, points in list(ctx.scenario_points.items())[:4]:
        base = ctx.baseline_point(scenario) if ctx.batch.policy is not None else points[0]
        shown = [base] + [p for p in [gain_point(ctx, scenario)] if p is not None and p != base]
        hidden.update({ctx.batch.policy_of(p): None for p in points if p not in shown})
        frame = daily_series(ctx.batch, shown, ("detections", "truth_crossings"))
        lines = []
        for k, p in enumerate(shown):
            rows = frame[frame["point"] == p]
            for column, what, dashed in (("detections", "detections (observed)", False),
                                         ("truth_crossings", "crossings (truth)", True)):
                lines.append(DailyLine(f"{ctx.batch.policy_of(p)}: {what}", column,
                                       rows[["day", "replication"]].assign(value=rows[column].astype(float)),
                                       k, dashed))
        panels.append((ctx.scenario_text(scenario), lines))
    notes = []
    if hidden:
        notes.append(f"Each panel draws the baseline and the policy the headline examines; not drawn, to keep the "
                     f"lines readable: {', '.join(hidden)} (their figures are in the comparison table).")
    if len(ctx.scenario_points) > 4:
        dropped = [ctx.scenario_text(s) for s in list(ctx.scenario_points)[4:]]
        notes.append(f"Scenarios not drawn (four fit): {'; '.join(dropped)}.")
    return daily_figure(panels, day, name, window, smooth, ctx.batch.replications, " ".join(notes))


def _estimator_block(ctx: Context) -> FigureBlock | None:
    rel, check = ctx.evidence.reliability, ctx.evidence.check
    if check.empty:
        return None
    pooled = rel[rel["behaviour"] == ALL_BEHAVIOURS].sort_values(["eligible", "score"], ascending=[False, True])
    few, beyond = pooled[pooled["n"] < 2], pooled[pooled["n"] >= 2].iloc[12:]
    pooled = pooled[pooled["n"] >= 2].head(12)
    notes = []
    if len(few):
        notes.append(f"Not drawn, with fewer than two runs to average: {', '.join(estimator_label(r) for _, r in few.iterrows())}.")
    if len(beyond):
        notes.append(f"Not drawn, beyond the twelve most reliable: {', '.join(estimator_label(r) for _, r in beyond.iterrows())}.")
    behaviours = behaviour_order(ctx)
    rows = []
    for _, r in pooled.iterrows():
        here = check[check["slug"] == r["slug"]]
        ratios = {bh: here.loc[here["behaviour"] == bh, "ratio"].to_numpy(float) for bh in behaviours}
        rows.append((estimator_label(r), ratios))
    if not rows:
        return None
    return estimator_figure(rows, behaviours, ctx.batch.runs, " ".join(notes))


def behaviour_order(ctx: Context) -> list[str]:
    present = [str(v) for v in pd.unique(ctx.evidence.check["behaviour"])]
    if ctx.batch.behaviour is not None:
        order = [str(v) for v in ctx.batch.factor(ctx.batch.behaviour).levels]
        return [v for v in order if v in present] + [v for v in present if v not in order]
    return present


def estimator_label(row: pd.Series) -> str:
    label = str(row["label"])
    label = label[4:] if label.startswith("the ") else label
    return label + ("" if row["exact"] else " ≈")


def section_figures(ctx: Context) -> Section:
    blocks: list[Any] = []
    missing: list[str] = []
    if ctx.batch.policy is not None:
        blocks.append(_frontier_block(ctx))
        heat = _heatmap_block(ctx)
        if heat is not None:
            blocks.append(heat)
    else:
        missing.append("the frontier and displacement heat map need policies compared with a baseline")
    daily = _daily_block(ctx)
    if daily is not None:
        blocks.append(daily)
    else:
        missing.append(
            "the daily series needs an intervention that takes effect inside the runs, and this batch has none"
        )
    est = _estimator_block(ctx)
    if est is not None:
        blocks.append(est)
    else:
        missing.append("the estimator chart needs estimators that ran against truth")
    if missing:
        blocks.append(Paragraph("Not shown: " + "; ".join(missing) + "."))
    return Section("figures", "Figures", tuple(blocks))
