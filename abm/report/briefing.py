"""Turn a batch folder into a briefing a decision-maker can read in ten minutes.

:func:`brief` reads the batch (:mod:`abm.report.store_view`), what it needs
from the run directories (:mod:`abm.report.evidence`), builds the tables
(:mod:`abm.report.tables`) and figures (:mod:`abm.report.figures`), assembles
the sections as a :class:`~abm.report.document.Document` and writes
``OUT/briefing.html`` (self-contained) and ``OUT/briefing.md`` with
``OUT/figures/*.png``.

Sections: the question and the scenario; how many are trying and getting
through (:mod:`abm.report.answer`); headline findings; the policy
comparison; static against adaptive behaviour and the stakeholders' views;
figures; estimator reliability; what drives the answer (only for sampled
designs, which support it); assumptions, limitations and cautions; the method
appendix. Every sentence with a number is generated from the tables, and
every number comes with its interval.
"""

from __future__ import annotations

import math
import shlex
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from ..analysis.estimator_check import bias_sentence, describe_quantity
from ..analysis.policy_table import DelayLimits
from ..errors import InputError
from ..experiment.compare import INTERVAL_WORDS, MIN_REPLICATIONS, bounded_mean_interval, figure_scale
from ..estimate import frequency, removal, twosample
from ..estimate.expansion import EXPANSION
from ..estimate.expansion import SOURCE as EXPANSION_SOURCE
from ..records import write_atomically
from . import html as html_renderer
from .answer import section_answer
from .bottom_line import bottom_line
from .load_notes import load_blocks
from . import markdown as markdown_renderer
from .document import (
    Bullets, Cell, Document, FigureBlock, Item, Paragraph, Section, Table, excludes_zero, interval, is_number,
    number, with_interval,
)
from .evidence import ALL_BEHAVIOURS, CHECK_TABLE, RUNS_TABLE, Evidence, gather
from .figures import (
    FIGURE_KEYS, DailyLine, SeriesPoint, daily_figure, estimator_figure, frontier_figure, heatmap_figure,
)
from .store_view import BatchView, load_batch, shown_value
from .tables import (
    MEASURE, MEASURES, ON_TIME, STAKEHOLDERS, behaviour_contrast, best_within_limits, comparison, delay_status,
    frontier, is_within, means, run_table, scenarios, stakeholder_view,
)

HTML_FILE = "briefing.html"
MD_FILE = "briefing.md"
FORMATS = ("html", "md")
CONTRAST_FIGURES = ("detections", "crossings", "displaced_out", "hazard_weighted_share")

BEHAVIOUR_WORDS = {
    "static": "people choose where, when and on which vehicle to try with fixed shares (the classic assumption)",
    "adaptive": "people learn which options are risky from their own outcomes, from peers and from rumour, "
                "forget slowly, and move away from what gets them caught",
    "reinforcement": "a facilitation network learns shared propensities from outcomes (Roth-Erev reinforcement)",
}

SAFETY = (
    "People hidden in vehicles risk suffocation, heat, cold and crushing. A policy that displaces attempts can push "
    "people toward more dangerous boarding — moving vehicles, sealed or refrigerated loads, remote lay-bys — "
    "toward hiding deeper in the load, or to routes outside this crossing where nobody is looking out for them. "
    "Every figure here is a model estimate, not "
    "a count of real people, from a fictional world whose numbers are illustrative. Nothing in this briefing "
    "replaces the law, safeguarding duties toward people found in vehicles, or the agencies' own licensed practice "
    "and procedures; defer to them."
)


class BriefingError(InputError):
    """A briefing request that cannot be met (e.g. an unknown format)."""


@dataclass
class Context:
    """Everything the section builders share."""

    batch: BatchView
    evidence: Evidence
    runs: pd.DataFrame
    table: pd.DataFrame
    means: pd.DataFrame
    status: pd.DataFrame
    best: dict[tuple, int]
    on_frontier: pd.Series
    limits: DelayLimits
    contrast: pd.DataFrame
    scenario_points: dict[tuple, list[int]]
    drivers: pd.DataFrame | None = None  # PRCC per output and range factor (sampled designs)
    drivers_problem: str = ""  # why PRCC could not be computed

    @property
    def baseline_name(self) -> str:
        """The baseline policy's display label."""
        if self.batch.policy is None:
            return str(self.batch.baseline)
        return self.batch.policy_label(self.batch.baseline)

    def cell(self, point: int, figure: str) -> pd.Series | None:
        """The comparison row of one point and measure."""
        rows = self.table[(self.table["point"] == point) & (self.table["figure"] == figure)]
        return rows.iloc[0] if len(rows) else None

    def primary(self) -> tuple:
        """The scenario headlines speak about: adaptive behaviour when the batch has it, else the first."""
        keys = list(self.scenario_points)
        if self.batch.behaviour is not None:
            at = self.batch.scenario_labels.index(self.batch.behaviour)
            for key in keys:
                if str(key[at]) == "adaptive":
                    return key
        return keys[0]

    def baseline_point(self, scenario: tuple) -> int | None:
        return next((p for p in self.scenario_points[scenario] if self.batch.compare_to.get(p) is None), None)

    def scenario_text(self, scenario: tuple) -> str:
        """The scenario in words ("adaptive behaviour"); "all runs" when nothing but the policy varies."""
        if not self.batch.scenario_labels:
            return "all runs"
        return self.batch.scenario_name(self.scenario_points[scenario][0])

    def under(self, scenario: tuple) -> str:
        """ "Under adaptive behaviour, " (or "Across all runs, "): the opening of a sentence about a scenario."""
        return f"Under {self.scenario_text(scenario)}, " if self.batch.scenario_labels else "Across all runs, "


# -- words ----------------------------------------------------------------------------------------


def _value(ctx: Context, point: int, figure: str) -> str:
    row = ctx.cell(point, figure)
    kind = MEASURE[figure].kind
    return "n/a" if row is None else with_interval(row["mean"], row["low"], row["high"], kind)


def _effect(ctx: Context, point: int, figure: str) -> str:
    """A paired difference against the baseline with its interval and a reading."""
    row = ctx.cell(point, figure)
    if row is None or not is_number(row["difference"]):
        return "n/a"
    kind = MEASURE[figure].kind
    text = (f"{number(row['difference'], kind, signed=True)} against {ctx.baseline_name} (paired 95% interval "
            f"{interval(row['difference_low'], row['difference_high'], kind, signed=True)}")
    if is_number(row["difference_low"]) and not excludes_zero(row["difference_low"], row["difference_high"]):
        text += ": not distinguishable from no change"
    return text + ")"


def _cap(text: str) -> str:
    """Upper-case the first letter of a caption ("static behaviour: ..." -> "Static behaviour: ...")."""
    return text[:1].upper() + text[1:]


