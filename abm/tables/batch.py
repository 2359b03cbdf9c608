"""The tables of a batch folder (``undertow batch``, ``undertow brief``): one row per run, or per run and estimator.

Every table carries ``run_id``, ``point`` and ``replication``, so its rows join
the others' and the run directories ``runs/<run_id>/``. A factor's column is
named after the factor (``<factor>``) and holds its levels as the experiment
gives them: text, whole numbers, numbers or true/false, so its kind is the
experiment's. :data:`SUMMARY_FIGURES` also names the figures a policy search
averages (:mod:`abm.tables.search`).
"""

from __future__ import annotations

from . import Column as C
from . import Table, declare

BATCH = "batch folder"
RUN_ID = C("run_id", "text", "", "the run's id, p<point>-r<replication> (its directory is runs/<run_id>/)", "key")
POINT = C("point", "int", "", "the design point, from 0 (experiment.json lists each point's factor levels)", "key")
REPLICATION = C("replication", "int", "", "the replication, from 0; replication r of every point shares its seed "
                "(common random numbers)", "key")
FACTOR = C("<factor>", "any", "", "the level of the experiment's factor of this name at the run's design point (text, "
           "number or true/false, as its levels are given)", "setting")

# Figure -> (kind in a run's summary, unit, meaning, record set): the run summary's figures, over the days the run
# summarises (after any warm-up); record sets as abm.experiment.single.SUMMARY_SOURCES says.
SUMMARY_FIGURES: dict[str, tuple[str, str, str, str]] = {
    "attempts": ("int", "persons", "person-attempts (a group of three attempting once is three)", "truth"),
    "interdictions": ("int", "persons", "people stopped at boarding points", "observed"),
    "detections": ("int", "persons", "people found in checks", "observed"),
    "crossings": ("int", "persons", "person-attempts that crossed unfound", "truth"),
    "crossings_after_last_check": ("int", "persons", "of the crossings, those that boarded after the last station, "
                                   "where no check could find them", "truth"),
    "persons": ("int", "persons", "distinct people who tried (each group counted once, at its largest)", "truth"),
    "no_vehicle": ("int", "persons", "person-attempts that found no vehicle to board", "truth"),
    "displaced_out": ("int", "persons", "people who left for routes outside the model", "truth"),
    "gave_up": ("int", "persons", "people who gave up", "truth"),
    "arrived": ("int", "persons", "people who arrived in the area", "truth"),
    "in_system_at_end": ("int", "persons", "people still trying at the end of the last day", "truth"),
    "vehicles": ("int", "vehicles", "vehicles arriving", "observed"),
    "checks": ("int", "vehicles", "checks, at every station", "observed"),
    "alarms": ("int", "vehicles", "checks that alarmed", "observed"),
    "false_alarms": ("int", "vehicles", "alarms after which nobody was found", "observed"),
    "staff_hours": ("float", "hours", "lane-hours the roster staffed", "observed"),
    "time_in_port_p50_min": ("float", "minutes", "median of the vehicles' time from arrival to leaving the crossing "
                             "(NaN if none left)", "observed"),
    "time_in_port_p95_min": ("float", "minutes", "95th percentile of the vehicles' time from arrival to leaving the "
                             "crossing (NaN if none left)", "observed"),
    "missed_departure_share": ("float", "share", "share of vehicles that left later than their booked departure (NaN "
                               "without departures)", "observed"),
}
# Per check method, as method_<method>_<figure> (abm.experiment.single.METHOD_SUMMARY_SOURCES); false_alarms comes
# before alarms, so that a name ending in _false_alarms is never read as the alarms of a method named ..._false.
METHOD_FIGURES: dict[str, tuple[str, str, str, str]] = {
    "checks": ("int", "vehicles", "vehicles the method checked", "observed"),
    "false_alarms": ("int", "vehicles", "the method's alarms after which nobody was found", "observed"),
    "alarms": ("int", "vehicles", "the method's checks that alarmed", "observed"),
    "found": ("int", "persons", "people the method found", "observed"),
    "sensitivity": ("float", "share", "share of the method's checks of vehicles with people aboard that found them "
                    "(NaN when it checked none)", "truth"),
}


