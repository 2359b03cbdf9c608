"""How wrong do the estimates go when people adapt? Every estimator against simulated truth.

The estimators in :mod:`abm.estimate` read observed records only. This module
is the one place that puts their results beside the truth records of the same
run: it reads ``truth/`` (through :func:`abm.records.read_truth`) and the
run's ``world.json`` (for the route: which boarding points lie before which
station), runs every estimator with :func:`abm.estimate.report.run_all`, and
compares.

What each estimator is compared with
------------------------------------
Each estimator states its ``target``; :data:`TRUTH_TABLE` maps it to the truth
quantity that is the same thing, with one line of justification each. All
counts are persons (a group of three is three persons; attempting twice is
two person-attempts). With a window, truth rows are selected by the day of the
attempt, while estimators select encounters by the calendar day of the
encounter: a vehicle carried past midnight can put a detection one day later,
so a window's ends differ by at most that; with ``window=None`` (every day)
the two agree exactly.

``persons_at_risk``
    Distinct persons with at least one attempt in the window: the sum of group
    sizes over distinct ``agent_id``. Every such person was at risk of an
    encounter (interdiction is tried before boarding) and every person is
    identifiable (identification is tried at every encounter), so this is the
    "distinct identifiable persons at risk" of the capture-frequency and
    two-sample estimators.
``reaching:<station>``
    Person-attempts that reached a primary station still hidden: the group
    boarded a vehicle (outcome ``detected`` or ``crossed``) at a boarding point
    whose ``before_station`` lies at or before the station in route order
    (``departure`` lies after every station), and was not detected at a station
    earlier on the route. This is exact unless a vehicle can skip the station:
    an alarm at an earlier primary station sends a vehicle to its secondary
    station, past every primary in between, and truth does not record which
    vehicles were referred. An occupied vehicle is referred without its people
    being found only after a false alarm, so a station is flagged inexact when
    an earlier primary station with a false-alarm chance above zero refers to a
    secondary station beyond it (in the base world or after any
    intervention), or when an intervention moves a boarding point. Inexact
    comparisons are left out (listed with the reason) unless asked for.
``passed_unfound:<station>``
    ``reaching:<station>`` less the persons detected at that station: those who
    passed it unfound (and crossed, or were found later). At the last primary
    station this is what got past every layer from upstream of it.

Excluded: the expansion in ``unit="vehicles"`` (vehicles with people). Truth
records do not carry the vehicle an attempt boarded, so groups that shared a
vehicle cannot be merged and the count cannot be made from truth.

Per run and aggregated
----------------------
:func:`check_runs` gives one row per run x estimator: estimate, interval,
truth, error = estimate - truth, ratio = estimate / truth and covered = (lo <=
truth <= hi). :func:`summarise_check` aggregates per estimator x factor levels:

* bias = mean error, with a Student-t interval over runs (n - 1 df);
* relative bias r = mean error / mean truth, with the t interval of a ratio of
  means: SE = sd(u) / sqrt(n), u_i = (e_i - r t_i) / mean truth (the delta
  method; it reduces to bias interval / truth when the truth does not vary);
* RMSE = sqrt(mean error^2), and RMSE / mean truth;
* coverage = share of runs whose interval covered the truth, with a Wilson
  (1927) score or Clopper & Pearson (1934) exact binomial interval.

:func:`bias_sentence` turns one summary row into a sentence a briefing can use.
:func:`estimates_for_run` gives flat ``est_<slug>`` numbers for a batch store.
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import numpy as np
import pandas as pd
from scipy import special  # quantile functions without scipy.stats, whose import costs each worker about 0.45 s

from .. import estimate as estimate_package
from .. import observed as observed_module
from ..errors import InputError
from ..estimate.expansion import EXPANSION, Sensitivities
from ..estimate.frequency import CHAO, CHAO_BC, ZELTERMAN, ZTP, ZTP_REGRESSION
from ..estimate.inputs import read_tables
from ..estimate.removal import CARLE_STRUB, RELATIVE, TWO_PASS, ZIPPIN
from ..estimate.report import run_all
from ..estimate.results import DEFAULT_LEVEL, EstimateResult, z_value
from ..estimate.twosample import CHAPMAN
from ..experiment.compare import wilson_interval
from ..estimate.windows import Window, check_window
from ..records import read_truth, write_json
from ..world import parse_world
from ..world.loader import policy_after
from ..world.schema import World

WORLD_FILE = "world.json"  # as abm.experiment.single writes it
MANIFEST_FILE = "manifest.json"
BOARDED = ("detected", "crossed")  # outcomes of an attempt that got onto a vehicle
SENSITIVITY_STRENGTH = 1000.0  # a + b of the Beta built from the world: as if from a trial of 1000 checks

PERSONS_AT_RISK = "persons_at_risk"
REACHING = "reaching"
PASSED_UNFOUND = "passed_unfound"
UNDETECTED_SUFFIX = "_undetected"


class EstimatorCheckError(InputError):
    """Runs that cannot be compared with truth (missing records, no world, bad labels)."""


# --------------------------------------------------------------------------- the truth table


@dataclass(frozen=True)
class TruthRule:
    """What one estimator is compared with, and why that is the same thing."""

    method: str  # the estimator's method name (EXPANSION stands for the per-station family)
    slug: str  # column-safe name (expansions add the station)
    label: str  # short name for sentences
    truth: str  # PERSONS_AT_RISK, REACHING or PASSED_UNFOUND
    why: str  # one line of justification


_FREQ = (
    "estimates distinct identifiable persons at risk in the window (its target); every person with an "
    "attempt in the window was at risk of an encounter and is identifiable, so truth is distinct persons "
    "with an attempt in the window"
)
_REMOVAL = (
    "estimates the population at the first pass, i.e. person-attempts that reached the first primary "
    "station (its target): truth is attempts that boarded upstream of it and got onto a vehicle"
)

TRUTH_TABLE: tuple[TruthRule, ...] = (
    TruthRule(CHAO, "chao", "the Chao lower bound", PERSONS_AT_RISK, f"n + f1²/(2·f2) {_FREQ}"),
    TruthRule(CHAO_BC, "chao_bc", "the bias-corrected Chao estimate", PERSONS_AT_RISK, f"n + f1(f1−1)/(2(f2+1)) {_FREQ}"),
    TruthRule(ZELTERMAN, "zelterman", "the Zelterman estimate", PERSONS_AT_RISK, f"n/(1−e^−λ), λ = 2f2/f1, {_FREQ}"),
    TruthRule(ZTP, "ztp", "the zero-truncated Poisson estimate", PERSONS_AT_RISK, f"n/(1−e^−λ̂) {_FREQ}"),
    TruthRule(
        ZTP_REGRESSION, "ztp_regression", "the zero-truncated Poisson regression", PERSONS_AT_RISK,
        f"Σ 1/(1−e^−λ_i) {_FREQ}",
    ),
    TruthRule(
        CHAPMAN, "chapman", "the Chapman two-sample estimate", PERSONS_AT_RISK,
        f"(M+1)(n+1)/(m+1)−1 over the window's two halves {_FREQ}",
    ),
    TruthRule(TWO_PASS, "removal_two_pass", "the two-pass removal estimate", REACHING, f"C1²/(C1−C2) {_REMOVAL}"),
    TruthRule(CARLE_STRUB, "removal_carle_strub", "the Carle & Strub removal estimate", REACHING, f"integer N̂ {_REMOVAL}"),
    TruthRule(ZIPPIN, "removal_zippin", "the Zippin removal estimate", REACHING, f"the ML N̂ {_REMOVAL}"),
    TruthRule(
        RELATIVE, "removal_relative", "the removal estimate with known relative sensitivities", REACHING,
        f"the ML N̂ with pass catchabilities s_i·p {_REMOVAL}",
    ),
    TruthRule(
        EXPANSION, "expansion", "the expansion estimate", REACHING,
        "Σ D_j/(π_j·s_j) inverts the chance of being found at station j, so it counts person-attempts that "
        "reached j still hidden: boarded upstream of j, onto a vehicle, not found at an earlier station",
    ),
    TruthRule(
        EXPANSION + UNDETECTED_SUFFIX, "expansion" + UNDETECTED_SUFFIX, "the expansion's undetected count",
        PASSED_UNFOUND,
        "V̂_j − D_j (the result's undetected; interval less D_j) is what reached j and was not found there: "
        "truth is reaching j less the persons detected at j",
    ),
)
RULES: dict[str, TruthRule] = {rule.method: rule for rule in TRUTH_TABLE}

EXCLUDED_TARGETS: tuple[tuple[str, str], ...] = (
    (
        "vehicles with people reaching station",
        "truth attempts do not carry the vehicle boarded, so groups that shared a vehicle cannot be merged: "
        "vehicles with people cannot be counted from truth",
    ),
)

_REACHING_TARGET = re.compile(r"^attempts reaching station '(?P<station>.+)'$")
_PERSONS_TARGET = "distinct identifiable persons at risk"


def slug_of(text: str) -> str:
    """Lower case, runs of anything but letters and digits as one '_'."""
    return re.sub(r"[^a-z0-9]+", "_", text.lower()).strip("_")


def method_slug(method: str) -> str | None:
    """The column-safe name of an estimator's method name; None when the method is unknown."""
    if method in RULES:
        return RULES[method].slug
    prefix = f"{EXPANSION} at '"
    if method.startswith(prefix) and method.endswith("'"):
        return f"expansion_{slug_of(method[len(prefix):-1])}"
    return None