def _uncap(text: str) -> str:
    """A generated sentence continuing after a colon: its leading article in lower case."""
    return "the " + text[4:] if text.startswith("The ") else text


def _pct(x: float) -> str:
    return f"{100 * x:.0f}%"


def _level_list(batch: BatchView, label: str) -> list[str]:
    factor = batch.factor(label)
    items = []
    for level in factor.levels:
        note = factor.notes.get(str(level)) or (BEHAVIOUR_WORDS.get(str(level), "") if label == batch.behaviour else "")
        base = " (baseline)" if label == batch.policy and str(level) == str(batch.baseline) else ""
        shown = batch.policy_label(level) if label == batch.policy else str(level)
        key = f" [{level}]" if shown != str(level) else ""
        items.append(f"{shown}{key}{base}" + (f": {note}" if note else ""))
    return items


def _intervention(batch: BatchView) -> tuple[int, str] | None:
    """The first intervention that takes effect inside the runs (after day 0, before the last day)."""
    for iv in sorted(batch.world.get("interventions", []), key=lambda i: i["day"]):
        if 0 < int(iv["day"]) <= batch.end_day:
            return int(iv["day"]), str(iv["name"])
    return None


# -- 1. the question -----------------------------------------------------------------------------------


def section_question(ctx: Context) -> Section:
    b = ctx.batch
    blocks: list[Any] = []
    if b.policy is not None:
        question = (
            f"Which inspection policy at {b.world_name} finds the most people hidden in vehicles without delaying "
            "the port beyond what it can bear — and what does each policy do to the people who try: how many get "
            "through, how many are pushed to routes outside the crossing, and toward how dangerous a place to board?"
        )
    else:
        ranged = ", ".join(f.label for f in b.factors if f.is_range) or "the factors"
        question = (
            f"How do detections, crossings and delay at {b.world_name} move across the sampled ranges of {ranged}, "
            "and which of those assumptions drive the answer?"
        )
    blocks.append(Paragraph(question, lead="The question."))
    points = len(b.points)
    blocks.append(
        Paragraph(
            f"The batch “{b.name}” simulates {b.world_name}, a fictional crossing with illustrative numbers. "
            f"Each run covers {b.days} operating days after a {b.warmup}-day warm-up that the figures leave out (days "
            f"{b.start_day} to {b.end_day} of each run). {points} design point{'s' if points != 1 else ''} × "
            f"{b.replications} replications = {b.runs} completed runs. Replication r uses the same seed at every "
            "design point (common random numbers), so policies are compared replication by replication.",
            lead="The scenario.",
        )
    )
    if b.note:
        blocks.append(Paragraph(b.note, lead="In the experiment file's words:"))
    varies = []
    for factor in b.factors:
        if factor.is_range:
            varies.append(
                Item(f"{factor.label}: sampled from {factor.low} to {factor.high} (world path {factor.path})")
            )
        else:
            role = "policy" if factor.label == b.policy else ("behaviour model" if factor.label == b.behaviour else "")
            head = f"{factor.label}" + (f" ({role})" if role and role != factor.label else "")
            varies.append(Item(f"{head} — " + "; ".join(_level_list(b, factor.label))))
    if varies:
        blocks.append(Paragraph("What varies between design points:"))
        blocks.append(Bullets(tuple(varies)))
    else:
        blocks.append(Paragraph("Nothing varies between design points: every run is a replication of one world."))
    if b.behaviour is None:
        model = b.world.get("adversary", {}).get("behaviour", "static")
        blocks.append(Paragraph(f"Every run assumes {model} behaviour: {BEHAVIOUR_WORDS.get(model, model)}."))
    blocks += load_blocks(b, [p for p, c in b.compare_to.items() if c is None])
    iv = _intervention(b)
    if iv is not None:
        blocks.append(Paragraph(f"The world's intervention “{iv[1]}” takes effect on day {iv[0]} in every run, "
                                "under every policy."))
    return Section("question", "The question and the scenario", tuple(blocks))


# -- 2. headline ------------------------------------------------------------------------------------------


def _best_sentence(ctx: Context, scenario: tuple) -> Item | None:
    best = ctx.best.get(scenario)
    if best is None:
        return None
    where, under = ctx.scenario_text(scenario), ctx.under(scenario)
    days = ctx.batch.days
    policy = ctx.batch.policy_of(best)
    data = {"claim": "best-within-limits", "scenario": where, "policy": ctx.batch.policy_key(best), "point": best,
            "detections": ctx.means.loc[best, "detections"]}
    if ctx.batch.compare_to.get(best) is None:
        better = [p for p in ctx.scenario_points[scenario]
                  if ctx.means.loc[p, "detections"] > ctx.means.loc[best, "detections"]]
        outside = ""
        if better:
            top = max(better, key=lambda p: ctx.means.loc[p, "detections"])
            change = ctx.status.loc[top, "time_in_port_change"]
            outside = (f" {ctx.batch.policy_of(top)} detects more ({_effect(ctx, top, 'detections')}) but lies "
                       f"outside the delay limits (95th-percentile time in port {number(change, 'relative', True)}, "
                       f"missed departures {number(ctx.status.loc[top, 'missed_change_points'], 'rate', True)} "
                       "percentage points).")
        text = (f"{under}no policy within the delay limits detects more than the baseline, {policy}: "
                f"{_value(ctx, best, 'detections')} persons over {days} days.{outside}")
    else:
        text = (f"{under}{policy} detects the most among the policies within the delay limits: "
                f"{_value(ctx, best, 'detections')} persons over {days} days, {_effect(ctx, best, 'detections')}.")
    return Item(text, data)


def _gain_point(ctx: Context, scenario: tuple) -> int | None:
    """The policy whose gain the displacement sentence examines: the best within limits, else the top detector."""
    best = ctx.best.get(scenario)
    if best is not None and ctx.batch.compare_to.get(best) is not None:
        return best
    others = [p for p in ctx.scenario_points[scenario] if ctx.batch.compare_to.get(p) is not None]
    return max(others, key=lambda p: ctx.means.loc[p, "detections"]) if others else None