def _summary_columns() -> tuple[C, ...]:
    figures = [C(name, *spec) for name, spec in SUMMARY_FIGURES.items()]
    methods = [C(f"method_<method>_{figure}", kind, unit, f"{meaning} (the world's method of this name)", record_set)
               for figure, (kind, unit, meaning, record_set) in METHOD_FIGURES.items()]
    return (
        RUN_ID, POINT, REPLICATION,
        C("seed", "int", "", "the run's seed (as its manifest records it)", "setting"),
        C("posterior_draw", "int", "", "calibrated experiments: the row of the calibration's posterior.parquet whose "
          "unknowns the run took (the same for every point of a replication)", "setting"),
        C("days", "int", "days", "days the figures cover (after any warm-up)", "setting"),
        C("warmup_days", "int", "days", "days simulated first and left out of the figures (only with a warm-up)",
          "setting"),
        *figures, *methods,
        C("est_<estimator>_lo", "float", "persons", "lower end of the estimator's 90% interval (NaN when it could not "
          "run)", "estimate"),
        C("est_<estimator>_hi", "float", "persons", "upper end of the same interval", "estimate"),
        C("est_<estimator>", "float", "persons", "the estimator's estimate from the run's observed records over the "
          "days the summary covers (NaN when it could not run; abm.analysis.estimator_check.cached_estimates)",
          "estimate"),
        C("<factor>", "any", "", "the level of the experiment's factor of this name at the run's design point (text, "
          "number or true/false, as its levels are given); in a calibrated experiment also each unknown's value the "
          "run took from the posterior, named after the unknown", "setting"),
    )


declare(
    Table("batch/summary", "summary.parquet", BATCH, "observed",
          "One row per completed run, by run id: its design point's factor levels, seed and summary figures (truth "
          "figures marked truth) and, with the estimator extension, every estimator's est_ columns.",
          _summary_columns()),
    Table("batch/failures", "failures.parquet", BATCH, "setting",
          "One row per run that raised, by run id, until it is redone (the JSON under failed/ holds the same).", (
              RUN_ID, POINT, REPLICATION,
              C("seed", "int", "", "the run's seed"),
              C("error", "text", "", "what went wrong, in one line: the error's type and message, or that the "
                "worker process died"),
              C("traceback", "text", "", "the Python traceback of that error (empty when the worker died)"),
          )),
    Table("batch/briefing_runs", "briefing_runs.parquet", BATCH, "truth",
          "One row per completed run (undertow brief): its factor levels, truth figures the summary lacks and the "
          "briefing's crossings estimate beside the truth it targets.", (
              RUN_ID, POINT, REPLICATION, FACTOR,
              C("hazard_weighted_share", "float", "share", "attempting persons weighted by the hazard of their boarding "
                "point and depth, over the summarised days: 0 all at the safest, 1 all at hazard 1 (NaN without "
                "attempts)"),
              C("crossings_after_checks", "int", "persons", "persons who crossed having boarded after the last primary "
                "station, whom no check could find and no estimator count"),
              C("est_crossings", "float", "persons", "the briefing's crossings estimate: the best-scoring estimator "
                "of person-attempts passing the last primary station unfound (NaN when none is eligible)", "estimate"),
              C("est_crossings_lo", "float", "persons", "lower end of its interval", "estimate"),
              C("est_crossings_hi", "float", "persons", "upper end of its interval", "estimate"),
              C("truth_past_checks", "int", "persons", "the truth that estimate targets: person-attempts that passed "
                "the last primary station unfound (empty when no estimate)"),
          )),
    Table("batch/estimator_check", "estimator_check.parquet", BATCH, "truth",
          "One row per run and estimator compared (undertow brief): the estimate from the run's observed records "
          "over the summarised days beside the simulated truth it targets.", (
              RUN_ID, POINT, REPLICATION,
              C("behaviour", "text", "", "the adversary's behaviour model in the run's world (a factor of this name "
                "gives its level)", "setting"),
              FACTOR,
              C("slug", "text", "", "the estimator's column-safe name (as in the summary's est_<estimator>)", "key"),
              C("method", "text", "", "the estimator's name", "key"),
              C("label", "text", "", "its short name in sentences", "setting"),
              C("quantity", "text", "", "what is compared: persons_at_risk, reaching:<station> or "
                "passed_unfound:<station>", "setting"),
              C("target", "text", "", "what the estimator says it estimates", "setting"),
              C("estimate", "float", "persons", "the estimate", "estimate"),
              C("ci_low", "float", "persons", "lower end of its interval", "estimate"),
              C("ci_high", "float", "persons", "upper end of its interval", "estimate"),
              C("level", "float", "share", "the interval's nominal level", "setting"),
              C("observed", "int", "persons", "the observed count the estimate expands", "observed"),
              C("truth", "int", "persons", "the simulated truth of the same quantity over the same days"),
              C("error", "float", "persons", "estimate less truth"),
              C("ratio", "float", "ratio", "estimate over truth (NaN when the truth is 0)"),
              C("covered", "bool", "", "true when the interval holds the truth"),
              C("exact", "bool", "", "true when the truth could be counted exactly (see note)"),
              C("note", "text", "", "why the truth is approximate, else empty"),
          )),
)