def _rule_for(method: str) -> TruthRule | None:
    if method in RULES:
        return RULES[method]
    return RULES[EXPANSION] if method.startswith(f"{EXPANSION} at '") else None


# --------------------------------------------------------------------------- the route and truth


@dataclass(frozen=True)
class Route:
    """Where stations and boarding points lie, as truth counting needs it."""

    stations: tuple[str, ...]  # route order
    primaries: tuple[str, ...]
    position: Mapping[str, int]  # station -> index in route order
    point_position: Mapping[str, float]  # boarding point -> position of its before_station (inf: departure)
    inexact: Mapping[str, str]  # primary station -> why attempts reaching it cannot be counted exactly

    @classmethod
    def from_world(cls, world: World) -> "Route":
        """The route of a world, checked against every world its interventions produce."""
        policies = [world] + [policy_after(world, i) for i in range(len(world.interventions))]
        position = {s.name: i for i, s in enumerate(world.stations)}
        primaries = tuple(s.name for s in world.stations if s.role == "primary")

        def points(w: World) -> dict[str, float]:
            return {
                p.name: math.inf if p.before_station == "departure" else float(position[p.before_station])
                for p in w.boarding_points
            }

        inexact: dict[str, str] = {}
        if any(points(w) != points(world) for w in policies[1:]):
            for name in primaries:
                inexact[name] = "an intervention moves a boarding point to another station"
        for w in policies:
            false_alarm = {m.name: m.false_alarm for m in w.methods}
            for i, s in enumerate(w.stations):
                if s.role != "primary" or not s.refer_to:
                    continue
                methods = [s.method] + ([s.selection.fallback_method] if s.selection.fallback_method else [])
                if max(false_alarm[m] for m in methods) <= 0.0:
                    continue  # an occupied vehicle is referred only with its people found at this station
                target = position[s.refer_to]
                for j in range(i + 1, target):
                    skipped = w.stations[j]
                    if skipped.role == "primary" and skipped.name not in inexact:
                        inexact[skipped.name] = (
                            f"a false alarm at '{s.name}' refers a vehicle to '{s.refer_to}', past '{skipped.name}', "
                            "and truth does not record which vehicles were referred"
                        )
        return cls(tuple(position), primaries, position, points(world), inexact)


