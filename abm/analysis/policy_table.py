"""Policy comparison helpers for briefings: hazard of where people board, delay limits.

These are the small computations a policy briefing needs on top of a batch's
summary table (:mod:`abm.experiment.store`):

* :func:`hazard_weighted_share` and :func:`run_truth_figures`: per-run truth
  figures the run summary does not carry (where people boarded, weighted by
  how dangerous boarding there is; crossings by people who boarded after the
  last check, whom no observed record can see);
* :func:`attempt_shares`: attempt shares by boarding point and time band, the
  cells of a displacement heat map;
* :class:`DelayLimits`: the delay a port can bear, against a baseline;
* :func:`difference_in_differences`: how much a policy's paired effect changes
  between two assumptions (e.g. static vs adaptive behaviour), replication by
  replication under common random numbers.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..experiment.compare import mean_interval
from ..experiment.single import WORLD_FILE
from ..world.words import GENERIC, Words


def hazard_weighted_share(
    attempts: pd.DataFrame, hazards: Mapping[str, float], depth_hazards: Mapping[str, float] | None = None
) -> float | None:
    """``sum(persons x hazard) / sum(persons)`` over attempt rows; None without attempts.

    An attempt's hazard is its boarding point's plus its concealment depth's
    (``depth_hazards``; attempt rows from before depth was recorded count
    none), at most 1, as in the agents' option space. The displacement
    analysis' hazard-weighted share (:mod:`abm.analysis.displacement`) is this
    measure: 0 when everyone boards where boarding is safest and hides at the
    safest depth, 1 when everyone boards and hides at hazard 1.
    """
    persons = attempts["persons"].to_numpy(float)
    if persons.sum() <= 0:
        return None
    weights = attempts["point"].map(hazards).to_numpy(float)
    if depth_hazards and "depth" in attempts:
        weights = np.minimum(weights + attempts["depth"].map(depth_hazards).fillna(0.0).to_numpy(float), 1.0)
    return float((persons * weights).sum() / persons.sum())


def after_last_check(world: Mapping[str, Any]) -> set[str]:
    """Boarding points no primary station lies downstream of (before_station is departure or a secondary)."""
    roles = {s["name"]: s.get("role", "primary") for s in world["stations"]}
    return {
        p["name"] for p in world["boarding_points"]
        if p["before_station"] == "departure" or roles.get(p["before_station"]) != "primary"
    }


def read_run_world(run_dir: str | Path) -> dict[str, Any]:
    """The validated world a run used, as plain data (its world.json)."""
    return json.loads((Path(run_dir) / WORLD_FILE).read_text(encoding="utf-8"))


def run_truth_figures(attempts: pd.DataFrame, world: Mapping[str, Any]) -> dict[str, float | int | None]:
    """Truth figures of one run from its attempt rows (already limited to the summarised days) and world.

    ``hazard_weighted_share``: see :func:`hazard_weighted_share`, with the
    run's own boarding-point and depth hazards. ``crossings_after_checks``: persons who
    crossed having boarded after the last primary station, so that no check
    could have found them and no estimator can count them.
    """
    hazards = {p["name"]: float(p["hazard"]) for p in world["boarding_points"]}
    depth_hazards = {d["name"]: float(d.get("hazard", 0.0)) for d in world.get("depths", [])}
    crossed = attempts[attempts["outcome"] == "crossed"]
    unseen = int(crossed.loc[crossed["point"].isin(after_last_check(world)), "persons"].sum())
    return {
        "hazard_weighted_share": hazard_weighted_share(attempts, hazards, depth_hazards),
        "crossings_after_checks": unseen,
    }


def attempt_shares(attempts: pd.DataFrame, points: Sequence[str], bands: Sequence[str]) -> pd.DataFrame:
    """Share of attempting persons per boarding point (rows) and time band (columns); cells sum to 1."""
    counts = attempts.groupby(["point", "band"])["persons"].sum().unstack("band")
    counts = counts.reindex(index=list(points), columns=list(bands)).fillna(0.0)
    total = float(counts.to_numpy().sum())
    return counts / total if total > 0 else counts


@dataclass(frozen=True)
class DelayLimits:
    """The delay a crossing can bear, relative to the baseline policy of the same scenario.

    A policy is within the limits when its mean 95th-percentile time at the
    crossing is at most ``time_in_port_increase`` (a fraction) above the
    baseline's and its mean share of vehicles missing their booked departure at most
    ``missed_departure_points`` percentage points above the baseline's.
    """

    time_in_port_increase: float = 0.10
    missed_departure_points: float = 1.0

    def within(self, tip: float, tip_base: float, missed: float, missed_base: float) -> bool:
        """True when a policy's means stay inside the limits (a missing missed-departure share is no bar)."""
        if not (math.isfinite(tip) and math.isfinite(tip_base)):
            return False
        ok_tip = tip <= tip_base * (1 + self.time_in_port_increase) + 1e-9
        if not (math.isfinite(missed) and math.isfinite(missed_base)):
            return ok_tip
        return ok_tip and missed <= missed_base + self.missed_departure_points / 100 + 1e-12

    def describe(self, baseline: str, words: Words = GENERIC) -> str:
        """The limits in words, in the crossing's own (``words``)."""
        return (
            f"95th-percentile {words.time_at_site} no more than {100 * self.time_in_port_increase:g}% above "
            f"{baseline}'s"
        ) + ("" if not words.departs else (
            f", and {words.missed} no more than {self.missed_departure_points:g} percentage point"
            f"{'' if self.missed_departure_points == 1 else 's'} above {baseline}'s"
        ))


def difference_in_differences(
    policy: pd.Series, base: pd.Series, policy_ref: pd.Series, base_ref: pd.Series, confidence: float = 0.95
) -> tuple[float, float, float, int]:
    """Mean over replications of ``(policy - base) - (policy_ref - base_ref)``, its t-interval and pairs.

    Series are indexed by replication; under common random numbers replication
    r of every design point shares a seed, so the four runs of one replication
    are compared with one another before averaging.
    """
    joined = pd.concat(
        {"p": policy, "b": base, "pr": policy_ref, "br": base_ref}, axis=1, join="inner"
    ).astype(float).dropna()
    values = (joined["p"] - joined["b"]) - (joined["pr"] - joined["br"])
    mean, low, high = mean_interval(values.to_numpy(), confidence)
    return mean, low, high, len(joined)