def _displacement_sentence(ctx: Context, scenario: tuple) -> Item | None:
    """How much of a policy's apparent gain (more detections) is fewer crossings, and how much displacement."""
    point = _gain_point(ctx, scenario)
    if point is None:
        return None
    rows = {f: ctx.cell(point, f) for f in ("detections", "crossings", "displaced_out", "hazard_weighted_share")}
    if any(r is None for r in rows.values()):
        return None
    d_cross, d_out = float(rows["crossings"]["difference"]), float(rows["displaced_out"]["difference"])
    policy = ctx.batch.policy_of(point)
    text = f"{ctx.under(scenario)}{policy} changes detections by {_effect(ctx, point, 'detections')}"
    share: float | None = None
    crossings_fell = is_number(rows["crossings"]["difference_high"]) and rows["crossings"]["difference_high"] < 0
    if crossings_fell:
        share = min(1.0, max(0.0, d_out) / -d_cross)
        text += (f"; crossings change by {_effect(ctx, point, 'crossings')} and displacement out of the system "
                 f"changes by {_effect(ctx, point, 'displaced_out')}, so about {_pct(share)} of the fall in "
                 "crossings is people moved to routes outside the crossing rather than stopped")
        displaced = rows["displaced_out"]
        if not excludes_zero(displaced["difference_low"], displaced["difference_high"]):
            text += " (at the means: the change in displacement is itself within what chance could give)"
        text += "."
    else:
        text += (f"; crossings change by {_effect(ctx, point, 'crossings')}, so the batch shows no fall in "
                 "people getting through to set against any extra detections (people found mostly try again), "
                 f"and displacement out of the system changes by {_effect(ctx, point, 'displaced_out')}.")
    hazard = rows["hazard_weighted_share"]
    direction = ""
    if excludes_zero(hazard["difference_low"], hazard["difference_high"]):
        direction = " — toward more dangerous boarding" if hazard["difference"] > 0 else " — toward safer boarding"
    text += f" Hazard-weighted boarding changes by {_effect(ctx, point, 'hazard_weighted_share')}{direction}."
    data = {"claim": "displacement", "scenario": ctx.scenario_text(scenario), "policy": ctx.batch.policy_key(point),
            "point": point,
            "displaced-share": "" if share is None else share}
    return Item(text, data)


def _crossings_sentence(ctx: Context, scenario: tuple) -> Item | None:
    base = ctx.baseline_point(scenario)
    if base is None:
        base = ctx.scenario_points[scenario][0]
    row = ctx.cell(base, "crossings")
    if row is None:
        return None
    days = ctx.batch.days
    attempts = ctx.means.loc[base].get("attempts", math.nan) if "attempts" in ctx.runs else math.nan
    share = f", {_pct(row['mean'] / attempts)} of {number(attempts)} person-attempts" if is_number(attempts) else ""
    with_scenario = f" with {ctx.scenario_text(scenario)}" if ctx.batch.scenario_labels else ""
    text = (f"The model implies {_value(ctx, base, 'crossings')} crossings over {days} days under "
            f"{ctx.batch.policy_of(base)}{with_scenario} (about {number(row['mean'] / days, 'rate')} "
            f"a day{share}). These are simulated truth, not a count of real people.")
    return Item(text, {"claim": "crossings", "point": base, "crossings": row["mean"]})


def _estimate_sentence(ctx: Context, scenario: tuple) -> Item | None:
    proxy = ctx.evidence.proxy
    base = ctx.baseline_point(scenario) or ctx.scenario_points[scenario][0]
    est, truth, unseen, cross = (ctx.cell(base, f) for f in
                                 ("est_crossings", "truth_past_checks", "crossings_after_checks", "crossings"))
    if proxy is None or est is None or not is_number(est["mean"]):
        return Item("No estimator could estimate from observed records how many got past the checks in this batch "
                    "(see the estimator reliability section).", {"claim": "estimate", "point": base})
    label = str(proxy["label"])
    if proxy["reliable"]:
        figure = _value(ctx, base, "est_crossings")
    else:  # an estimator whose intervals miss is not quoted with one
        figure = (f"{number(est['mean'])} (not reliable here: its {float(proxy['level']):.0%} intervals held the truth "
                  f"in {_pct(proxy['coverage'])} of runs, so no interval is quoted)")
    text = (f"{ctx.under(scenario)}from observed records alone, {label} puts the person-attempts that got past the "
            f"last check ({ctx.evidence.last_station}) unfound at {figure} under "
            f"{ctx.batch.policy_of(base)}, against the model's {_value(ctx, base, 'truth_past_checks')}.")
    if unseen is not None and cross is not None and cross["mean"] > 0:
        text += (f" A further {_value(ctx, base, 'crossings_after_checks')} crossings "
                 f"({_pct(unseen['mean'] / cross['mean'])} of all) boarded after the last check, where no record "
                 "can see them: no estimator here counts them.")
    return Item(text, {"claim": "estimate", "point": base, "estimate": est["mean"]})


def _adaptation_sentence(ctx: Context) -> Item | None:
    """The policy whose detection gain depends most on the behaviour model (the change furthest from zero
    in units of its interval's half-width), in the headline scenario's other factors."""
    rows = ctx.contrast[ctx.contrast["figure"] == "detections"]
    if rows.empty:
        return None
    half = (rows["change_high"] - rows["change_low"]) / 2
    strength = (rows["change"].abs() / half.where(half > 0)).fillna(0.0)
    r = rows.loc[strength.idxmax()]
    change = with_interval(r["change"], r["change_low"], r["change_high"], "count", True)
    verdict = ("changes the answer" if excludes_zero(r["change_low"], r["change_high"])
               else "does not change the answer by more than chance could")
    text = (f"Assuming people adapt {verdict}: {ctx.batch.policy_label(r['policy'])}'s detection gain against {ctx.baseline_name} "
            f"is {number(r['effect_reference'], 'count', True)} under {r['reference']} behaviour and "
            f"{number(r['effect'], 'count', True)} under {r['behaviour']} behaviour, a difference of {change}, "
            "paired by replication.")
    picks = {str(k): ctx.batch.policy_of(p) for k, p in ctx.best.items()}
    if len(set(picks.values())) > 1:
        text += " The policy detecting most within the delay limits differs between the behaviour models."
    return Item(text, {"claim": "adaptation", "policy": r["policy"], "change": r["change"]})


def _trust_sentence(ctx: Context) -> Item | None:
    trusted = ctx.evidence.trusted
    if trusted is None:
        if ctx.evidence.reliability.empty:
            return None
        return Item("No closed-form estimator is reliable for this crossing: none held the truth in 80–97% of runs "
                    "at its nominal interval level (see “How many are trying and getting through”).",
                    {"claim": "no-trusted-estimator"})
    return Item("Most trusted estimator (its intervals held the truth about as often as they claim): "
                + _uncap(bias_sentence(trusted, [])), {"claim": "trusted-estimator", "slug": trusted["slug"]})


