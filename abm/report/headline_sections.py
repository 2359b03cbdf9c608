"""The briefing's first sections: the question and its scenario, and the headline findings.

Each sentence is built from the batch's tables through :class:`abm.report.context.Context`, and every number
carries its interval.
"""

from __future__ import annotations

import math
from typing import Any

from ..analysis.estimator_check.sentences import bias_sentence
from ..experiment.compare import bounded_mean_interval, figure_scale
from .context import (
    BEHAVIOUR_WORDS, Context, delay_change_text, effect_text, gain_point, intervention_of, level_list, percent,
    uncapitalised, value_text,
)
from .document import Bullets, Item, Paragraph, Section, excludes_zero, is_number, number, with_interval
from .load_notes import load_blocks
from .tables import MEASURE


def section_question(ctx: Context) -> Section:
    b = ctx.batch
    blocks: list[Any] = []
    if b.policy is not None:
        question = (
            f"Which inspection policy at {b.world_name} finds the most people hidden in vehicles without delaying "
            f"{ctx.words.the_site} beyond what it can bear — and what does each policy do to the people who try: how many get "
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
            varies.append(Item(f"{head} — " + "; ".join(level_list(b, factor.label))))
    if varies:
        blocks.append(Paragraph("What varies between design points:"))
        blocks.append(Bullets(tuple(varies)))
    else:
        blocks.append(Paragraph("Nothing varies between design points: every run is a replication of one world."))
    if b.behaviour is None:
        model = b.world.get("adversary", {}).get("behaviour", "static")
        blocks.append(Paragraph(f"Every run assumes {model} behaviour: {BEHAVIOUR_WORDS.get(model, model)}."))
    blocks += load_blocks(b, [p for p, c in b.compare_to.items() if c is None])
    iv = intervention_of(b)
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
            outside = (f" {ctx.batch.policy_of(top)} detects more ({effect_text(ctx, top, 'detections')}) but lies "
                       f"outside the delay limits ({delay_change_text(ctx, top)}).")
        text = (f"{under}no policy within the delay limits detects more than the baseline, {policy}: "
                f"{value_text(ctx, best, 'detections')} persons over {days} days.{outside}")
    else:
        row = ctx.cell(best, "detections")
        sure = row is not None and excludes_zero(row["difference_low"], row["difference_high"])
        most = "detects the most" if sure else "has the most detections on average"  # not "detects more" on chance
        text = (f"{under}{policy} {most} among the policies within the delay limits: "
                f"{value_text(ctx, best, 'detections')} persons over {days} days, {effect_text(ctx, best, 'detections')}.")
    return Item(text, data)


def _displacement_sentence(ctx: Context, scenario: tuple) -> Item | None:
    """How much of a policy's apparent gain (more detections) is fewer crossings, and how much displacement."""
    point = gain_point(ctx, scenario)
    if point is None:
        return None
    rows = {f: ctx.cell(point, f) for f in ("detections", "crossings", "displaced_out", "hazard_weighted_share")}
    if any(r is None for r in rows.values()):
        return None
    d_cross, d_out = float(rows["crossings"]["difference"]), float(rows["displaced_out"]["difference"])
    policy = ctx.batch.policy_of(point)
    text = f"{ctx.under(scenario)}{policy} changes detections by {effect_text(ctx, point, 'detections')}"
    share: float | None = None
    crossings_fell = is_number(rows["crossings"]["difference_high"]) and rows["crossings"]["difference_high"] < 0
    if crossings_fell:
        share = min(1.0, max(0.0, d_out) / -d_cross)
        text += (f"; crossings change by {effect_text(ctx, point, 'crossings')} and displacement out of the system "
                 f"changes by {effect_text(ctx, point, 'displaced_out')}, so about {percent(share)} of the fall in "
                 "crossings is people moved to routes outside the crossing rather than stopped")
        displaced = rows["displaced_out"]
        if not excludes_zero(displaced["difference_low"], displaced["difference_high"]):
            text += " (at the means: the change in displacement is itself within what chance could give)"
        text += "."
    else:
        text += (f"; crossings change by {effect_text(ctx, point, 'crossings')}, so the batch shows no fall in "
                 "people getting through to set against any extra detections (people found mostly try again), "
                 f"and displacement out of the system changes by {effect_text(ctx, point, 'displaced_out')}.")
    hazard = rows["hazard_weighted_share"]
    direction = ""
    if excludes_zero(hazard["difference_low"], hazard["difference_high"]):
        direction = " — toward more dangerous boarding" if hazard["difference"] > 0 else " — toward safer boarding"
    text += f" Hazard-weighted boarding changes by {effect_text(ctx, point, 'hazard_weighted_share')}{direction}."
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
    share = f", {percent(row['mean'] / attempts)} of {number(attempts)} person-attempts" if is_number(attempts) else ""
    with_scenario = f" with {ctx.scenario_text(scenario)}" if ctx.batch.scenario_labels else ""
    text = (f"The model implies {value_text(ctx, base, 'crossings')} crossings over {days} days under "
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
        figure = value_text(ctx, base, "est_crossings")
    else:  # an estimator whose intervals miss is not quoted with one
        figure = (f"{number(est['mean'])} (not reliable here: its {float(proxy['level']):.0%} intervals held the truth "
                  f"in {percent(proxy['coverage'])} of runs, so no interval is quoted)")
    text = (f"{ctx.under(scenario)}from observed records alone, {label} puts the person-attempts that got past the "
            f"last check ({ctx.evidence.last_station}) unfound at {figure} under "
            f"{ctx.batch.policy_of(base)}, against the model's {value_text(ctx, base, 'truth_past_checks')}.")
    if unseen is not None and cross is not None and cross["mean"] > 0:
        text += (f" A further {value_text(ctx, base, 'crossings_after_checks')} crossings "
                 f"({percent(unseen['mean'] / cross['mean'])} of all) boarded after the last check, where no record "
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
                + uncapitalised(bias_sentence(trusted, [])), {"claim": "trusted-estimator", "slug": trusted["slug"]})


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
            f"Delay limits: {ctx.limits.describe(ctx.baseline_name, ctx.words)}, in the same scenario (means over replications; "
            f"set with --max-delay-increase{' and --max-missed-increase' if ctx.words.departs else ''}). Intervals "
            "are 95%; a paired interval "
            "compares the same replication (seed) under both policies.", lead="How to read this."))
    return Section("headline", "Headline findings", tuple(blocks))


# -- assembling and writing ------------------------------------------------------------------------------------------
