"""Briefing sections 3 and 4: the policy comparison table, static against adaptive behaviour, the stakeholders."""

from __future__ import annotations

from typing import Any

from ..experiment.compare import INTERVAL_WORDS, MIN_REPLICATIONS
from .document import Cell, Paragraph, Section, Table, interval, is_number, number
from .evidence import RUNS_TABLE
from .store_view import shown_value
from .context import Context, capitalised, delay_change_text
from .tables import MEASURES, ON_TIME, STAKEHOLDERS, STOPPED, is_within, stakeholder_view


# -- 3. the comparison table -------------------------------------------------------------------------------


def _row_header(ctx: Context, figure: str) -> str:
    m = ctx.measure[figure]
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
        cells = [Cell(_row_header(ctx, measure.key), {"figure": measure.key}, header=True)]
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
        if p == base:
            limits.append(Cell("baseline", {"point": p, "within": "true"}))
        else:
            verdict = "yes" if is_within(ctx.status, p) else "no"
            limits.append(Cell(f"{verdict}\n{delay_change_text(ctx, p, short=True)}",
                               {"point": p, "within": "true" if verdict == "yes" else "false"}))
    rows.append(tuple(limits))
    replications = int(ctx.batch.points.loc[ordered[0], "runs"])
    return Table(
        key=f"comparison-{index}",
        caption=f"{capitalised(ctx.scenario_text(scenario))}: means over {replications} replications per policy",
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
        f"random numbers). Counts are over the {b.days} summarised days. Detections (people found in checks), people "
        f"stopped at boarding points (by patrols, before they board), {ctx.words.time_at_site}, "
        f"{ctx.words.missed + ' and ' if ctx.words.departs else 'and '}"
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
            cells.append(Cell(f"{number(r['mean'], ctx.measure[f].kind)}\n{interval(r['low'], r['high'], ctx.measure[f].kind)}",
                              {"figure": f, "point": point, "mean": r["mean"]}))
        rows.append(tuple(cells))
    return Table("points", "Design points: factor values and means over replications",
                 tuple(["Point", *labels, *(f"{ctx.measure[f].label} ({ctx.measure[f].unit})" for f in figures)]),
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
            kind = ctx.measure[r["figure"]].kind
            rows.append((
                Cell(b.policy_label(r["policy"]), {"point": r["point"]}, header=True),
                Cell(f"{ctx.measure[r['figure']].label} ({ctx.measure[r['figure']].source})"),
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
            ctx.words.fill("Each stakeholder picks the policy best on the figure they answer for: the {site} operator "
                           "the shortest 95th-percentile {time_at_site}"
                           + (" (then fewest {missed}), " if ctx.words.departs else ", "))
            + "enforcement the most people stopped, found in checks or at boarding points (then fewest crossings) — "
            "both count, since a patrol that stops people before they board serves enforcement as a check that finds "
            "them does — safeguarding the lowest hazard-weighted boarding (then least displacement out of the "
            "system). Each cost is the paired difference, on the other stakeholder's figure, between this pick and "
            "the other's own pick.", lead="Who prefers what."))
        for index, scenario in enumerate(ctx.scenario_points):
            blocks.append(_stakeholder_table(ctx, scenario, index))
    return Section("assumptions", "Static against adaptive behaviour; stakeholders", tuple(blocks))


def _stakeholder_table(ctx: Context, scenario: tuple, index: int) -> Table:
    view = stakeholder_view(ctx.batch, ctx.table, ctx.runs, scenario)
    rows = []
    for _, r in view.iterrows():
        kind = ctx.measure[r["figure"]].kind
        own = f"{number(r['value'], kind)}\n{ctx.measure[r['figure']].label} ({ctx.measure[r['figure']].unit})"
        # the operator also reads throughput on time and missed departures; enforcement the two kinds of stop
        extras = {"time_in_port_p95_min": (ON_TIME.key, "missed_departure_share") if ctx.words.departs else (),
                  STOPPED.key: ("detections", "interdictions")}.get(r["figure"], ())
        for extra in extras:
            if extra in ctx.means.columns:
                m = ctx.measure[extra]
                own += f"\n{number(ctx.means.loc[r['point'], extra], m.kind)} {m.label.lower()} ({m.unit})"
        own_view = next(s for s in STAKEHOLDERS if s.name == r["stakeholder"])
        wants = own_view.wants if ctx.words.departs else (own_view.wants_without_departures or own_view.wants)
        prefers = str(r["policy"])
        if r["tied_with"]:
            settled = (f"chosen on {ctx.measure[r['tie_break']].label.lower()}" if r["tie_break"] != r["figure"]
                       else "chosen on its mean")
            prefers += f"\ntied with {r['tied_with']} on {ctx.measure[r['figure']].label.lower()}; {settled}"
        cells = [
            Cell(f"{ctx.stakeholder_name(own_view)}\n"
                 f"{ctx.words.fill(wants)}",
                 header=True),
            Cell(prefers, {"stakeholder": r["stakeholder"], "point": r["point"]}),
            Cell(own),
        ]
        for other in STAKEHOLDERS:
            key = f"cost:{other.name}"
            if other.name == r["stakeholder"] or key not in view.columns or not is_number(r.get(key)):
                cells.append(Cell("—"))
                continue
            okind = ctx.measure[other.figure].kind
            if r[key] == 0 and r[f"pick:{other.name}"] == r["point"]:
                cells.append(Cell("none (same pick)"))
            else:
                spread = interval(r[key + "_low"], r[key + "_high"], okind, True)
                cells.append(Cell(f"{number(r[key], okind, True)}\n{spread}", {"cost": r[key]}))
        rows.append(tuple(cells))
    columns = ["Stakeholder", "Prefers", "On their own figure"] + [
        f"Cost to {ctx.stakeholder_name(s).lower()} ({ctx.measure[s.figure].label.lower()})" for s in STAKEHOLDERS
    ]
    caption = (f"Stakeholders: {ctx.scenario_text(scenario)}. Each prefers the policy best on their own figure; "
               "policies indistinguishable from it (paired 95% interval of the difference holds zero) are a tie, "
               "settled by their next figure. A cost is positive: how much worse another stakeholder's own figure "
               "is under this preference than under theirs, with its paired 95% interval (a negative cost is a gain)")
    return Table(f"stakeholders-{index}", caption, tuple(columns), tuple(rows))
