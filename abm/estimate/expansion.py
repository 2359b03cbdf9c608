"""Expansion of detections at one station by its selection share and an assumed sensitivity.

What it estimates: the attempts (or, with ``unit="vehicles"``, the vehicles
with people) that *reached* the station in the window. At station j, the
people in a vehicle of class c are found with chance π_jc·s_j, where π_jc =
checks/vehicles (from the ``checks`` table) is the selection share and s_j
the sensitivity of a check there, so V̂_j = Σ_c D_jc / (π_jc·s_j) — a
Horvitz–Thompson sum. ``observed`` is D_j, the detections at j, so
``undetected`` = V̂_j − D_j is what passed station j unfound, split in the
parameters into people in unchecked vehicles (V̂_j − D_j/s_j) and people
missed by a check (D_j/s_j − D_j).

Estimates at different stations overlap (what reaches station 2 is what
passed station 1 plus what boarded in between), so they must not be added;
the estimate at the first primary station covers everything that boarded
upstream of every station, and what passed the last primary station unfound
is the estimate of undetected attempts for the route.

Sensitivities come from the caller as Beta(a, b) per station or per check
method. The delta-method interval is the main one; with a seeded
``numpy.random.Generator`` a parametric bootstrap interval is added to the
parameters (``boot_low``, ``boot_high``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Literal

import numpy as np
import pandas as pd

from .inputs import Observed, load_tables, primary_stations, station_detections
from .results import DEFAULT_LEVEL, EstimateResult, EstimatorCannotRun, make_result
from .windows import Window, check_window, in_window, window_text

EXPANSION = "Expansion by selection share and sensitivity"
SOURCE = "Horvitz & Thompson (1952) inverse-probability expansion; delta method and parametric bootstrap"

Sensitivities = Mapping[str, tuple[float, float]]
"""Beta(a, b) of a check's sensitivity, keyed by station name or by check method name."""


def expansion_name(station: str) -> str:
    """The method name of the expansion at one station."""
    return f"{EXPANSION} at '{station}'"


def beta_for(station: str, method: str, sensitivities: Sensitivities | None, estimator: str) -> tuple[float, float]:
    """The Beta(a, b) given for the station, else for its check method."""
    if not sensitivities:
        raise EstimatorCannotRun(estimator, "no sensitivities given (Beta(a, b) per station or check method)")
    key = station if station in sensitivities else method
    if key not in sensitivities:
        raise EstimatorCannotRun(estimator, f"no sensitivity given for station '{station}' or its method '{method}'")
    try:
        a, b = (float(v) for v in sensitivities[key])
    except (TypeError, ValueError) as exc:
        raise EstimatorCannotRun(estimator, f"the sensitivity for '{key}' must be a pair (a, b)") from exc
    if not (a > 0 and b > 0 and np.isfinite(a) and np.isfinite(b)):
        raise EstimatorCannotRun(estimator, f"the sensitivity Beta(a, b) for '{key}' needs a, b > 0, got ({a}, {b})")
    return a, b


def selection_shares(checks: pd.DataFrame, station: str, strata: list[str], estimator: str) -> pd.Series:
    """checks/vehicles per stratum at one station (window already applied)."""
    rows = checks[checks["station"] == station]
    if rows.empty:
        raise EstimatorCannotRun(estimator, f"the checks table has no row for station '{station}' in the window")
    if (rows["checks"] > rows["vehicles"]).any() or (rows["checks"] < 0).any():
        raise EstimatorCannotRun(estimator, f"checks at '{station}' exceed the vehicles passing or are negative")
    totals = rows.groupby(strata)[["checks", "vehicles"]].sum()
    if totals["checks"].sum() == 0:
        raise EstimatorCannotRun(estimator, f"no vehicle was checked at '{station}' in the window")
    return totals["checks"] / totals["vehicles"]