def _days(frame: pd.DataFrame, window: Window) -> pd.DataFrame:
    if window is None:
        return frame
    return frame[(frame["day"] >= window[0]) & (frame["day"] <= window[1])]


def persons_at_risk(attempts: pd.DataFrame, window: Window = None) -> int:
    """Distinct persons with at least one attempt in the window (group sizes summed over distinct agents)."""
    rows = _days(attempts, window)
    return int(rows.groupby("agent_id")["persons"].max().sum())


def _reached(attempts: pd.DataFrame, route: Route, station: str) -> pd.Series:
    j = route.position[station]
    board = attempts["point"].map(route.point_position).astype(float)
    found_at = attempts["station"].map(route.position).astype(float)  # NaN where not detected
    found_before = (attempts["outcome"] == "detected") & (found_at < j)
    return attempts["outcome"].isin(BOARDED) & (board <= j) & ~found_before


def attempts_reaching(attempts: pd.DataFrame, route: Route, station: str, window: Window = None) -> int:
    """Person-attempts in the window that reached ``station`` still hidden (see the module notes)."""
    rows = _days(attempts, window)
    return int(rows.loc[_reached(rows, route, station), "persons"].sum())


def passed_unfound(attempts: pd.DataFrame, route: Route, station: str, window: Window = None) -> int:
    """Person-attempts in the window that reached ``station`` and were not detected there."""
    rows = _days(attempts, window)
    reached = _reached(rows, route, station)
    found_here = (rows["outcome"] == "detected") & (rows["station"] == station)
    return int(rows.loc[reached & ~found_here, "persons"].sum())


def truth_value(quantity: str, attempts: pd.DataFrame, route: Route, window: Window = None) -> int:
    """A truth quantity by name: ``persons_at_risk``, ``reaching:<station>`` or ``passed_unfound:<station>``."""
    kind, _, station = quantity.partition(":")
    if kind == PERSONS_AT_RISK:
        return persons_at_risk(attempts, window)
    if station not in route.position:
        raise EstimatorCheckError(f"truth quantity '{quantity}' names no station of the route")
    if kind == REACHING:
        return attempts_reaching(attempts, route, station, window)
    if kind == PASSED_UNFOUND:
        return passed_unfound(attempts, route, station, window)
    raise EstimatorCheckError(f"unknown truth quantity '{quantity}'")


def describe_quantity(quantity: str) -> str:
    """Words for a truth quantity."""
    kind, _, station = quantity.partition(":")
    if kind == PERSONS_AT_RISK:
        return "distinct persons at risk"
    if kind == REACHING:
        return f"attempts reaching '{station}'"
    return f"attempts passing '{station}' unfound"


# --------------------------------------------------------------------------- running the estimators


def read_world(run_dir: str | Path) -> World:
    """The validated world a run used (its ``world.json``)."""
    path = Path(run_dir) / WORLD_FILE
    if not path.is_file():
        raise EstimatorCheckError(f"{path}: missing; the check needs the world a run used")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise EstimatorCheckError(f"{path}: not readable JSON ({exc})") from None
    return parse_world(data, path)


