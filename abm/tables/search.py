"""The tables of a policy-search folder (``undertow optimise``): every candidate searched, the finalists, the frontier.

A candidate's figures are the run-summary figures of :mod:`abm.tables.batch`
(each from truth or observed records as there) plus ``check_hours`` and
``encounters``, as means over its runs. A decision variable's column is named
after its dotted world path (``<path>``). Feasibility and the comparison with
the best read the objective and the constraints, which may be truth figures
(crossings, say), so they are marked truth.
"""

from __future__ import annotations

from . import Column as C
from . import Table, declare
from .batch import SUMMARY_FIGURES

SEARCH = "policy-search folder"

# Figure -> (unit, meaning, record set): abm.analysis.policy_search.problem.FIGURE_SOURCES.
FIGURES: dict[str, tuple[str, str, str]] = {
    **{name: (unit, meaning, record_set) for name, (_, unit, meaning, record_set) in SUMMARY_FIGURES.items()},
    "check_hours": ("hours", "hours spent checking, from methods.parquet", "observed"),
    "encounters": ("persons", "detections and interdictions", "observed"),
}
CANDIDATE = C("candidate", "text", "", "the candidate's id, a hash of its world changes (its changes are in "
              "candidates/<candidate>.json; with --keep-runs its runs lie in runs/<candidate>/<seed>/)", "key")


def _searched() -> tuple[C, ...]:
    """The columns of every candidate the search simulated (history, frontier)."""
    return (
        CANDIDATE,
        *(C(name, "float", unit, f"{meaning}: mean over the candidate's runs on the search's seeds (NaN when its "
            "world is invalid or a run failed)", record_set) for name, (unit, meaning, record_set) in FIGURES.items()),
        C("feasible", "bool", "", "true when every constraint's mean is within its limit and the objective's mean is "
          "a number", "truth"),
        C("<path>", "number", "path's unit", "the candidate's value of the decision variable at this dotted world path",
          "setting"),
    )


def _selected() -> tuple[C, ...]:
    """The columns of the finalists run again on fresh seeds (selection)."""
    figures = []
    for name, (unit, meaning, record_set) in FIGURES.items():
        figures += [
            C(f"{name}_mean", "float", unit, f"{meaning}: mean over the fresh runs", record_set),
            C(f"{name}_low", "float", unit, f"{meaning}: lower end of the mean's interval at the selection's level",
              record_set),
            C(f"{name}_high", "float", unit, f"{meaning}: upper end of that interval", record_set),
        ]
    status = [C(f"status:{name}", "text", "", f"the constraint on {name}: met, mean over the limit, or violated "
                "(the whole interval past it)", record_set) for name, (_, _, record_set) in FIGURES.items()]
    return (
        CANDIDATE,
        C("named", "bool", "", "true for a policy the file names (candidate is then its name)", "setting"),
        C("replications", "int", "runs", "fresh runs of the candidate, with seeds common to every finalist", "setting"),
        *figures, *status,
        C("feasible", "bool", "", "true when no constraint's fresh mean is past its limit and the objective's mean is a "
          "number"),
        C("breaks", "text", "", "the figures whose constraints it breaks, comma-separated (empty when none)"),
        C("difference", "float", "objective's unit", "mean per-seed difference of the objective from the best "
          "candidate's (0 for the best)"),
        C("difference_low", "float", "objective's unit", "lower end of that difference's interval"),
        C("difference_high", "float", "objective's unit", "upper end of that difference's interval"),
        C("p_value", "float", "probability", "two-sided paired t-test p-value of that difference (NaN for the best)"),
        C("verdict", "text", "", "best, better, worse or not distinguishable (Bonferroni-adjusted), and any "
          "constraint it breaks"),
        C("set:<path>", "any", "", "the candidate's value at this dotted world path (empty where it leaves the path "
          "as the world has it; JSON text where a named policy sets other values)", "setting"),
    )


declare(
    Table("search/history", "history.parquet", SEARCH, "truth",
          "Every candidate the search simulated, in the order first simulated: its decision values, mean figures "
          "over the search's seeds and feasibility.", _searched()),
    Table("search/selection", "selection.parquet", SEARCH, "truth",
          "One row per finalist (the best searched candidates and the named policies) run again on fresh seeds: "
          "the best first, then the feasible, then the rest; means, intervals, constraints and the comparison with "
          "the best.", _selected()),
    Table("search/frontier", "frontier.parquet", SEARCH, "truth",
          "The searched candidates no other beats on both detections (more) and time_in_port_p95_min (less), by the "
          "latter; columns as history.parquet.", _searched()),
    Table("search/simulations", "simulations.parquet", SEARCH, "truth",
          "Every run the search simulated (the searched seeds and the finalists' fresh ones), as its worker sent it "
          "back: what --resume reads instead of running it again.", (
              C("run", "text", "", "<candidate>/<seed>", "key"),
              CANDIDATE,
              C("seed", "int", "", "the run's seed", "setting"),
              *(C(name, "float", unit, f"{meaning}: the run's (NaN where it has none)", record_set)
                for name, (unit, meaning, record_set) in FIGURES.items()),
          )),
)
