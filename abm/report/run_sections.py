"""The single-run report's sections: the run and its load, day by day, boarding, estimators, queues, lanes,
departures, cautions, and how to check it.

Every section reads a :class:`~abm.report.run_view.RunView` cut to the days
the run's summary covers, speaks in the world's own words
(:func:`abm.world.words.words_for`), labels each figure with its record set,
and marks what comes from simulated truth as something an agency never sees.
"""

from __future__ import annotations

import shlex
from collections.abc import Sequence
from typing import Any

import pandas as pd

from ..analysis.estimator_check.cache import cached_results
from ..analysis.estimator_check.runs import truth_for_run
from ..analysis.estimator_check.truth import method_slug, slug_of
from ..experiment.single import SUMMARY_LABELS
from ..port.load import MINUTES_PER_DAY, OVERLOAD, load_report
from ..records import DEPARTURES_FILE, QUEUE_HOURS_FILE, QUEUES_FILE
from ..world.words import Words
from .context import SAFETY, percent
from .document import Bullets, Cell, Item, Paragraph, Section, Table, interval, is_number, number
from .load_notes import PREFIX
from .run_figures import boarding_figure, daily_figure, departures_figure, lanes_figure, queues_figure, waits_figure
from .run_view import RunView

# (summary key, display label, kind for number(), record set); record sets as summary.json's sources say
TOTALS = (
    ("vehicles", "Vehicles arriving", "count"),
    ("checks", "Checks (a vehicle can be checked at several stations)", "count"),
    ("alarms", "Alarms raised", "count"),
    ("false_alarms", "False alarms (nothing found after the alarm)", "count"),
    ("detections", "Persons found at checks", "count"),
    ("interdictions", "Persons stopped at boarding points", "count"),
    ("staff_hours", "Lane-hours on duty", "count"),
    ("arrived", "Persons arriving to try", "count"),
    ("attempts", "Person-attempts", "count"),
    ("crossings", "Crossings", "count"),
    ("crossings_after_last_check", "Crossings by people who boarded after the last check", "count"),
    ("displaced_out", "Persons who moved to routes outside the crossing", "count"),
)
SOURCE_WORDS = {"observed": "observed", "truth": "simulated truth (never seen by an agency)"}


def shown(x: Any, kind: str = "count") -> str:
    """A number as the report prints it: a whole count as a whole number (one run counts, it does not average),
    anything else as the briefing prints it (:func:`abm.report.document.number`)."""
    if kind == "count" and is_number(x) and float(x).is_integer():
        return f"{int(float(x)):,}"
    return number(x, kind)


def label(name: str) -> str:
    """A world name as words: "manual_search" -> "manual search"."""
    return str(name).replace("_", " ")


def _cell(x: Any, kind: str = "count", /, **data: Any) -> Cell:
    """A number as the report prints it; ``data`` becomes the cell's data-* attributes (the exact values)."""
    return Cell(shown(x, kind), {k.replace("_", "-"): v for k, v in data.items()})


# -- the run and its load --------------------------------------------------------------------------------------