def _sampled_headlines(ctx: Context) -> list[Item]:
    """Headlines for a design without policies: batch-wide means, and what moves crossings most."""
    days, runs = ctx.batch.days, ctx.runs
    items = []
    for figure, what in (("crossings", "crossings"), ("detections", "detections"),
                         ("crossings_after_checks", "crossings by people who boarded after the last check")):
        if figure not in runs:
            continue
        mean, low, high = bounded_mean_interval(runs[figure].to_numpy(float), figure_scale(figure))
        items.append(Item(
            f"Across the {len(runs)} runs of the design, a run of {days} days has {with_interval(mean, low, high)} "
            f"{what} on average (range {number(runs[figure].min())} to {number(runs[figure].max())}; "
            f"{MEASURE[figure].source}).", {"claim": f"pooled-{figure}", "mean": mean}))
    drivers = ctx.drivers
    if drivers is not None and len(drivers):
        crossing = drivers[(drivers["output"] == "crossings") & ((drivers["ci_low"] > 0) | (drivers["ci_high"] < 0))]
        if len(crossing):
            top = crossing.loc[crossing["prcc"].abs().idxmax()]
            direction = "rise" if top["prcc"] > 0 else "fall"
            items.append(Item(
                f"Crossings {direction} most clearly with {top['factor']}: partial rank correlation "
                f"{with_interval(top['prcc'], top['ci_low'], top['ci_high'], 'ratio', True)}.",
                {"claim": "driver", "factor": top["factor"]}))
        else:
            items.append(Item("No sampled factor moves crossings distinguishably (every partial rank correlation's "
                              "interval includes zero)."))
    return items


def section_headline(ctx: Context) -> Section:
    if ctx.batch.policy is None:
        items = [*_sampled_headlines(ctx), _trust_sentence(ctx)]
        return Section("headline", "Headline findings", (Bullets(tuple(i for i in items if i is not None)),))
    items: list[Item | None] = []
    for scenario in ctx.scenario_points:
        items.append(_best_sentence(ctx, scenario))
    primary = ctx.primary()
    items += [_crossings_sentence(ctx, primary), _estimate_sentence(ctx, primary),
              _displacement_sentence(ctx, primary), _adaptation_sentence(ctx), _trust_sentence(ctx)]
    blocks: list[Any] = [Bullets(tuple(i for i in items if i is not None))]
    if ctx.batch.policy is not None:
        blocks.append(Paragraph(
            f"Delay limits: {ctx.limits.describe(ctx.baseline_name)}, in the same scenario (means over replications; "
            "set with --max-delay-increase and --max-missed-increase). Intervals are 95%; a paired interval "
            "compares the same replication (seed) under both policies.", lead="How to read this."))
    return Section("headline", "Headline findings", tuple(blocks))


# -- 3. the comparison table -------------------------------------------------------------------------------


def _row_header(figure: str) -> str:
    m = MEASURE[figure]
    return f"{m.label}\n{m.unit}; {m.source}"


def _comparison_table(ctx: Context, scenario: tuple, index: int) -> Table:
    points = ctx.scenario_points[scenario]
    base = ctx.baseline_point(scenario)
    ordered = ([base] if base is not None else []) + [p for p in points if p != base]
    columns = ["Figure"] + [
        f"{ctx.batch.policy_of(p)}" + (" (baseline)" if p == base else "") for p in ordered
    ]
    rows: list[tuple[Cell, ...]] = []
    for measure in MEASURES:
        if ctx.cell(ordered[0], measure.key) is None:
            continue
        cells = [Cell(_row_header(measure.key), {"figure": measure.key}, header=True)]
        for p in ordered:
            r = ctx.cell(p, measure.key)
            if r is None:
                cells.append(Cell("n/a"))
                continue
            text = f"{number(r['mean'], measure.kind)}\n{interval(r['low'], r['high'], measure.kind, like=r['mean'])}"
            if is_number(r["difference"]):
                diff = r["difference"]
                text += (f"\nΔ {number(diff, measure.kind, True)} "
                         f"({interval(r['difference_low'], r['difference_high'], measure.kind, True, like=diff)})")
            data = {"figure": measure.key, "point": p, "mean": r["mean"], "low": r["low"], "high": r["high"],
                    "runs": r["runs"], "difference": r["difference"], "difference-low": r["difference_low"],
                    "difference-high": r["difference_high"]}
            cells.append(Cell(text, data))
        rows.append(tuple(cells))
    limits = [Cell("Within the delay limits", {"figure": "within"}, header=True)]
    for p in ordered:
        s = ctx.status.loc[p]
        if p == base:
            limits.append(Cell("baseline", {"point": p, "within": "true"}))
        else:
            verdict = "yes" if is_within(ctx.status, p) else "no"
            limits.append(Cell(f"{verdict}\np95 {number(s['time_in_port_change'], 'relative', True)}, missed "
                               f"{number(s['missed_change_points'], 'ratio', True)} pp",
                               {"point": p, "within": "true" if verdict == "yes" else "false"}))
    rows.append(tuple(limits))
    replications = int(ctx.batch.points.loc[ordered[0], "runs"])
    return Table(
        key=f"comparison-{index}",
        caption=f"{_cap(ctx.scenario_text(scenario))}: means over {replications} replications per policy",
        columns=tuple(columns),
        rows=tuple(rows),
    )


def _proxy_words(ctx: Context) -> str:
    proxy = ctx.evidence.proxy
    if proxy is None:
        return ("No estimator of people getting past the last check could run in enough of the runs, so the "
                "estimate row is n/a.")
    return (
        f"No estimator targets crossings themselves: observed records only see people who reached a check. The "
        f"closest target is the person-attempts that got past the last check ({ctx.evidence.last_station}) unfound "
        f"— crossings by people who boarded before it, plus any found later in secondary search — and the estimate "
        f"row shows {proxy['label']}, the best estimator of it in this batch (section 6: smallest |relative bias| "
        f"plus distance of its interval coverage from the nominal {ctx.evidence.level:.0%}). The row above it is "
        "the same quantity from truth; the row “boarded after the last check” counts crossings no record can see."
    )


def section_comparison(ctx: Context) -> Section:
    b = ctx.batch
    blocks: list[Any] = []
    if b.policy is None:
        blocks.append(Paragraph("This design samples ranges rather than comparing named policies, so there is no "
                                "baseline; the table gives each design point's means."))
        blocks.append(_point_table(ctx))
        return Section("comparison", "Comparison of design points", tuple(blocks))
    blocks.append(Paragraph(
        f"Each cell: the mean over replications, its 95% interval ({INTERVAL_WORDS['log']}; for shares a "
        f"{INTERVAL_WORDS['logit']}), and (Δ) the paired difference against "
        f"{ctx.baseline_name} with its 95% interval (Student t-interval on the per-replication differences; common "
        f"random numbers). Counts are over the {b.days} summarised days. Detections, time in port, missed departures and "
        "staff-hours are observed records; crossings, displacement out of the system and hazard-weighted boarding "
        "are model truth. Hazard-weighted boarding is the attempt-weighted mean hazard score (0 to 1) of where "
        "people boarded and how deep they hid (the boarding point's hazard plus the depth's, at most 1)."))
    if b.replications < MIN_REPLICATIONS:
        blocks.append(Paragraph(
            f"Only {b.replications} replication{'s' if b.replications != 1 else ''} per policy: these intervals are "
            f"unreliable, and a difference that happens to be the same in every replication is shown without an "
            f"interval rather than as exact (staff-hours, set by the roster, excepted). Run at least "
            f"{MIN_REPLICATIONS} before acting on any figure.", lead="Warning."))
    blocks.append(Paragraph(_proxy_words(ctx), lead="The estimate row."))
    for index, scenario in enumerate(ctx.scenario_points):
        blocks.append(_comparison_table(ctx, scenario, index))
    blocks.append(Paragraph(
        f"Values trace to {b.out.name}/summary.parquet (one row per run) and, for hazard-weighted boarding, "
        f"crossings after the last check and the estimate rows, to {b.out.name}/{RUNS_TABLE}, which the briefing "
        "computes from each run's truth and observed records over the same days.", lead="Sources."))
    return Section("comparison", "Policy comparison", tuple(blocks))


