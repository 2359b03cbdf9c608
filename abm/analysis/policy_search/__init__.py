"""Policy search: which policy does best within the delay and staff the crossing can bear, by simulation.

An optimisation file names decision variables (dotted world paths with
bounds), groups of variables that share out a fixed total (staff lanes, a
budget of check minutes per vehicle), an objective figure of the runs, and
constraints on other figures::

    kind: optimisation
    name: Kestrel Quay check shares (illustrative)
    world: world.yaml
    days: 21
    warmup_days: 5
    replications: 3                   # common-random-number replications per candidate in the search
    seed: 20240613
    objective: {figure: detections, sense: maximise}   # or {figure: crossings, sense: minimise}
    variables:
      - {path: stations.gate_imaging.selection.fraction, bounds: [0.05, 0.6]}
      - {path: stations.checkin_probe.selection.queue_threshold, bounds: [4, 30], integer: true}
    allocations:                      # share out a fixed total: sum of weight x value = total
      - name: mobile_lanes
        total: 2
        integer: true
        paths: [{path: roster.teams.mobile_team.lanes.yard_dogs}, {path: roster.teams.mobile_team.lanes.checkin_probe}]
    constraints:
      - {figure: time_in_port_p95_min, max: 60}
      - {figure: staff_hours, max: 15000}
    policies:                         # named alternatives that join the final comparison
      - {name: current, set: {}}
    search: {popsize: 6, maxiter: 8}
    selection: {top: 3, replications: 8, alpha: 0.05}

Figures are the numeric figures of a run's summary (``crossings`` and
``attempts`` from truth; ``detections``, ``staff_hours`` (lane-hours
rostered), ``time_in_port_p95_min``, ``missed_departure_share`` ... observed)
plus ``check_hours`` (hours spent checking, from ``methods.parquet``;
observed) and ``encounters`` (detections + interdictions), each averaged over
the replications of a candidate.

Allocations
    A group of m paths with weights w_i and a total T is searched through m - 1
    shares in [0, 1] (stick-breaking): path 1 gets share u_1 of T, path 2 share
    u_2 of what is left, ..., the last path the rest; each value is
    (its part of T) / w_i, capped at the path's ``max``. A cap leaves its
    surplus unspent, so the total is what the group may spend at most. With
    ``integer: true`` (unit weights and a whole total) values are whole
    numbers and the total is spent exactly.

Method
    1. Search: :func:`scipy.optimize.differential_evolution` over the
       variables, each candidate's objective and constraint figures estimated
       by the mean of ``replications`` runs that share their seeds with every
       other candidate (common random numbers), so the objective is a
       deterministic function of the policy and differences between candidates
       are not seed noise. Constraints go to scipy as a
       :class:`~scipy.optimize.NonlinearConstraint` (Lampinen's rule: a
       feasible candidate beats an infeasible one, infeasible ones compare by
       violation), the whole population is simulated as one batch
       (``vectorized``), and a candidate is never simulated twice.
    2. Selection: the ``top`` best feasible candidates of the search, with the
       named ``policies``, are run again with ``selection.replications`` fresh
       seeds, common to all of them. The incumbent is the best fresh mean among
       candidates whose fresh constraint means are within limits; every other
       candidate is compared with it by a two-sided paired t-test on the
       per-seed differences, Bonferroni-adjusted over the comparisons: "worse"
       or "better" when the difference is significant at level ``alpha``, else
       "not distinguishable", and a candidate that breaks a constraint on the
       fresh seeds says which (a screening step after Nelson, Swann, Goldsman &
       Song 2001, [mem]; not Rinott's two-stage procedure, which would fix the
       replications from a first-stage variance). A candidate the search found
       at a constraint's edge often lands just past it on fresh seeds: the
       search keeps the candidates its own seeds flattered. A tighter limit in
       the file buys a margin (common practice, no source).
    3. Frontier: among every candidate the search simulated, those no other
       candidate beats on both detections (more) and delay
       (``time_in_port_p95_min``, less).

The package's modules: :mod:`.problem` (what is searched and judged, the evaluator's interface),
:mod:`.search` (differential evolution on any evaluator), :mod:`.selection` (fresh seeds and paired
comparisons), :mod:`.result` (the result in words and as a figure), :mod:`.optimisation_file` (the file's
schema and validation), :mod:`.evaluator` (the port model as evaluator) and :mod:`.run` (a search run into
an output folder, ``undertow optimise``). Each run's figures are kept in ``OUT/simulations.parquet`` by
``<candidate>/<seed>`` (a candidate's id is a hash of its world changes; ``--keep-runs`` also keeps its run in
``OUT/runs/<candidate>/<seed>/``), so an interrupted search resumes with ``--resume`` without repeating a run: the
search is deterministic given the seed and replays through the finished runs.
"""

from .evaluator import ModelEvaluator
from .optimisation_file import (
    OptimisationFileError, OptimisationPlan, describe_optimisation, load_optimisation,
)
from .problem import (
    FIGURE_SOURCES, FIGURES, Allocation, Constraint, Evaluator, PolicySearchError, Problem, SearchSettings, Variable,
    candidate_id,
)
from .result import PolicySearchResult
from .run import optimise_command, run_optimisation
from .search import search_policy

__all__ = [
    "FIGURES",
    "FIGURE_SOURCES",
    "Allocation",
    "Constraint",
    "Evaluator",
    "ModelEvaluator",
    "OptimisationFileError",
    "OptimisationPlan",
    "PolicySearchError",
    "PolicySearchResult",
    "Problem",
    "SearchSettings",
    "Variable",
    "candidate_id",
    "describe_optimisation",
    "load_optimisation",
    "optimise_command",
    "run_optimisation",
    "search_policy",
]