def section_run(view: RunView) -> Section:
    """What was simulated, on which days, and whether the world's stations and departures carry its traffic."""
    m, w = view.manifest, view.words
    blocks: list[Any] = [Paragraph(
        f"{view.world.name}, a fictional crossing with illustrative numbers, simulated for "
        f"{view.warmup + view.days} operating days with seed {m.get('seed', 'n/a')}. Every figure below covers "
        f"{view.window_text}" + (", leaving the warm-up out as the run's summary does" if view.warmup else "")
        + f". {len(view.world.stations)} stations check vehicles on their way through {w.the_site}; people try to "
        f"board at {len(view.world.boarding_points)} boarding points.", lead="The run.")]
    inside = [i for i in view.world.interventions if i.day <= view.last_day]  # later ones never took effect
    if inside:
        changes = "; ".join(f"day {i.day}: {i.name}" for i in inside)
        blocks.append(Paragraph(f"The world changes during the run ({changes}).", lead="Interventions."))
    warnings = [x.removeprefix(PREFIX) for x in load_report(view.world).warnings]
    if warnings:
        blocks.append(Paragraph(
            f"The world is overloaded at {len(warnings)} place{'s' if len(warnings) != 1 else ''} (a fluid estimate "
            f"from the world file on its busiest weekday: offered load of {OVERLOAD} or more, or {w.services} booked "
            f"beyond their places), so queues and {w.missed} below come partly from want of capacity, not from "
            "checks alone:", lead="Load."))
        blocks.append(Bullets(tuple(Item(x, {"claim": "load-warning"}) for x in warnings)))
    elif view.world.departures is None:
        blocks.append(Paragraph(
            f"Every station carries its traffic (a fluid estimate from the world file on its busiest weekday: offered "
            f"load below {OVERLOAD}); vehicles leave on clearance.", lead="Load."))
    else:
        blocks.append(Paragraph(
            f"Every station and {w.service} carries its traffic (a fluid estimate from the world file on its busiest "
            f"weekday: offered load below {OVERLOAD}, {w.services} within their places).", lead="Load."))
    return Section("run", "The run and its load", tuple(blocks))


# -- day by day ---------------------------------------------------------------------------------------------------


def _totals_rows(view: RunView) -> list[tuple[Cell, ...]]:
    s, sources, w = view.summary, view.summary.get("sources", {}), view.words
    rows = []
    extra = [(key, w.fill(SUMMARY_LABELS[key]), "minutes") for key in ("time_in_port_p50_min", "time_in_port_p95_min")]
    if view.world.departures is not None:
        extra.append(("missed_departure_share", f"Vehicles that missed their booked {w.service}", "percent"))
    for key, label, kind in (*TOTALS, *extra):
        if key not in s:
            continue
        per_day = number(s[key] / view.days, "rate") if kind == "count" and is_number(s[key]) else ""
        rows.append((Cell(label, {"figure": key}, header=True), _cell(s[key], kind, figure=key, value=s[key]),
                     Cell(per_day), Cell(SOURCE_WORDS.get(sources.get(key, ""), sources.get(key, "")))))
    return rows


def section_daily(view: RunView) -> Section:
    """Totals over the summarised days, then the daily series."""
    arrivals = view.arrivals.groupby("day")["persons"].sum()
    return Section("daily", "Day by day", (
        Table("run-totals", f"Totals over {view.window_text}", ("Figure", "Total", "Per day", "Record set"),
              tuple(_totals_rows(view)),
              note="Observed figures are what an agency's own records would hold; simulated truth is the model's "
                   "own and an agency never sees it. Model estimates, not counts."),
        daily_figure(view.daily, arrivals, view.window_text),
    ))


# -- where attempts boarded, and what was observed -------------------------------------------------------------


def _boarding_table(view: RunView) -> pd.DataFrame:
    """Persons per boarding point (rows, world order) and outcome (columns), truth."""
    table = view.attempts.pivot_table(index="point", columns="outcome", values="persons", aggfunc="sum", fill_value=0)
    return table.reindex([p.name for p in view.world.boarding_points], fill_value=0)


def _observed_rows(view: RunView) -> list[tuple[Cell, ...]]:
    checks = view.checks.groupby("station")[["vehicles", "checks", "alarms"]].sum()
    false = view.false_alarms.groupby("station").size()
    found = view.encounters.groupby(["place_kind", "place"]).size()
    rows = []
    for s in view.world.stations:
        c = checks.loc[s.name] if s.name in checks.index else pd.Series(0, index=checks.columns)
        persons = int(found.get(("station", s.name), 0))
        rows.append((Cell(label(s.name), {"place": s.name}, header=True), Cell(f"station ({s.role})"),
                     _cell(c.get("vehicles", 0)), _cell(c.get("checks", 0)), _cell(c.get("alarms", 0)),
                     _cell(int(false.get(s.name, 0))), _cell(persons, place=s.name, persons=persons)))
    for p in view.world.boarding_points:
        persons = int(found.get(("boarding_point", p.name), 0))
        rows.append((Cell(label(p.name), {"place": p.name}, header=True), Cell("boarding point"), Cell("—"), Cell("—"),
                     Cell("—"), Cell("—"), _cell(persons, place=p.name, persons=persons)))
    return rows