def _plain_value(value: Any) -> Any:
    """A numpy scalar as the Python value it holds."""
    return value.item() if hasattr(value, "item") else value


def _point_table(ctx: Context) -> Table:
    figures = [f for f in ("detections", "crossings", "time_in_port_p95_min", "hazard_weighted_share")
               if f in ctx.means.columns]
    labels = ctx.batch.labels
    rows = []
    for point in ctx.means.index:
        cells = [Cell(f"point {point}", {"point": point}, header=True)]
        cells += [Cell(shown_value(_plain_value(ctx.batch.points.loc[point, label]))) for label in labels]
        for f in figures:
            r = ctx.cell(point, f)
            cells.append(Cell(f"{number(r['mean'], MEASURE[f].kind)}\n{interval(r['low'], r['high'], MEASURE[f].kind)}",
                              {"figure": f, "point": point, "mean": r["mean"]}))
        rows.append(tuple(cells))
    return Table("points", "Design points: factor values and means over replications",
                 tuple(["Point", *labels, *(f"{MEASURE[f].label} ({MEASURE[f].unit})" for f in figures)]),
                 tuple(rows))


# -- 4. static vs adaptive; stakeholders --------------------------------------------------------------------


def section_assumptions(ctx: Context) -> Section:
    b = ctx.batch
    blocks: list[Any] = []
    if ctx.contrast.empty:
        model = b.world.get("adversary", {}).get("behaviour", "static")
        blocks.append(Paragraph(
            f"This batch does not compare behaviour models (every run assumes {model} behaviour), so how much the "
            "answer depends on assuming people adapt is not measured here. Add a factor with path "
            "adversary.behaviour and levels [static, adaptive] to measure it.", lead="Static against adaptive."))
    else:
        reference = str(ctx.contrast["reference"].iloc[0])
        blocks.append(Paragraph(
            f"The same policies under each behaviour model: each policy's paired effect against "
            f"{ctx.baseline_name} under {reference} behaviour, under the other model, and how much the effect "
            "changes (the difference of the two, paired by replication, with its 95% interval). A change whose "
            "interval excludes zero means the answer depends on the assumption.", lead="Static against adaptive."))
        picks = [f"under {ctx.scenario_text(scenario)}, {ctx.batch.policy_of(point)}"
                 for scenario, point in ctx.best.items()]
        if picks:
            blocks.append(Paragraph("The policy detecting most within the delay limits: " + "; ".join(picks) + "."))
        rows = []
        for _, r in ctx.contrast.iterrows():
            kind = MEASURE[r["figure"]].kind
            rows.append((
                Cell(b.policy_label(r["policy"]), {"point": r["point"]}, header=True),
                Cell(f"{MEASURE[r['figure']].label} ({MEASURE[r['figure']].source})"),
                Cell(number(r["effect_reference"], kind, True),
                     {"figure": r["figure"], "value": r["effect_reference"]}),
                Cell(number(r["effect"], kind, True), {"figure": r["figure"], "value": r["effect"]}),
                Cell(f"{number(r['change'], kind, True)}\n{interval(r['change_low'], r['change_high'], kind, True)}",
                     {"figure": r["figure"], "change": r["change"], "change-low": r["change_low"],
                      "change-high": r["change_high"]}),
            ))
        other = ", ".join(sorted(set(map(str, ctx.contrast["behaviour"]))))
        blocks.append(Table(
            "behaviour-contrast", f"Effect against {ctx.baseline_name}: {reference} vs {other} behaviour",
            ("Policy", "Figure", f"Effect, {reference}", f"Effect, {other}", "Change (95% interval)"),
            tuple(rows),
            note="Effects are paired differences of means against the baseline policy under the same behaviour "
                 "model; the change is their difference, replication by replication (all runs of a replication "
                 "share one seed).",
        ))
    if b.policy is not None:
        blocks.append(Paragraph(
            "Each stakeholder picks the policy best on the figure they answer for: the port operator the shortest "
            "95th-percentile time in port (then fewest missed departures), enforcement the most detections (then "
            "fewest crossings), safeguarding the lowest hazard-weighted boarding (then least displacement out of "
            "the system). Each cost is the paired difference, on the other stakeholder's figure, between this pick "
            "and the other's own pick.", lead="Who prefers what."))
        for index, scenario in enumerate(ctx.scenario_points):
            blocks.append(_stakeholder_table(ctx, scenario, index))
    return Section("assumptions", "Static against adaptive behaviour; stakeholders", tuple(blocks))


