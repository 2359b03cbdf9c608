"""What each estimator is compared with, and how that truth is counted from a run's truth records.

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
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass

import pandas as pd

from ...errors import InputError
from ...estimate.expansion import EXPANSION
from ...estimate.frequency import CHAO, CHAO_BC, ZELTERMAN, ZTP, ZTP_REGRESSION
from ...estimate.removal import CARLE_STRUB, RELATIVE, TWO_PASS, ZIPPIN
from ...estimate.twosample import CHAPMAN
from ...estimate.windows import Window
from ...world.loader import policy_after
from ...world.schema import World


BOARDED = ("detected", "crossed")  # outcomes of an attempt that got onto a vehicle

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