def sensitivities_from_world(world: World, strength: float = SENSITIVITY_STRENGTH) -> dict[str, tuple[float, float]]:
    """Beta(a, b) per primary station centred on its check method's detection chance in the world.

    The chance is averaged over the classes people can hide in (capacity > 0),
    weighted by traffic share: an analyst who knows the kit's sensitivity from
    trials but not the class mix of attempts. a + b = ``strength``; the mean is
    kept inside [1/strength, 1 − 1/strength] so both parameters stay positive.
    """
    classes = [(c.name, c.share) for c in world.vehicle_classes if c.capacity > 0]
    weights = np.array([share for _, share in classes], dtype=float)
    if not classes or weights.sum() <= 0:
        weights = np.ones(len(classes))
    methods = {m.name: m for m in world.methods}
    out: dict[str, tuple[float, float]] = {}
    for station in world.stations:
        if station.role != "primary":
            continue
        detection = methods[station.method].detection
        default = detection.get("default", 0.0)
        chances = np.array([detection.get(name, default) for name, _ in classes], dtype=float)
        mean = float(np.average(chances, weights=weights)) if classes else default
        mean = min(max(mean, 1.0 / strength), 1.0 - 1.0 / strength)
        out[station.name] = (mean * strength, (1.0 - mean) * strength)
    return out


SensitivityChoice = Literal["world"] | Sensitivities | None


def _sensitivities(choice: SensitivityChoice, world: World | None) -> Sensitivities | None:
    if isinstance(choice, str):
        if choice != "world":
            raise EstimatorCheckError(f"sensitivities must be 'world', a mapping or None, got {choice!r}")
        return sensitivities_from_world(world) if world is not None else None
    return choice


def run_estimators(
    run_dir: str | Path, window: Window = None, level: float = DEFAULT_LEVEL, sensitivities: SensitivityChoice = "world"
) -> tuple[list[EstimateResult], list[tuple[str, str]]]:
    """Every estimator on a run's observed records (run_all, each estimator isolated from the others' faults).

    ``sensitivities="world"`` builds them from the run's world.json
    (:func:`sensitivities_from_world`); None leaves the expansion and the
    relative-sensitivity removal unable to run. No bootstrap, so the result
    depends only on the run directory.
    """
    world = read_world(run_dir) if isinstance(sensitivities, str) else None
    chosen = _sensitivities(sensitivities, world)
    return run_all(read_tables(run_dir), window, level, chosen, isolate=True)


# --------------------------------------------------------------------------- per-run comparison

PER_RUN_COLUMNS = (
    "run", "slug", "method", "label", "quantity", "target", "estimate", "ci_low", "ci_high", "level",
    "observed", "truth", "error", "ratio", "covered", "exact", "note",
)
SKIPPED_COLUMNS = ("run", "slug", "method", "why")

RunsGiven = Mapping[str | Path, Mapping[str, Any]] | Iterable[str | Path | tuple[str | Path, Mapping[str, Any]]]


def _runs(runs: RunsGiven) -> list[tuple[Path, dict[str, Any]]]:
    if isinstance(runs, Mapping):
        items = list(runs.items())
    else:
        items = [(item, {}) if isinstance(item, (str, Path)) else item for item in runs]
    out = []
    for entry in items:
        try:
            path, labels = entry
        except (TypeError, ValueError):
            raise EstimatorCheckError(f"a run is a directory or (directory, labels), got {entry!r}") from None
        if not isinstance(labels, Mapping):
            raise EstimatorCheckError(f"labels of run {path} must be a mapping of factor -> level, got {labels!r}")
        out.append((Path(path), {str(k): _scalar(v) for k, v in labels.items()}))
    if not out:
        raise EstimatorCheckError("no runs given")
    return out


def _scalar(value: Any) -> Any:
    """A label value fit for grouping: scalars as they are, anything else as JSON text."""
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    return json.dumps(value, sort_keys=True, default=str)


def _comparisons(result: EstimateResult, route: Route) -> tuple[list[dict[str, Any]], list[tuple[str, str]]]:
    """(comparison rows without the truth, (slug, why) skipped) for one estimator result."""
    slug = method_slug(result.method) or slug_of(result.method)
    for prefix, why in EXCLUDED_TARGETS:
        if result.target.startswith(prefix):
            return [], [(slug, why)]
    rule = _rule_for(result.method)
    if rule is None:
        return [], [(slug, "no truth mapping for this estimator in TRUTH_TABLE")]
    base = {"method": result.method, "target": result.target, "level": result.level, "observed": result.observed}
    if rule.truth == PERSONS_AT_RISK:
        if result.target != _PERSONS_TARGET:
            return [], [(slug, f"target '{result.target}' is not the '{_PERSONS_TARGET}' TRUTH_TABLE expects")]
        row = dict(base, slug=slug, label=rule.label, quantity=PERSONS_AT_RISK, note="")
        return [dict(row, estimate=result.estimate, ci_low=result.ci_low, ci_high=result.ci_high)], []
    match = _REACHING_TARGET.match(result.target)
    if not match or match["station"] not in route.position:
        return [], [(slug, f"target '{result.target}' names no station of the run's route")]
    station = match["station"]
    note = route.inexact.get(station, "")
    rows = [
        dict(
            base, slug=slug, label=rule.label if rule.method != EXPANSION else f"{rule.label} at '{station}'",
            quantity=f"{REACHING}:{station}", note=note,
            estimate=result.estimate, ci_low=result.ci_low, ci_high=result.ci_high,
        )
    ]
    if rule.method == EXPANSION:
        undetected = RULES[EXPANSION + UNDETECTED_SUFFIX]
        rows.append(
            dict(
                base, method=result.method + UNDETECTED_SUFFIX, slug=slug + UNDETECTED_SUFFIX,
                label=f"{undetected.label} at '{station}'", quantity=f"{PASSED_UNFOUND}:{station}", note=note,
                estimate=result.undetected, ci_low=result.ci_low - result.observed,
                ci_high=result.ci_high - result.observed,
            )
        )
    return rows, []