def _stakeholder_table(ctx: Context, scenario: tuple, index: int) -> Table:
    view = stakeholder_view(ctx.batch, ctx.table, ctx.runs, scenario)
    rows = []
    for _, r in view.iterrows():
        kind = MEASURE[r["figure"]].kind
        own = f"{number(r['value'], kind)}\n{MEASURE[r['figure']].label} ({MEASURE[r['figure']].unit})"
        if r["figure"] == "time_in_port_p95_min":  # the port also reads throughput on time and missed sailings
            for extra in (ON_TIME.key, "missed_departure_share"):
                if extra in ctx.means.columns:
                    m = MEASURE[extra]
                    own += f"\n{number(ctx.means.loc[r['point'], extra], m.kind)} {m.label.lower()} ({m.unit})"
        prefers = str(r["policy"])
        if r["tied_with"]:
            prefers += (f"\ntied with {r['tied_with']} on {MEASURE[r['figure']].label.lower()}; chosen on "
                        f"{MEASURE[r['tie_break']].label.lower()}")
        cells = [
            Cell(f"{r['stakeholder']}\n{next(s.wants for s in STAKEHOLDERS if s.name == r['stakeholder'])}",
                 header=True),
            Cell(prefers, {"stakeholder": r["stakeholder"], "point": r["point"]}),
            Cell(own),
        ]
        for other in STAKEHOLDERS:
            key = f"cost:{other.name}"
            if other.name == r["stakeholder"] or key not in view.columns or not is_number(r.get(key)):
                cells.append(Cell("—"))
                continue
            okind = MEASURE[other.figure].kind
            if r[key] == 0 and r[f"pick:{other.name}"] == r["point"]:
                cells.append(Cell("none (same pick)"))
            else:
                spread = interval(r[key + "_low"], r[key + "_high"], okind, True)
                cells.append(Cell(f"{number(r[key], okind, True)}\n{spread}", {"cost": r[key]}))
        rows.append(tuple(cells))
    columns = ["Stakeholder", "Prefers", "On their own figure"] + [
        f"Cost to {s.name.lower()} ({MEASURE[s.figure].label.lower()})" for s in STAKEHOLDERS
    ]
    caption = (f"Stakeholders: {ctx.scenario_text(scenario)}. Each prefers the policy best on their own figure; "
               "policies indistinguishable from it (paired 95% interval of the difference holds zero) are a tie, "
               "settled by their next figure. A cost is positive: how much worse another stakeholder's own figure "
               "is under this preference than under theirs, with its paired 95% interval (a negative cost is a gain)")
    return Table(f"stakeholders-{index}", caption, tuple(columns), tuple(rows))


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
    return frontier_figure(groups, limits, ctx.batch.days, ctx.batch.replications)


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

    iv = _intervention(ctx.batch)
    if iv is None:
        return None
    day, name = iv
    window = (max(0, day - 30), min(ctx.batch.end_day, day + 60))
    smooth = 7 if window[1] - window[0] >= 28 else 1
    panels = []
    hidden: dict[str, None] = {}
    for scenario, points in list(ctx.scenario_points.items())[:4]:
        base = ctx.baseline_point(scenario) if ctx.batch.policy is not None else points[0]
        shown = [base] + [p for p in [_gain_point(ctx, scenario)] if p is not None and p != base]
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
        notes.append(f"Not drawn, with fewer than two runs to average: {', '.join(_estimator_label(r) for _, r in few.iterrows())}.")
    if len(beyond):
        notes.append(f"Not drawn, beyond the twelve most reliable: {', '.join(_estimator_label(r) for _, r in beyond.iterrows())}.")
    behaviours = _behaviour_order(ctx)
    rows = []
    for _, r in pooled.iterrows():
        here = check[check["slug"] == r["slug"]]
        ratios = {bh: here.loc[here["behaviour"] == bh, "ratio"].to_numpy(float) for bh in behaviours}
        rows.append((_estimator_label(r), ratios))
    if not rows:
        return None
    return estimator_figure(rows, behaviours, ctx.batch.runs, " ".join(notes))


def _behaviour_order(ctx: Context) -> list[str]:
    present = [str(v) for v in pd.unique(ctx.evidence.check["behaviour"])]
    if ctx.batch.behaviour is not None:
        order = [str(v) for v in ctx.batch.factor(ctx.batch.behaviour).levels]
        return [v for v in order if v in present] + [v for v in present if v not in order]
    return present


def _estimator_label(row: pd.Series) -> str:
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


# -- 6. estimator reliability --------------------------------------------------------------------------------


def section_estimators(ctx: Context) -> Section:
    ev = ctx.evidence
    blocks: list[Any] = []
    if ev.reliability.empty:
        blocks.append(Paragraph("No estimator could be compared with truth in this batch."))
        return Section("estimators", "Estimator reliability", tuple(blocks))
    level = ev.level
    blocks.append(Paragraph(
        f"Every estimator was run on each run's observed records over the summarised days and compared with the "
        f"truth quantity it targets. Relative bias is the mean error over the mean truth (95% interval by the delta "
        f"method); coverage is the share of runs whose {level:.0%} interval held the truth (95% Wilson interval); "
        f"the score is |relative bias| + |coverage − {level:.0%}|, lower is better. Estimators that ran in fewer "
        f"than half of the {ctx.batch.runs} runs are not ranked; ≈ marks a truth that can only be counted "
        "approximately (a vehicle referred past a station after a false alarm is not recorded in truth). The "
        "expansion estimators divide by each check's sensitivity as trialled (the world's detection chances by "
        "class); where people hide deeper in the load, or in cargo that confounds the kit, or teams tire, checks "
        "find fewer than that and the expansion undercounts.",
        lead="How reliability is judged."))
    pooled = ev.reliability[ev.reliability["behaviour"] == ALL_BEHAVIOURS]
    pooled = pooled.sort_values(["eligible", "score", "exact"], ascending=[False, True, False])
    behaviours = _behaviour_order(ctx)
    rows = []
    for _, r in pooled.iterrows():
        per = ev.reliability[(ev.reliability["slug"] == r["slug"]) & (ev.reliability["behaviour"] != ALL_BEHAVIOURS)]
        bias = dict(zip(per["behaviour"].astype(str), per["relative_bias"]))
        by = "\n".join(f"{bh}: {number(bias[bh], 'relative', True)}" for bh in behaviours if bh in bias) or "n/a"
        rel = r["relative_bias"]
        rows.append((
            Cell(_estimator_label(r), {"slug": r["slug"]}, header=True),
            Cell(describe_quantity(str(r["quantity"]))),
            Cell(f"{int(r['n'])} of {ctx.batch.runs}"),
            Cell(f"{number(rel, 'relative', True)}\n"
                 f"{interval(r['relative_bias_low'], r['relative_bias_high'], 'relative', True, like=rel)}",
                 {"slug": r["slug"], "relative-bias": rel}),
            Cell(by),
            Cell(f"{_pct(r['coverage'])}\n{_pct(r['coverage_low'])} to {_pct(r['coverage_high'])}",
                 {"slug": r["slug"], "coverage": r["coverage"]}),
            Cell(number(r["score"], "ratio") if r["eligible"] else "not ranked",
                 {"slug": r["slug"], "score": r["score"], "eligible": str(bool(r["eligible"])).lower()}),
        ))
    blocks.append(Table(
        "reliability", "Estimator reliability over the batch (all runs pooled)",
        ("Estimator", "Estimates", "Runs", "Relative bias", "By behaviour", f"Coverage of {level:.0%} intervals",
         "Score"),
        tuple(rows),
    ))
    sentences = []
    if ev.trusted is not None:
        sentences.append(Item("Trusted: " + _uncap(bias_sentence(ev.trusted, [])),
                              {"claim": "trusted", "slug": ev.trusted["slug"]}))
    else:
        sentences.append(Item(f"No estimator is trusted: none is both ranked and has intervals that held the truth in "
                              f"80–97% of runs at the nominal {level:.0%}.", {"claim": "no-trusted-estimator"}))
    if ev.proxy is not None:
        caveat = "" if ev.proxy["reliable"] else " (not reliable here; shown without weight)"
        sentences.append(Item(f"Used for people getting past the last check{caveat}: "
                              + _uncap(bias_sentence(ev.proxy, [])), {"claim": "proxy", "slug": ev.proxy["slug"]}))
    per_behaviour = ev.reliability[(ev.reliability["behaviour"] != ALL_BEHAVIOURS) & ev.reliability["eligible"]]
    if per_behaviour["behaviour"].nunique() > 1:
        chosen = list(dict.fromkeys(r["slug"] for r in (ev.trusted, ev.proxy) if r is not None))
        for slug in chosen:
            for _, r in per_behaviour[per_behaviour["slug"] == slug].iterrows():
                sentences.append(Item(bias_sentence(r, ["behaviour"])))
    if sentences:
        blocks.append(Bullets(tuple(sentences)))
    failed = ev.skipped[ev.skipped["why"].str.startswith("cannot run")]
    if len(failed):
        notes = []
        for slug, group in failed.groupby("slug", sort=True):
            reason = str(group["why"].iloc[0]).removeprefix("cannot run: ")
            notes.append(Item(f"{slug} could not run in {group['run_id'].nunique()} of {ctx.batch.runs} runs "
                              f"(for example: {reason})."))
        blocks.append(Paragraph("Estimators that could not always run:"))
        blocks.append(Bullets(tuple(notes)))
    return Section("estimators", "Estimator reliability", tuple(blocks))