def section_boarding(view: RunView) -> Section:
    """Where attempts boarded and what became of them (truth), beside what the records show (observed)."""
    table = _boarding_table(view)
    where = {p.name: ("after the last check" if p.before_station == "departure" else f"before {label(p.before_station)}")
             for p in view.world.boarding_points}
    hazard = {p.name: p.hazard for p in view.world.boarding_points}
    rows = []
    for point, r in table.iterrows():
        total = int(r.sum())
        rows.append((Cell(label(str(point)), {"point": point}, header=True), Cell(where[str(point)]),
                     Cell(number(hazard[str(point)], "ratio")), _cell(total, point=point, attempts=total),
                     *(_cell(int(r.get(o, 0))) for o in ("crossed", "detected", "interdicted", "no_vehicle")),
                     Cell(percent(r.get("crossed", 0) / total) if total else "n/a")))
    return Section("boarding", "Where attempts boarded, and what was observed", (
        boarding_figure(table, view.window_text),
        Table("run-boarding-truth", "Person-attempts by boarding point — simulated truth, an agency never sees this",
              ("Boarding point", "Where", "Hazard (illustrative)", "Attempts", "Crossed", "Found at a check",
               "Stopped at the point", "Found no vehicle", "Share crossed"), tuple(rows)),
        Table("run-observed", "What the agency's records show at each place (observed)",
              ("Place", "Kind", "Vehicles reaching it", "Checked", "Alarms", "False alarms", "Persons found or stopped"),
              tuple(_observed_rows(view)),
              note="Persons found at a secondary search area are counted there; its primary station's alarm sent "
                   "them. Nobody who boards after the last check can appear in any record."),
    ))


# -- the estimators -----------------------------------------------------------------------------------------------


def section_estimators(view: RunView) -> Section:
    """Every closed-form estimator on this run's observed records, with the truth it targets beside it."""
    results, failures = cached_results(view.path)  # the batch's own per-run estimates, over the same days
    truth = truth_for_run(view.path, (view.first_day, view.last_day))
    rows = []
    for r in results:
        slug = method_slug(r.method) or slug_of(r.method)
        true = truth.get(f"truth_{slug}")
        rows.append((Cell(r.method, {"slug": slug}, header=True), Cell(r.target), _cell(r.observed),
                     Cell(f"{number(r.estimate)}\n{interval(r.ci_low, r.ci_high, like=r.estimate)}",
                          {"slug": slug, "estimate": r.estimate, "low": r.ci_low, "high": r.ci_high}),
                     Cell(shown(true) if true is not None else "not countable exactly", {"slug": slug})))
    level = results[0].level if results else 0.9
    blocks: list[Any] = [Paragraph(
        f"Each estimator reads this run's observed records alone, over {view.window_text}, as undertow estimate "
        f"does ({level:.0%} intervals; check sensitivities from the world, as a batch's estimator check uses). "
        "One run cannot measure how often an estimator's intervals hold the truth: that coverage is unmeasured "
        "here, so no estimator is called reliable or trusted. A batch of replications measures it (undertow "
        "batch, then undertow brief on the batch folder).", lead="How to read this.")]
    if rows:
        blocks.append(Table(
            "run-estimators", f"Estimates from observed records ({level:.0%} intervals), with the simulated truth",
            ("Estimator", "Counts", "Observed", f"Estimate\n{level:.0%} interval",
             "Simulated truth\nnever seen by an agency"), tuple(rows),
            note="The truth column is there to check the model, not to judge an estimator: one run's hit or miss "
                 "says nothing about its coverage. Every estimator assumes people are equally easy to find at "
                 "each encounter; people who adapt or hide deeper are found less, so estimates tend to undercount."))
    else:
        blocks.append(Paragraph("No estimator could run on this run's observed records."))
    notes = [Item(f"{r.method}: {x}") for r in results for x in r.warnings]
    notes += [Item(f"{name} could not run: {why}") for name, why in failures]
    if notes:
        blocks += [Paragraph("Warnings and estimators that could not run:"), Bullets(tuple(notes))]
    return Section("estimators", "The estimators on this run", tuple(blocks))