def detected_groups(
    tables: dict[str, pd.DataFrame], window: Window, station: str, strata: list[str], unit: str, estimator: str
) -> pd.DataFrame:
    """The groups detected at ``station`` in the window, one row each: stratum, size (1 per vehicle with
    ``unit`` vehicles) and the stratum's selection share."""
    shares = selection_shares(in_window(tables["checks"], window), station, strata, estimator)
    detections = station_detections(in_window(tables["encounters"], window))
    detections = detections[detections["place"] == station]
    if detections.empty:
        raise EstimatorCannotRun(estimator, f"no detections at '{station}' in the window ({window_text(window)})")
    # A vehicle carried past midnight has minute >= 1440: its hour of day wraps.
    detections = detections.assign(hour=(detections["minute"] // 60).astype("int64") % 24)
    groups = detections.groupby(["encounter_id", *strata]).size().rename("size").reset_index()
    if unit == "vehicles":
        groups["size"] = 1
    by_hour = "hour" in strata
    share = shares.reindex(pd.MultiIndex.from_frame(groups[strata]) if by_hour else groups["vehicle_class"])
    if share.isna().any() or (share == 0).any():
        where = groups.loc[(share.isna() | (share == 0)).to_numpy(), strata].iloc[0].tolist()
        raise EstimatorCannotRun(estimator, f"detections at '{station}' in stratum {where} where no vehicle was checked")
    groups["share"] = share.to_numpy()
    return groups


def expansion(
    observed: Observed,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    *,
    sensitivities: Sensitivities | None,
    station: str | None = None,
    unit: Literal["attempts", "vehicles"] = "attempts",
    by_hour: bool = False,
    rng: np.random.Generator | None = None,
    n_boot: int = 2000,
) -> EstimateResult:
    """Attempts (or vehicles with people) reaching ``station`` (default: the first primary station).

    Strata are vehicle classes, or class × hour of day with ``by_hour`` (when
    selection varies by hour, e.g. queue-aware rules). Delta-method variance:
    Σ_c (1 − π_c·s)/(π_c·s)² · Σ_g m_g² + (V̂/s)²·Var(s), where m_g is the
    size of each detected group (persons found together; 1 for vehicles), so
    people found together count as one draw. Bootstrap (when ``rng`` is
    given): s* ~ Beta(a, b); per stratum, detected groups ~ Binomial(passing
    groups, π_c·ŝ) with sizes resampled from the stratum; percentile interval.
    """
    name = expansion_name(station) if station is not None else EXPANSION
    window = check_window(window, name)
    tables = load_tables(
        observed,
        {
            "stations": ["station", "position", "role", "method"],
            "checks": ["day", "hour", "station", "vehicle_class", "vehicles", "checks"],
            "encounters": ["encounter_id", "day", "minute", "kind", "place", "place_kind", "vehicle_class"],
        },
        name,
    )
    stations = tables["stations"]
    station = station if station is not None else primary_stations(stations, name)[0]
    name = expansion_name(station)
    row = stations[stations["station"] == station]
    if row.empty:
        raise EstimatorCannotRun(name, f"station '{station}' is not in the stations table")
    if row["role"].iloc[0] != "primary":
        raise EstimatorCannotRun(name, f"'{station}' is a secondary station: it checks referred vehicles only")
    if unit not in ("attempts", "vehicles"):
        raise EstimatorCannotRun(name, f"unit must be 'attempts' or 'vehicles', got {unit!r}")
    a, b = beta_for(station, str(row["method"].iloc[0]), sensitivities, name)

    strata = ["vehicle_class", "hour"] if by_hour else ["vehicle_class"]
    groups = detected_groups(tables, window, station, strata, unit, name)

    s_mean = a / (a + b)
    s_var = a * b / ((a + b) ** 2 * (a + b + 1))
    detected = int(groups["size"].sum())
    estimate = float(np.sum(groups["size"] / (groups["share"] * s_mean)))
    found = groups["share"] * s_mean
    variance = float(np.sum((1 - found) / found**2 * groups["size"] ** 2) + (estimate / s_mean) ** 2 * s_var)
    parameters = {
        "sensitivity_mean": s_mean,
        "sensitivity_sd": float(np.sqrt(s_var)),
        "in_unchecked_vehicles": estimate - detected / s_mean,
        "missed_in_checks": detected / s_mean - detected,
    }
    if rng is not None:
        low, high = _bootstrap(groups, strata, (a, b), s_mean, level, rng, n_boot, name)
        parameters.update({"boot_low": low, "boot_high": high, "n_boot": n_boot})
    what = "attempts" if unit == "attempts" else "vehicles with people"
    return make_result(
        method=name,
        source=SOURCE,
        target=f"{what} reaching station '{station}'",
        estimate=estimate,
        observed=detected,
        variance=variance,
        level=level,
        interval="wald",
        assumptions=(
            f"within each stratum ({' x '.join(strata)}), vehicles with people are checked at the share "
            "checks/vehicles of all vehicles",
            f"a check at '{station}' finds the people in a vehicle with chance s ~ Beta({a:g}, {b:g}), "
            "the same for every class",
            "a detection is credited to the station whose check found it; detections credited to a secondary "
            "station after a referral are not counted here",
            "counts what reached this station only: estimates at different stations overlap and must not be added",
            "people found together are found or missed together",
        ),
        parameters=parameters,
        window=window,
    )


def _bootstrap(
    groups: pd.DataFrame,
    strata: list[str],
    beta: tuple[float, float],
    s_mean: float,
    level: float,
    rng: np.random.Generator,
    n_boot: int,
    estimator: str,
) -> tuple[float, float]:
    """Percentile interval of the parametric bootstrap described in :func:`expansion`."""
    if n_boot < 100:
        raise EstimatorCannotRun(estimator, f"the bootstrap needs at least 100 replicates, got {n_boot}")
    s_star = rng.beta(beta[0], beta[1], size=n_boot)
    total = np.zeros(n_boot)
    for _, cell in groups.groupby(strata, sort=True):
        found = float(cell["share"].iloc[0]) * s_mean
        passing = max(int(round(len(cell) / found)), len(cell))
        # Chance chosen so the expected detections equal those observed despite rounding.
        counts = rng.binomial(passing, len(cell) / passing, size=n_boot)
        draws = rng.choice(cell["size"].to_numpy(), size=int(counts.sum()), replace=True)
        sums = np.bincount(np.repeat(np.arange(n_boot), counts), weights=draws, minlength=n_boot)
        total += sums / float(cell["share"].iloc[0])
    estimates = total / s_star
    tail = (1 - level) / 2
    low, high = np.quantile(estimates, [tail, 1 - tail])
    return float(low), float(high)