def check_run(
    run_dir: str | Path,
    labels: Mapping[str, Any] | None = None,
    *,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    sensitivities: SensitivityChoice = "world",
    include_inexact: bool = False,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """One run: (comparison rows, skipped rows); see :func:`check_runs`."""
    return check_runs(
        [(run_dir, dict(labels or {}))], window=window, level=level, sensitivities=sensitivities,
        include_inexact=include_inexact,
    )


def check_runs(
    runs: RunsGiven,
    *,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    sensitivities: SensitivityChoice = "world",
    include_inexact: bool = False,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Every estimator against truth in every run: (per-run table, skipped table).

    ``runs``: run directories, each alone or with a label dict of factors
    (e.g. ``{"behaviour": "adaptive", "policy": "more_dogs"}``), or a mapping
    directory -> labels. A ``behaviour`` label is taken from the run's world
    when not given. The per-run table has one row per run x compared
    estimator with the label columns then :data:`PER_RUN_COLUMNS`; ``exact``
    is False (and ``note`` says why) for a truth that cannot be counted
    exactly, and such rows are only kept with ``include_inexact``. The skipped
    table lists per run the estimators that could not run, whose target has no
    truth to match, or whose comparison was inexact and left out, with why.
    ``df.attrs["factors"]`` names the label columns.
    """
    window = check_window(window, "estimator check")
    given = _runs(runs)
    rows: list[dict[str, Any]] = []
    skipped: list[dict[str, Any]] = []
    factors: list[str] = []
    for path, labels in given:
        world = read_world(path)
        labels = {"behaviour": world.adversary.behaviour, **labels}
        factors += [k for k in labels if k not in factors]
        route = Route.from_world(world)
        try:
            attempts = read_truth(path)["attempts"]
        except (OSError, ValueError) as exc:
            raise EstimatorCheckError(f"{path}: no truth records to compare with ({exc})") from None
        if _cached_setting(path, window, level, sensitivities):
            results, failures = cached_results(path)  # what the batch's workers already computed
        else:
            results, failures = run_estimators(path, window, level, _sensitivities(sensitivities, world))
        for name, reason in failures:
            skipped.append({**labels, "run": str(path), "slug": method_slug(name) or slug_of(name), "method": name,
                            "why": f"cannot run: {reason}"})
        for result in results:
            compared, left_out = _comparisons(result, route)
            for slug, why in left_out:
                skipped.append({**labels, "run": str(path), "slug": slug, "method": result.method, "why": why})
            for row in compared:
                exact = not row["note"]
                if not exact and not include_inexact:
                    skipped.append({**labels, "run": str(path), "slug": row["slug"], "method": row["method"],
                                    "why": f"truth not exact: {row['note']}"})
                    continue
                truth = truth_value(row["quantity"], attempts, route, window)
                error = row["estimate"] - truth
                rows.append(
                    {
                        **labels,
                        **row,
                        "run": str(path),
                        "truth": truth,
                        "error": error,
                        "ratio": row["estimate"] / truth if truth else math.nan,
                        "covered": bool(row["ci_low"] <= truth <= row["ci_high"]),
                        "exact": exact,
                    }
                )
    per_run = pd.DataFrame(rows, columns=[*factors, *PER_RUN_COLUMNS])
    skipped_frame = pd.DataFrame(skipped, columns=[*factors, *SKIPPED_COLUMNS])
    per_run = per_run.astype({"truth": "int64", "covered": "bool", "exact": "bool"}) if len(per_run) else per_run
    for frame in (per_run, skipped_frame):
        frame.attrs["factors"] = list(factors)
    return per_run, skipped_frame


def _cached_setting(path: Path, window: Window, level: float, sensitivities: SensitivityChoice) -> bool:
    """The request is the one :func:`cached_results` answers for this run."""
    if not (isinstance(sensitivities, str) and sensitivities == "world" and level == DEFAULT_LEVEL):
        return False
    try:
        return window == summarised_days(path)
    except (OSError, KeyError, ValueError):  # no manifest to say which days the run summarises
        return False


# --------------------------------------------------------------------------- aggregation

SUMMARY_COLUMNS = (
    "slug", "method", "label", "quantity", "n", "mean_estimate", "mean_truth", "bias", "bias_low", "bias_high",
    "relative_bias", "relative_bias_low", "relative_bias_high", "rmse", "relative_rmse", "mean_ratio",
    "covered", "coverage", "coverage_low", "coverage_high", "level", "confidence", "coverage_interval",
)


def clopper_pearson_interval(successes: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Clopper & Pearson (1934) exact interval from Beta quantiles (scipy.special.betaincinv)."""
    if n <= 0:
        return math.nan, math.nan
    tail = (1 - confidence) / 2
    low = 0.0 if successes == 0 else float(special.betaincinv(successes, n - successes + 1, tail))
    high = 1.0 if successes == n else float(special.betaincinv(successes + 1, n - successes, 1 - tail))
    return low, high


def t_interval(values: Sequence[float], confidence: float = 0.95) -> tuple[float, float, float]:
    """(mean, low, high): Student-t interval of a mean over runs, n − 1 df; NaN ends for n < 2."""
    x = np.asarray(values, dtype=float)
    mean = float(x.mean()) if x.size else math.nan
    if x.size < 2:
        return mean, math.nan, math.nan
    half = float(special.stdtrit(x.size - 1, 0.5 + confidence / 2)) * float(x.std(ddof=1)) / math.sqrt(x.size)
    return mean, mean - half, mean + half


def relative_bias_interval(
    errors: Sequence[float], truths: Sequence[float], confidence: float = 0.95
) -> tuple[float, float, float]:
    """(r, low, high) for r = mean error / mean truth, SE by the delta method for a ratio of means.

    u_i = (e_i − r·t_i) / mean truth, SE = sd(u)/sqrt(n), t quantile with n − 1 df.
    """
    e, t = np.asarray(errors, dtype=float), np.asarray(truths, dtype=float)
    if e.size == 0 or t.mean() == 0:
        return math.nan, math.nan, math.nan
    r = float(e.mean() / t.mean())
    if e.size < 2:
        return r, math.nan, math.nan
    u = (e - r * t) / t.mean()
    half = float(special.stdtrit(e.size - 1, 0.5 + confidence / 2)) * float(u.std(ddof=1)) / math.sqrt(e.size)
    return r, r - half, r + half


def summarise_check(
    per_run: pd.DataFrame,
    by: Sequence[str] | None = None,
    *,
    confidence: float = 0.95,
    coverage_interval: Literal["wilson", "clopper-pearson"] = "wilson",
) -> pd.DataFrame:
    """Per estimator x factor levels: bias, relative bias, RMSE and coverage with their intervals.

    ``by``: label columns to split on (default: ``per_run.attrs["factors"]``,
    else every column that is not a per-run column). Intervals over runs are
    at ``confidence``; ``level`` is the nominal level of the estimators'
    own intervals, which coverage should match.
    """
    if not 0 < confidence < 1:
        raise EstimatorCheckError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    interval = {"wilson": wilson_interval, "clopper-pearson": clopper_pearson_interval}.get(coverage_interval)
    if interval is None:
        raise EstimatorCheckError(f"coverage_interval must be 'wilson' or 'clopper-pearson', got {coverage_interval!r}")
    if by is None:
        by = per_run.attrs.get("factors") or [c for c in per_run.columns if c not in PER_RUN_COLUMNS]
    by = list(by)
    missing = [c for c in ["slug", "error", "truth", "estimate", "covered", *by] if c not in per_run.columns]
    if missing:
        raise EstimatorCheckError(f"the per-run table lacks column(s): {', '.join(missing)}")
    rows = []
    if len(per_run):
        for keys, group in per_run.groupby(["slug", *by], sort=True, dropna=False):
            keys = keys if isinstance(keys, tuple) else (keys,)
            errors, truths = group["error"].to_numpy(float), group["truth"].to_numpy(float)
            bias, bias_low, bias_high = t_interval(errors, confidence)
            rel, rel_low, rel_high = relative_bias_interval(errors, truths, confidence)
            n, hits = len(group), int(group["covered"].sum())
            cov_low, cov_high = interval(hits, n, confidence)
            mean_truth = float(truths.mean())
            rmse = float(np.sqrt(np.mean(errors**2)))
            ratios = group["ratio"].to_numpy(float) if "ratio" in group else np.full(n, math.nan)
            first = group.iloc[0]
            rows.append(
                {
                    **dict(zip(["slug", *by], keys, strict=True)),
                    "method": first.get("method"),
                    "label": first.get("label"),
                    "quantity": first.get("quantity"),
                    "n": n,
                    "mean_estimate": float(group["estimate"].mean()),
                    "mean_truth": mean_truth,
                    "bias": bias,
                    "bias_low": bias_low,
                    "bias_high": bias_high,
                    "relative_bias": rel,
                    "relative_bias_low": rel_low,
                    "relative_bias_high": rel_high,
                    "rmse": rmse,
                    "relative_rmse": rmse / mean_truth if mean_truth else math.nan,
                    "mean_ratio": float(np.mean(ratios)) if np.isfinite(ratios).all() else math.nan,
                    "covered": hits,
                    "coverage": hits / n,
                    "coverage_low": cov_low,
                    "coverage_high": cov_high,
                    "level": float(group["level"].iloc[0]) if "level" in group else math.nan,
                    "confidence": confidence,
                    "coverage_interval": coverage_interval,
                }
            )
    columns = ["slug", *by, *[c for c in SUMMARY_COLUMNS if c != "slug"]]
    summary = pd.DataFrame(rows, columns=columns)
    summary.attrs["factors"] = by
    return summary


# --------------------------------------------------------------------------- words for a briefing


def _pct(x: float) -> str:
    """A share as a percentage: whole numbers from 10% up, one decimal below."""
    value = abs(100 * x)
    return f"{value:.0f}" if value >= 9.95 else f"{value:.1f}"


def _signed_pct(x: float) -> str:
    sign = "−" if x < 0 else "+"
    return f"{sign}{_pct(x)}%"


def _conditions(row: Mapping[str, Any], factors: Sequence[str]) -> str:
    parts = []
    for name in factors:
        value = row.get(name)
        if value is None or (isinstance(value, float) and math.isnan(value)):
            continue
        parts.append(f"under {value} behaviour" if name == "behaviour" else f"with {name} = {value}")
    return " ".join(parts)


def bias_sentence(row: Mapping[str, Any] | pd.Series, factors: Sequence[str] | None = None) -> str:
    """One summary row as a sentence, e.g. "Under adaptive behaviour the expansion estimate at 'gate'
    undercounts attempts reaching 'gate' by 23% (95% interval 18–28%) over 10 runs; ..."."""
    row = dict(row)
    if factors is None:
        factors = [k for k in row if k not in SUMMARY_COLUMNS]
    what = describe_quantity(str(row["quantity"]))
    who = str(row.get("label") or row.get("method"))
    where = _conditions(row, factors)
    n = int(row["n"])
    runs = f"{n} run" + ("" if n == 1 else "s")
    confidence = float(row.get("confidence", 0.95))
    conf = f"{100 * confidence:g}%"
    rel, low, high = (float(row[k]) for k in ("relative_bias", "relative_bias_low", "relative_bias_high"))
    head = f"{where} {who}" if where else who
    head = head[0].upper() + head[1:]
    if not math.isfinite(rel):
        body = f"{head} has no relative bias to report on {what} (the truth is zero) over {runs}"
    elif not (math.isfinite(low) and math.isfinite(high)):
        verb = "overcounts" if rel > 0 else "undercounts"
        body = f"{head} {verb} {what} by {_pct(rel)}% over {runs} (too few runs for an interval)"
    elif low > 0 or high < 0:
        verb = "overcounts" if rel > 0 else "undercounts"
        ends = sorted((abs(low), abs(high)))
        body = f"{head} {verb} {what} by {_pct(rel)}% ({conf} interval {_pct(ends[0])}–{_pct(ends[1])}%) over {runs}"
    else:
        body = (
            f"{head} shows no bias distinguishable from zero on {what}: {_signed_pct(rel)} "
            f"({conf} interval {_signed_pct(low)} to {_signed_pct(high)}) over {runs}"
        )
    level = row.get("level")
    if level is not None and math.isfinite(float(level)):
        cov_low, cov_high = float(row["coverage_low"]), float(row["coverage_high"])
        body += (
            f"; its {100 * float(level):g}% intervals covered the truth in {int(row['covered'])} of {n} "
            f"({_pct(float(row['coverage']))}%, {conf} interval {_pct(cov_low)}–{_pct(cov_high)}%)"
        )
    return body + "."


def briefing_sentences(summary: pd.DataFrame) -> list[str]:
    """:func:`bias_sentence` for every row of a summary."""
    factors = summary.attrs.get("factors")
    return [bias_sentence(row, factors) for _, row in summary.iterrows()]


# --------------------------------------------------------------------------- flat numbers for a batch store


def _finite(value: float) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None


def estimates_for_run(
    run_dir: str | Path,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    sensitivities: SensitivityChoice = "world",
) -> dict[str, float | None]:
    """Flat ``est_<slug>``, ``est_<slug>_lo``, ``est_<slug>_hi`` for every estimator of the run.

    Reads observed records (and, for ``sensitivities="world"``, the run's
    world.json for the expansion's sensitivities; without it those two
    estimators are None). An estimator that cannot run gives None in its
    three columns, so every run of a batch has the same columns; no value is
    NaN or infinite. Deterministic: no bootstrap. Truth is not read. A bad
    window or level, or a directory without observed records, still raises.
    """
    return _flat_estimates(*_results_for_run(run_dir, window, level, sensitivities))


def _results_for_run(
    run_dir: str | Path, window: Window = None, level: float = DEFAULT_LEVEL, sensitivities: SensitivityChoice = "world"
) -> tuple[list[EstimateResult], list[tuple[str, str]]]:
    """:func:`run_estimators`, the world's sensitivities left out (not failing) when its world.json cannot be read."""
    window = check_window(window, "estimates")
    z_value(level, "estimates")
    if isinstance(sensitivities, str) and sensitivities == "world":
        try:
            chosen = _sensitivities("world", read_world(run_dir))
        except InputError:
            chosen = None
    else:
        chosen = _sensitivities(sensitivities, None)
    return run_estimators(run_dir, window, level, chosen)


def _flat_estimates(results: list[EstimateResult], failures: list[tuple[str, str]]) -> dict[str, float | None]:
    out: dict[str, float | None] = {}
    for name, _ in failures:
        slug = method_slug(name)
        if slug is not None and slug != "expansion":
            out.update({f"est_{slug}": None, f"est_{slug}_lo": None, f"est_{slug}_hi": None})
    for result in results:
        slug = method_slug(result.method) or slug_of(result.method)
        out[f"est_{slug}"] = _finite(result.estimate)
        out[f"est_{slug}_lo"] = _finite(result.ci_low)
        out[f"est_{slug}_hi"] = _finite(result.ci_high)
    return dict(sorted(out.items()))


ESTIMATES_CACHE = "estimates_summary.json"


@functools.cache
def estimators_fingerprint() -> str:
    """SHA-256 over the source of the estimators and the observed schema they read.

    A cached result is trusted only under the code that computed it: a changed
    estimator (a fix, a new method) recomputes every run's cache instead of a
    briefing quietly showing the old figures.
    """
    sources = sorted(Path(estimate_package.__file__).parent.glob("*.py")) + [Path(observed_module.__file__)]
    digest = hashlib.sha256()
    for source in sources:
        digest.update(source.name.encode() + b"\0" + source.read_bytes() + b"\0")
    return digest.hexdigest()


def summarised_days(run_dir: str | Path) -> tuple[int, int]:
    """The days a run's summary covers, (first, last) inclusive: after its warm-up, from its manifest."""
    manifest = json.loads((Path(run_dir) / MANIFEST_FILE).read_text(encoding="utf-8"))
    warmup = int(manifest.get("warmup_days", 0))
    return warmup, warmup + int(manifest["days"]) - 1


def cached_results(run_dir: str | Path) -> tuple[list[EstimateResult], list[tuple[str, str]]]:
    """Every estimator over the days the run's summary covers, at the default level with the world's sensitivities.

    The window is the one of the run's other summary figures (the warm-up left
    out, as the briefing does). Kept in ``RUN_DIR/estimates_summary.json``:
    derived from the run's own observed records, written atomically, naming
    its window, level and :func:`estimators_fingerprint`, and recomputed when
    it is missing, covers other days or came from other estimator code. A
    batch's workers write it as each run finishes; the store's summary columns
    (:func:`cached_estimates`) and the briefing's estimator check read it.
    """
    window = summarised_days(run_dir)
    path = Path(run_dir) / ESTIMATES_CACHE
    if path.is_file():
        cached = json.loads(path.read_text(encoding="utf-8"))
        same_request = cached.get("window") == list(window) and cached.get("level") == DEFAULT_LEVEL
        if same_request and cached.get("estimators") == estimators_fingerprint() and "results" in cached:
            results = [EstimateResult.from_dict(r) for r in cached["results"]]
            return results, [(str(name), str(why)) for name, why in cached["failures"]]
    results, failures = _results_for_run(run_dir, window)
    # parameters as pairs: they keep the order each estimator reports them in (JSON objects are written sorted)
    written = [{**r.to_dict(), "parameters": [list(p) for p in r.parameters]} for r in results]
    record = {"window": list(window), "level": DEFAULT_LEVEL, "estimators": estimators_fingerprint()}
    write_json({**record, "results": written, "failures": failures}, path)
    return results, failures


def cached_estimates(run_dir: str | Path) -> dict[str, float | None]:
    """:func:`estimates_for_run` over the days the run's summary covers, from :func:`cached_results`.

    The summary extension a batch store uses for its ``est_`` columns, so they
    estimate what the summary's other figures count.
    """
    return _flat_estimates(*cached_results(run_dir))


def truth_for_run(run_dir: str | Path, window: Window = None) -> dict[str, int | None]:
    """``truth_<slug>`` for the slugs of :func:`estimates_for_run`: the truth each estimator targets.

    None where the truth cannot be counted exactly (see :class:`Route`). This reads truth records: it
    belongs beside the estimates in a store, never inside an estimator.
    """
    world = read_world(run_dir)
    route = Route.from_world(world)
    attempts = read_truth(run_dir)["attempts"]
    window = check_window(window, "estimator check")
    at_risk = persons_at_risk(attempts, window)
    out: dict[str, int | None] = {}
    for rule in TRUTH_TABLE:
        if rule.truth == PERSONS_AT_RISK:
            out[f"truth_{rule.slug}"] = at_risk
        elif rule.method in (TWO_PASS, CARLE_STRUB, ZIPPIN, RELATIVE) and route.primaries:
            out[f"truth_{rule.slug}"] = attempts_reaching(attempts, route, route.primaries[0], window)
    for station in route.primaries:
        slug = f"expansion_{slug_of(station)}"
        exact = station not in route.inexact
        out[f"truth_{slug}"] = attempts_reaching(attempts, route, station, window) if exact else None
        out[f"truth_{slug}{UNDETECTED_SUFFIX}"] = passed_unfound(attempts, route, station, window) if exact else None
    return dict(sorted(out.items()))


def runs_from_store(out: str | Path) -> list[tuple[Path, dict[str, Any]]]:
    """(run directory, factor labels) for every completed run of a batch store (``OUT/runs/*``).

    Labels are the design point's factor values from each run's manifest
    (``experiment_run.values``); replications of a design point share them.
    """
    base = Path(out) / "runs"
    if not base.is_dir():
        raise EstimatorCheckError(f"{base}: no runs folder; is {out} a batch output folder?")
    found = []
    for run_dir in sorted(p for p in base.iterdir() if p.is_dir() and not p.name.startswith(".")):
        manifest_path = run_dir / MANIFEST_FILE
        if not manifest_path.is_file():
            continue
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
        info = manifest.get("experiment_run", {}) if isinstance(manifest, dict) else {}
        found.append((run_dir, dict(info.get("values", {}))))
    return found