# -- what drives the answer (sampled designs) -----------------------------------------------------------------


def section_drivers(ctx: Context) -> Section | None:
    """PRCC and a PRIM box over the range factors; only for designs that sample ranges."""
    from ..analysis.discovery import DiscoveryInputError, prim

    ranged = [f.label for f in ctx.batch.factors if f.is_range]
    if not ranged:
        return None
    runs = ctx.runs
    blocks: list[Any] = []
    if ctx.drivers is not None:
        frame = ctx.drivers
        rows = tuple(
            (Cell(str(r["output"]), header=True), Cell(str(r["factor"])),
             Cell(f"{number(r['prcc'], 'ratio', True)}\n{interval(r['ci_low'], r['ci_high'], 'ratio', True)}",
                  {"output": r["output"], "factor": r["factor"], "prcc": r["prcc"]}),
             Cell(f"{r['p_value']:.2g}"))
            for _, r in frame.iterrows()
        )
        blocks.append(Paragraph(
            f"Partial rank correlation (Marino et al. 2008) of each figure with each sampled factor over "
            f"{len(runs)} runs, the other factors held fixed in rank: near ±1 a strong monotone influence, near 0 "
            "none (a non-monotone effect can hide behind 0).", lead="Which factors move the figures."))
        blocks.append(Table("prcc", "Partial rank correlation with 95% Fisher-z intervals",
                            ("Figure", "Factor", "PRCC", "p-value"), rows))
    else:
        blocks.append(Paragraph(f"Partial rank correlation could not be computed: {ctx.drivers_problem}."))
    if "crossings" in runs and runs["crossings"].notna().all():
        threshold = float(runs["crossings"].quantile(0.75))
        try:
            box = prim(runs[ranged].astype(float), (runs["crossings"] > threshold).astype(float),
                       outcome=f"crossings above {number(threshold)}")
            blocks.append(Paragraph(box.sentence(), lead="Where crossings run high (PRIM, Friedman & Fisher 1999)."))
        except DiscoveryInputError as exc:
            blocks.append(Paragraph(f"Scenario discovery could not be run: {exc}."))
    return Section("drivers", "Which assumptions drive the answer", tuple(blocks))


# -- 7. limitations and cautions --------------------------------------------------------------------------------


def section_limitations(ctx: Context) -> Section:
    b = ctx.batch
    items = [
        Item(f"Short and few: {b.replications} replications of {b.days} days per design point. Intervals say how "
             "much chance alone could move a mean; wide intervals mean the batch cannot tell policies apart, not "
             "that they are equal."),
        Item("Model truth is the model's own: crossings, displacement and hazard depend on assumed arrivals, "
             "choice rules and detection chances, all invented for a fictional world."),
        Item("Displacement out of the system is counted only in truth: people who move to a route outside the "
             "model are not seen again, and what happens to them there is not modelled."),
        Item("Boarding after the last check is invisible to every record and every estimator; estimates from "
             "observed records describe only people who reached a check."),
        Item("Behaviour models are assumptions about people: static shares, learning from outcomes, peers and "
             "rumour, or shared reinforcement. Real behaviour may differ from all of them."),
        Item("Hazard scores are illustrative ratings of boarding points (plus depth of hiding, not shown here), "
             "not measured risks."),
        Item("Delay limits are a choice of this briefing, not a rule of the port; other limits can pick another "
             "policy."),
    ]
    if any(not bool(x) for x in ctx.evidence.check.get("exact", pd.Series(dtype=bool))):
        items.append(Item("Some estimators are compared with a truth that can only be counted approximately (≈ in "
                          "section 6): truth does not record vehicles referred past a station after a false alarm."))
    return Section("limitations", "Assumptions, limitations and cautions",
                   (Paragraph(SAFETY, lead="Caution: people can be hurt."), Bullets(tuple(items))))


# -- 8. method appendix -------------------------------------------------------------------------------------------


def _sources() -> dict[str, str]:
    out = dict(frequency.SOURCES)
    out.update(removal.SOURCES)
    out[twosample.CHAPMAN] = twosample.SOURCE
    out[EXPANSION] = EXPANSION_SOURCE
    return out


def section_method(ctx: Context, brief_argv: Sequence[str]) -> Section:
    b = ctx.batch
    blocks: list[Any] = [Paragraph(
        "Undertow simulates the crossing one operating day at a time. Vehicles are rows in arrays (arrivals from "
        "an hourly, weekday-scaled Poisson profile; classes; stops at boarding points); stations run exact "
        "first-in-first-out multi-server queues with the world's selection rules and check methods (each with a "
        "detection chance per class and a false-alarm chance); an alarm refers a vehicle to secondary search; "
        "vehicles then join the first sailing whose cut-off they make. People who try to cross hidden in vehicles "
        "are agents that choose a boarding point, time band and vehicle class each day by a logit rule over "
        "perceived risk, effort, waiting and hazard, and learn according to the behaviour model; inspection teams "
        "staff stations and patrol boarding points by roster. Two record sets are kept apart: truth (every "
        "attempt and its outcome) and observed (what an agency holds: checks, detections, interdictions, linked "
        "identities, false alarms). Estimators read observed records only.", lead="Model structure.")]
    sources = _sources()
    check = ctx.evidence.check
    methods = sorted(set(check["method"].str.removesuffix("_undetected"))) if len(check) else []
    items = []
    for method in methods:
        key = next((k for k in sources if method == k or method.startswith(f"{k} at '")), None)
        items.append(Item(f"{method}: {sources.get(key, 'see abm.estimate') if key else 'see abm.estimate'}"))
    items.append(Item("Interval coverage: Wilson (1927) score interval; relative bias: delta method for a ratio of "
                      "means. Means over replications: log-normal interval for counts and times (Burnham et al. 1987), "
                      "logit-scale delta-method interval for shares. Paired differences: Student-t interval on "
                      "per-replication differences."))
    if any(f.is_range for f in b.factors):
        items.append(Item("Sensitivity: partial rank correlation (Marino et al. 2008); scenario discovery: PRIM "
                          "(Friedman & Fisher 1999)."))
    blocks.append(Paragraph("Estimators and statistics, with their published sources:", lead="Estimators."))
    blocks.append(Bullets(tuple(items)))
    seeds = ", ".join(str(s) for s in b.seeds)
    blocks.append(Paragraph(
        f"Root seed {b.seed} gives one seed per replication ({seeds}), shared by every design point "
        "(common random numbers). Within a run, one seed is spawned into separate streams for traffic, boarding, "
        "detection and agents, so the same world and seed give identical records on every executor.",
        lead="Seeds."))
    command = " ".join(shlex.quote(str(a)) for a in b.command) or "(not recorded)"
    blocks.append(Paragraph(command, lead="The batch was made with:"))
    blocks.append(Paragraph(" ".join(shlex.quote(str(a)) for a in brief_argv), lead="This briefing was made with:"))
    blocks.append(Paragraph(
        f"Experiment file {b.experiment_file}; {b.out.name}/experiment.json holds the experiment, the world's "
        f"SHA-256 digest, the design points and package versions. The per-run tables behind every number are "
        f"{b.out.name}/summary.parquet, {b.out.name}/{RUNS_TABLE} and {b.out.name}/{CHECK_TABLE}.",
        lead="To reproduce."))
    return Section("method", "Method appendix", tuple(blocks))