# -- queues and lanes ---------------------------------------------------------------------------------------------


def _missing_queue_figures(view: RunView, key: str, title: str) -> Section:
    return Section(key, title, (Paragraph(
        f"This run was made before runs wrote their queue figures ({QUEUE_HOURS_FILE}); simulate it again with "
        "undertow run to see them."),))


def _station_queue_rows(view: RunView) -> list[tuple[Cell, ...]]:
    hours = view.queue_hours
    rows = []
    for s in view.world.stations:
        h = hours[hours["station"] == s.name]
        checks = int(h["checks"].sum())
        mean = float((h["wait_mean_min"].fillna(0) * h["checks"]).sum() / checks) if checks else float("nan")
        worst = h.loc[h["wait_p95_min"].idxmax()] if h["wait_p95_min"].notna().any() else None
        longest = h.loc[h["queue_mean"].idxmax()] if len(h) else None
        rows.append((
            Cell(label(s.name), {"station": s.name}, header=True), _cell(checks),
            _cell(mean, "minutes", station=s.name, wait_mean=mean),
            Cell(f"{number(worst['wait_p95_min'], 'minutes')}\nat {int(worst['hour']):02d}:00–{int(worst['hour']) + 1:02d}:00"
                 if worst is not None else "n/a"),
            _cell(h["queue_mean"].mean(), "ratio"),
            Cell(f"{number(longest['queue_mean'], 'ratio')}\nat {int(longest['hour']):02d}:00" if longest is not None else "n/a"),
        ))
    return rows


def section_queues(view: RunView) -> Section:
    """Waits and queue lengths per station and hour (observed)."""
    title = "Waits and queues by station and hour"
    if view.queue_hours is None:
        return _missing_queue_figures(view, "queues", title)
    stations = view.world.station_names
    return Section("queues", title, (
        waits_figure(view.queue_hours, stations, view.window_text),
        queues_figure(view.queue_hours, stations, view.window_text),
        Table("run-queues", f"Waits for a check and queues per station, {view.window_text} (observed)",
              ("Station", "Vehicles checked", "Mean wait (minutes)", "Worst hour's 95th-percentile wait (minutes)",
               "Mean queue (vehicles)", "Longest hourly queue (vehicles)"), tuple(_station_queue_rows(view)),
              note=f"Every figure per hour is in {QUEUE_HOURS_FILE} (per hour of the day over these days) and "
                   f"{QUEUES_FILE} (per day and hour, warm-up included) in the run directory."),
    ))


def section_lanes(view: RunView) -> Section:
    """Lane utilisation per station and hour (observed)."""
    title = "Lane utilisation by station and hour"
    if view.queue_hours is None:
        return _missing_queue_figures(view, "lanes", title)
    hours, rows = view.queue_hours, []
    for s in view.world.stations:
        h = hours[hours["station"] == s.name]
        staffed = float(h["staffed_lane_minutes"].sum())
        busiest = h.loc[h["utilisation"].idxmax()] if h["utilisation"].notna().any() else None
        rows.append((
            Cell(label(s.name), {"station": s.name}, header=True), _cell(s.lanes),
            _cell(staffed / 60.0 / view.days, "rate"),
            _cell(h["busy_lane_minutes"].sum() / staffed if staffed else float("nan"), "percent", station=s.name),
            Cell(f"{number(busiest['utilisation'], 'percent')}\nat {int(busiest['hour']):02d}:00" if busiest is not None
                 else "no lane on duty"),
            _cell(int((h["utilisation"] >= 0.9).sum())),
        ))
    return Section("lanes", title, (
        lanes_figure(hours, view.world.station_names, view.window_text),
        Table("run-lanes", f"Lanes per station, {view.window_text} (observed)",
              ("Station", "Lanes", "Lane-hours on duty a day", "Utilisation", "Busiest hour",
               "Hours of the day at 90% or more"), tuple(rows),
              note="Utilisation is lane-minutes spent checking over lane-minutes on duty by the roster; near 100% "
                   "a queue grows whenever arrivals bunch." + _resting_note(view)),
    ))


