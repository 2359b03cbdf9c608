"""Briefing sections from estimator reliability on: what drives the answer, limitations and cautions, the method."""

from __future__ import annotations

import shlex
from collections.abc import Sequence
from typing import Any

import pandas as pd

from ..analysis.estimator_check.sentences import bias_sentence
from ..analysis.estimator_check.truth import describe_quantity
from ..estimate import frequency, removal, twosample
from ..estimate.expansion import EXPANSION
from ..estimate.expansion import SOURCE as EXPANSION_SOURCE
from .document import Bullets, Cell, Item, Paragraph, Section, Table, interval, number
from .evidence import ALL_BEHAVIOURS, CHECK_TABLE, RUNS_TABLE
from .context import SAFETY, Context, percent, uncapitalised
from .figure_section import behaviour_order, estimator_label


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
    behaviours = behaviour_order(ctx)
    rows = []
    for _, r in pooled.iterrows():
        per = ev.reliability[(ev.reliability["slug"] == r["slug"]) & (ev.reliability["behaviour"] != ALL_BEHAVIOURS)]
        bias = dict(zip(per["behaviour"].astype(str), per["relative_bias"]))
        by = "\n".join(f"{bh}: {number(bias[bh], 'relative', True)}" for bh in behaviours if bh in bias) or "n/a"
        rel = r["relative_bias"]
        rows.append((
            Cell(estimator_label(r), {"slug": r["slug"]}, header=True),
            Cell(describe_quantity(str(r["quantity"]))),
            Cell(f"{int(r['n'])} of {ctx.batch.runs}"),
            Cell(f"{number(rel, 'relative', True)}\n"
                 f"{interval(r['relative_bias_low'], r['relative_bias_high'], 'relative', True, like=rel)}",
                 {"slug": r["slug"], "relative-bias": rel}),
            Cell(by),
            Cell(f"{percent(r['coverage'])}\n{percent(r['coverage_low'])} to {percent(r['coverage_high'])}",
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
        sentences.append(Item("Trusted: " + uncapitalised(bias_sentence(ev.trusted, [])),
                              {"claim": "trusted", "slug": ev.trusted["slug"]}))
    else:
        sentences.append(Item(f"No estimator is trusted: none is both ranked and has intervals that held the truth in "
                              f"80–97% of runs at the nominal {level:.0%}.", {"claim": "no-trusted-estimator"}))
    if ev.proxy is not None:
        caveat = "" if ev.proxy["reliable"] else " (not reliable here; shown without weight)"
        sentences.append(Item(f"Used for people getting past the last check{caveat}: "
                              + uncapitalised(bias_sentence(ev.proxy, [])), {"claim": "proxy", "slug": ev.proxy["slug"]}))
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
        Item(f"Delay limits are a choice of this briefing, not a rule of {ctx.words.the_site}; other limits can pick "
             "another policy."),
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
        + (f"vehicles then join the first {ctx.words.service} whose check-in they make and that has room. "
           if ctx.words.departs else f"vehicles then leave {ctx.words.the_site} as soon as they are cleared. ")
        + "People who try to cross hidden in vehicles "
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