# -- assembling and writing ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Briefing:
    """A built briefing and the tables behind it."""

    document: Document
    batch: BatchView
    evidence: Evidence
    runs: pd.DataFrame
    comparison: pd.DataFrame
    status: pd.DataFrame
    best: dict[tuple, int]


def _drivers(batch: BatchView, runs: pd.DataFrame) -> tuple[pd.DataFrame | None, str]:
    """PRCC of crossings, detections and p95 time in port with the range factors; (None, why) when it cannot run."""
    from ..analysis.sensitivity import SensitivityInputError, prcc

    ranged = [f.label for f in batch.factors if f.is_range]
    if not ranged:
        return None, "the design samples no ranges"
    outputs = [f for f in ("crossings", "detections", "time_in_port_p95_min") if f in runs]
    try:
        return prcc(runs[ranged].astype(float), runs[outputs].astype(float)).to_frame(), ""
    except SensitivityInputError as exc:
        return None, str(exc)


def _silent(stage: str) -> None:
    return None


def build(out: str | Path, baseline: str | None = None, limits: DelayLimits = DelayLimits(),
          argv: Sequence[str] = (), report: Callable[[str], None] = _silent) -> Briefing:
    """Read a batch folder and build its briefing (nothing is written but the two per-run tables).

    ``report`` is told each stage as it starts (the command prints them).
    """
    report(f"reading {out}")
    batch = load_batch(out, baseline)
    report(f"weighing the estimators against truth in {batch.runs} runs")
    evidence = gather(batch)
    runs = run_table(batch, evidence)
    table = comparison(batch, runs)
    status = delay_status(batch, table, limits)
    best = best_within_limits(batch, table, status)
    drivers, problem = _drivers(batch, runs)
    ctx = Context(
        batch=batch, evidence=evidence, runs=runs, table=table, means=means(table), status=status, best=best,
        on_frontier=frontier(batch, table), limits=limits,
        contrast=behaviour_contrast(batch, runs, CONTRAST_FIGURES), scenario_points=scenarios(batch),
        drivers=drivers, drivers_problem=problem,
    )
    report("comparing policies")
    sections = [section_question(ctx), section_answer(batch, evidence), section_headline(ctx), section_comparison(ctx),
                section_assumptions(ctx)]
    report("drawing figures")
    sections += [section_figures(ctx), section_estimators(ctx)]
    drivers = section_drivers(ctx)
    if drivers is not None:
        sections.append(drivers)
    sections += [section_limitations(ctx), section_method(ctx, argv or ("undertow", "brief", str(out)))]
    document = Document(
        title=f"Briefing: {batch.name}",
        subtitle=(f"{batch.world_name} — {batch.runs} simulated runs. Model estimates from a fictional world, not "
                  "counts of real people; figures are labelled truth (simulated) or observed (what an agency holds)."),
        sections=tuple(sections),
        footer="Made by undertow brief from the batch's tables. People hidden in vehicles can be hurt: read the "
               "cautions in section “Assumptions, limitations and cautions” before using any figure.",
        bottom_line=bottom_line(ctx),
    )
    return Briefing(document, batch, evidence, runs, table, status, best)


def parse_formats(text: str) -> tuple[str, ...]:
    """``html,md`` -> ('html', 'md'); raise BriefingError on anything else."""
    chosen = tuple(dict.fromkeys(part.strip().lower() for part in text.split(",") if part.strip()))
    unknown = [f for f in chosen if f not in FORMATS]
    if unknown or not chosen:
        raise BriefingError(f"--format: expected html, md or both (html,md), got '{text}'")
    return chosen


def write(briefing: Briefing, formats: Sequence[str] = FORMATS) -> dict[str, Path]:
    """Write the chosen formats into the batch folder; return their paths."""
    out = briefing.batch.out
    paths: dict[str, Path] = {}
    if "html" in formats:
        paths["html"] = _write_text(out / HTML_FILE, html_renderer.render(briefing.document))
    if "md" in formats:
        figures = [b for s in briefing.document.sections for b in s.blocks if isinstance(b, FigureBlock)]
        for key in FIGURE_KEYS - {f.key for f in figures}:  # a figure an earlier briefing drew and this one does not
            (out / markdown_renderer.FIGURES_DIR / f"{key}.png").unlink(missing_ok=True)
        for figure in figures:
            write_atomically(out / markdown_renderer.figure_path(figure), lambda tmp: tmp.write_bytes(figure.png))
        paths["md"] = _write_text(out / MD_FILE, markdown_renderer.render(briefing.document))
    return paths


def _write_text(path: Path, text: str) -> Path:
    """Write atomically (temporary name, then rename), as runs are written."""
    return write_atomically(path, lambda tmp: tmp.write_text(text, encoding="utf-8"))


def brief(out: str | Path, baseline: str | None = None, formats: Sequence[str] = FORMATS,
          limits: DelayLimits = DelayLimits(), argv: Sequence[str] = (),
          report: Callable[[str], None] = _silent) -> tuple[Briefing, dict[str, Path]]:
    """Build and write a batch folder's briefing, telling ``report`` each stage."""
    briefing = build(out, baseline, limits, argv, report)
    report(f"writing {', '.join(formats)}")
    return briefing, write(briefing, formats)