def _resting_note(view: RunView) -> str:
    """Stations whose teams rest by their method's rule cannot be busy all the time they are on duty."""
    methods = {m.name: m for m in view.world.methods}
    notes = []
    for s in view.world.stations:
        fatigue = methods[s.method].fatigue
        work, rest = (getattr(fatigue, "work_minutes", None), getattr(fatigue, "rest_minutes", None))
        if work and rest:
            notes.append(f"the teams at {label(s.name)} rest {shown(rest)} minutes after {shown(work)} worked, so "
                         f"they are busy at most about {percent(work / (work + rest))} of their time on duty")
    return (" " + "; ".join(notes)[:1].upper() + "; ".join(notes)[1:] + ".") if notes else ""


# -- departures ------------------------------------------------------------------------------------------------


def _departures_by_time(view: RunView) -> pd.DataFrame:
    d = view.departures
    by = d.groupby("time", sort=False).agg(booked=("booked", "sum"), left=("left", "sum"), missed=("missed", "sum"),
                                           full=("full", "sum"), days=("day", "nunique"))
    # by clock time: ``minute`` counts from the run's start, so the first day's times would come first and a
    # time the timetable adds on a later day (weekend, changed headway) would follow them out of order
    clock = (d["minute"] % MINUTES_PER_DAY).groupby(d["time"]).min()
    by = by.loc[clock.sort_values(kind="stable").index]
    if "cancelled" in d:  # runs made before departures could be late or cancelled lack these
        late = d[d["late_minutes"] > 0].groupby("time")["late_minutes"]
        by = by.join(d.groupby("time").agg(cancelled=("cancelled", "sum"))).join(
            late.size().rename("late")).join(late.mean().rename("late_mean")).fillna({"late": 0})
    return by.assign(booked_per_day=by["booked"] / by["days"], left_per_day=by["left"] / by["days"],
                     missed_per_day=by["missed"] / by["days"])


def section_departures(view: RunView) -> Section:
    """Per scheduled departure: vehicles booked, left and missed (observed)."""
    w = view.words
    title = f"{w.missed.capitalize()} by {w.service}"
    if view.world.departures is None:
        return Section("departures", f"Leaving {w.the_site}", (Paragraph(
            f"Vehicles leave {w.the_site} as soon as they are cleared: there is no timetable, so nothing to miss."),))
    if view.departures is None:
        return Section("departures", title, (Paragraph(
            f"This run was made before runs wrote {DEPARTURES_FILE}; simulate it again with undertow run to see "
            f"{w.missed} by {w.service}."),))
    by = _departures_by_time(view)
    rows = tuple((
        Cell(str(t), {"service": str(t)}, header=True), _cell(r["booked_per_day"], "rate"),
        _cell(r["left_per_day"], "rate"), _cell(r["missed_per_day"], "rate", service=str(t), missed=r["missed"]),
        Cell(percent(r["missed"] / r["booked"]) if r["booked"] else "n/a"), Cell(f"{int(r['full'])} of {int(r['days'])}"),
    ) for t, r in by.iterrows())
    worst = view.departures.sort_values(["missed", "day"], ascending=[False, True]).iloc[0]
    blocks = [_disruption(by, w)] if "late" in by and (by["late"].sum() or by["cancelled"].sum()) else []
    return Section("departures", title, (
        departures_figure(by, w, view.window_text),
        Table("run-departures", f"Each scheduled {w.service}, {view.window_text} (observed)",
              (w.service.capitalize(), "Booked a day", "Left on it a day", "Missed a day", "Share of bookings missed",
               "Days it left full"), rows,
              note=f"A vehicle is booked on the first {w.service} whose cut-off it could make as planned; it missed "
                   f"it when it left on a later one or not at all. Every {w.service} of every day is in "
                   f"{DEPARTURES_FILE}."),
        Paragraph(f"The worst single {w.service}: day {int(worst['day'])} at {worst['time']}, "
                  f"{shown(worst['missed'])} of {shown(worst['booked'])} vehicles booked on it missed it."),
        *blocks,
    ))


