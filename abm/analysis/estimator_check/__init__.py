"""How wrong do the estimates go when people adapt? Every estimator against simulated truth.

The estimators in :mod:`abm.estimate` read observed records only. This package
is the one place that puts their results beside the truth records of the same
run: it reads ``truth/`` (through :func:`abm.records.read_truth`) and the
run's ``world.json`` (for the route: which boarding points lie before which
station), runs every estimator with :func:`abm.estimate.report.run_all`, and
compares.

Laid out as: :mod:`.truth` (what each estimator is compared with, and counting it),
:mod:`.runs` (reading a run and a batch's runs), :mod:`.estimates` (running the estimators),
:mod:`.cache` (the per-run estimates cache), :mod:`.per_run` (the per-run comparison),
:mod:`.summary` (bias and coverage statistics) and :mod:`.sentences` (words for a briefing).
"""

from .cache import (
    ESTIMATES_CACHE,
    cached_estimates,
    cached_results,
    estimators_fingerprint,
)
from .estimates import (
    SENSITIVITY_STRENGTH,
    SensitivityChoice,
    estimates_for_run,
    run_estimators,
    sensitivities_from_world,
)
from .per_run import (
    PER_RUN_COLUMNS,
    RunsGiven,
    SKIPPED_COLUMNS,
    check_run,
    check_runs,
)
from .runs import (
    MANIFEST_FILE,
    WORLD_FILE,
    read_world,
    runs_from_store,
    summarised_days,
    truth_for_run,
)
from .sentences import (
    bias_sentence,
    briefing_sentences,
)
from .summary import (
    SUMMARY_COLUMNS,
    clopper_pearson_interval,
    relative_bias_interval,
    summarise_check,
)
from .truth import (
    BOARDED,
    EXCLUDED_TARGETS,
    EstimatorCheckError,
    PASSED_UNFOUND,
    PERSONS_AT_RISK,
    REACHING,
    RULES,
    Route,
    TRUTH_TABLE,
    TruthRule,
    UNDETECTED_SUFFIX,
    attempts_reaching,
    describe_quantity,
    method_slug,
    passed_unfound,
    persons_at_risk,
    slug_of,
    truth_value,
)

__all__ = [
    "BOARDED",
    "ESTIMATES_CACHE",
    "EXCLUDED_TARGETS",
    "EstimatorCheckError",
    "MANIFEST_FILE",
    "PASSED_UNFOUND",
    "PERSONS_AT_RISK",
    "PER_RUN_COLUMNS",
    "REACHING",
    "RULES",
    "Route",
    "RunsGiven",
    "SENSITIVITY_STRENGTH",
    "SKIPPED_COLUMNS",
    "SUMMARY_COLUMNS",
    "SensitivityChoice",
    "TRUTH_TABLE",
    "TruthRule",
    "UNDETECTED_SUFFIX",
    "WORLD_FILE",
    "attempts_reaching",
    "bias_sentence",
    "briefing_sentences",
    "cached_estimates",
    "cached_results",
    "check_run",
    "check_runs",
    "clopper_pearson_interval",
    "describe_quantity",
    "estimates_for_run",
    "estimators_fingerprint",
    "method_slug",
    "passed_unfound",
    "persons_at_risk",
    "read_world",
    "relative_bias_interval",
    "run_estimators",
    "runs_from_store",
    "sensitivities_from_world",
    "slug_of",
    "summarise_check",
    "summarised_days",
    "truth_for_run",
    "truth_value",
]