def _disruption(by: pd.DataFrame, w: Words) -> Paragraph:
    """How often the timetable ran late or was cancelled over the window (observed)."""
    days = int(by["days"].sum())
    late, cancelled = int(by["late"].sum()), int(by["cancelled"].sum())
    mean_late = float((by["late"] * by["late_mean"].fillna(0)).sum() / late) if late else 0.0
    return Paragraph(
        f"Over the window, {late} of {days} {w.services} left late (by {shown(mean_late)} minutes on average) and "
        f"{cancelled} were cancelled; a cancelled {w.service}'s vehicles left on the next one with room, so its "
        f"bookings count as missed (observed).", lead="Delays and cancellations.")


# -- cautions and checking ------------------------------------------------------------------------------------------


def section_cautions(view: RunView) -> Section:
    """The batch briefing's caution, then what one run cannot say."""
    items = (
        Item("One run is one draw of chance: no figure here has an interval, and two runs of different policies "
             "differ by chance as well as by policy. Compare policies with a batch (undertow batch), which pairs "
             "them on common random numbers and gives intervals."),
        Item("Simulated truth is the model's own: crossings, attempts and where people boarded follow from assumed "
             "arrivals, choice rules and detection chances, all invented for a fictional world."),
        Item("Boarding after the last check is invisible to every record and every estimator."),
        Item(f"Queues and {view.words.missed} are the model's: check durations, rosters and the timetable are the "
             "world file's illustrative assumptions." if view.world.departures is not None else
             "Queues are the model's: check durations and rosters are the world file's illustrative assumptions."),
    )
    return Section("cautions", "Limitations and cautions",
                   (Paragraph(SAFETY, lead="Caution: people can be hurt."), Bullets(items)))


def section_files(view: RunView, argv: Sequence[str]) -> Section:
    """How the run and this report were made, and which files hold every figure."""
    command = " ".join(shlex.quote(str(a)) for a in view.manifest.get("command") or []) or "(not recorded)"
    files = (
        Item("summary.json: the totals, each labelled with its record set"),
        Item("daily.parquet: the daily series (columns starting truth_ are simulated truth)"),
        Item(f"{QUEUES_FILE}: waits, queue and lane use per station, day and hour"),
        Item(f"{QUEUE_HOURS_FILE}: the same per station and hour of the day over the summarised days"),
        Item(f"{DEPARTURES_FILE}: every {view.words.service}'s vehicles booked, left and missed"
             + (" (empty: vehicles leave on clearance)" if view.world.departures is None else "")),
        Item("truth/ and observed/: the two record sets; estimates_summary.json: the estimators' results"),
    )
    return Section("files", "To check and reproduce", (
        Paragraph(command, lead="The run was made with:"),
        Paragraph(" ".join(shlex.quote(str(a)) for a in argv), lead="This report was made with:"),
        Paragraph(f"World {view.world.name} (SHA-256 {view.manifest.get('world_sha256', 'n/a')}); the files beside "
                  "this report in the run directory hold every number:", lead="Files."),
        Bullets(files),
    ))
