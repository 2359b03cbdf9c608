"""Layered removal: detections at successive primary stations along the route as removal passes.

An attempt that passes the first primary station meets each later one in
route order (``stations.position``); a detection removes it. The catch C_i of
pass i is the number of persons detected at the i-th primary station in the
window. With k passes, T = Σ C_i and X = Σ (k−i)·C_i. Every estimator here
estimates the attempts (persons, counting a retry again) that reached the
first primary station; ``observed`` is T.

A detection at a secondary station counts in the catch of the primary
station whose alarm referred the vehicle there (``referred_by``): that pass
removed the person. Detections at a secondary station without a known referral
(records written before referrals were recorded) are not counted as a pass, nor
are interdictions at boarding points; both counts are reported among the
parameters, with how many referred detections were credited.

Which variant each function implements, on Carle & Strub's example (38, 26, 12):

- :func:`removal_carle_strub`: integer search of Carle & Strub's (1978)
  weighted likelihood (α = β = 1) → N = 91.
- :func:`removal_zippin`: continuous root of Zippin's maximum-likelihood
  equation N·(kN−X−T)^k = (N−T)·(kN−X)^k, i.e. the ML estimate given T →
  N = 94.93. (The integer search of that equation with +0.5, as in some
  fisheries software, gives 93; the integer maximiser of the full likelihood
  gives 92. Neither is implemented.)
- :func:`removal_relative_sensitivity`: the same conditional ML with pass
  catchabilities s_i·p for known s_i; equal s_i give Zippin's 94.93.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from collections.abc import Mapping, Sequence

import numpy as np
from scipy import optimize

from .inputs import Observed, load_tables, primary_stations, station_detections
from .results import DEFAULT_LEVEL, EstimateResult, EstimatorCannotRun, make_result
from .windows import Window, check_window, in_window, window_text

TWO_PASS = "Two-pass removal (Seber & Le Cren 1967)"
CARLE_STRUB = "Carle & Strub (1978) weighted removal"
ZIPPIN = "Zippin (1956) removal MLE"
RELATIVE = "Removal ML with known relative sensitivities"

SOURCES = {
    TWO_PASS: "Seber & Le Cren (1967), J. Animal Ecology 36:631-643; Seber (1982), The Estimation of Animal Abundance",
    CARLE_STRUB: "Carle & Strub (1978), Biometrics 34:621-630; Zippin variance, Seber (1982) eq. 7.23",
    ZIPPIN: "Zippin (1956), Biometrics 12:163-189; variance Seber (1982) eq. 7.23",
    RELATIVE: "Zippin's (1956) removal likelihood with known catchability ratios per pass; variance from the "
    "expected information",
}

CLOSURE = "every counted attempt boarded before the first pass and meets every pass: nobody boards between stations"
EQUAL = "equal catchability: at every pass, each attempt still hidden is detected with the same chance p"
ASSUMPTIONS = {
    TWO_PASS: (CLOSURE, EQUAL, "only the first two passes are used"),
    CARLE_STRUB: (CLOSURE, EQUAL, "a uniform Beta(1, 1) weight on p (integer search for N)"),
    ZIPPIN: (CLOSURE, EQUAL, "continuous ML estimate of N given T"),
    RELATIVE: (
        CLOSURE,
        "the chance of detection at pass i is s_i·p, with s_i known and p common",
        "continuous ML estimate of N given T",
    ),
}


def _catches(catches: Sequence[int], estimator: str) -> np.ndarray:
    c = np.asarray(catches, dtype=float)
    if c.ndim != 1 or np.any(c < 0) or np.any(c != np.round(c)):
        raise EstimatorCannotRun(estimator, "catches must be a list of non-negative whole counts, one per pass")
    if c.size < 2:
        raise EstimatorCannotRun(estimator, f"needs at least two passes, got {c.size}")
    if c.sum() == 0:
        raise EstimatorCannotRun(estimator, "no detections at any pass")
    return c.astype(np.int64)


def zippin_variance(n: float, p: float, k: int) -> float:
    """Var(N) = N(1−q^k)q^k / [(1−q^k)² − (kp)²·q^(k−1)], q = 1−p (Seber 1982 eq. 7.23)."""
    q = 1.0 - p
    return n * (1 - q**k) * q**k / ((1 - q**k) ** 2 - (k * p) ** 2 * q ** (k - 1))


def _removal_result(
    method: str, estimate: float, total: int, variance: float, level: float, parameters: dict[str, float]
) -> EstimateResult:
    if not math.isfinite(variance) or variance < 0:
        raise EstimatorCannotRun(method, "the variance is undefined at this estimate: catches fall off too little")
    return make_result(
        method=method,
        source=SOURCES[method],
        target="attempts reaching the first pass",
        estimate=estimate,
        observed=total,
        variance=variance,
        level=level,
        interval="lognormal",
        assumptions=ASSUMPTIONS[method],
        parameters=parameters,
    )


def removal_two_pass_from_catches(catches: Sequence[int], level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Closed form on the first two passes: N = C1²/(C1−C2), p = 1 − C2/C1, Var = C1²C2²(C1+C2)/(C1−C2)⁴."""
    c = _catches(catches, TWO_PASS)
    c1, c2 = int(c[0]), int(c[1])
    if c1 <= c2:
        raise EstimatorCannotRun(TWO_PASS, f"catches do not fall from the first pass to the second ({c1}, {c2})")
    variance = c1**2 * c2**2 * (c1 + c2) / (c1 - c2) ** 4
    return _removal_result(TWO_PASS, c1**2 / (c1 - c2), c1 + c2, variance, level, {"p": 1 - c2 / c1})


def _tx(c: np.ndarray) -> tuple[int, int, int]:
    k = c.size
    return k, int(c.sum()), int(np.sum((k - np.arange(1, k + 1)) * c))


def removal_carle_strub_from_catches(catches: Sequence[int], level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Carle & Strub (1978): integer search for the smallest N >= T with
    ((N+1)/(N−T+1))·Π_i (kN−X−T+1+k−i)/(kN−X+2+k−i) < 1; p = T/(kN−X); Zippin variance.

    Integer search, not a continuous MLE: (38, 26, 12) → N = 91, p = 0.444, SE 9.7.
    """
    c = _catches(catches, CARLE_STRUB)
    k, t, x = _tx(c)
    i = np.arange(1, k + 1)
    found = None
    start, block = t, 1024
    # The weighted likelihood always turns down (the ratio tends to 1 − 1/N), so the search ends;
    # numpy blocks keep it fast when catches barely fall.
    while found is None and start < 10**9:
        n = np.arange(start, start + block, dtype=float)[:, None]
        log_ratio = np.log(n[:, 0] + 1) - np.log(n[:, 0] - t + 1)
        log_ratio += np.sum(np.log(k * n - x - t + 1 + k - i) - np.log(k * n - x + 2 + k - i), axis=1)
        below = np.flatnonzero(log_ratio < 0)
        found = int(n[below[0], 0]) if below.size else None
        start, block = start + block, block * 2
    if found is None:
        raise EstimatorCannotRun(CARLE_STRUB, "no estimate below 10⁹: catches do not fall along the passes")
    p = t / (k * found - x)
    result = _removal_result(CARLE_STRUB, found, t, zippin_variance(found, p, k), level, {"p": p, "passes": k})
    if 2 * x <= (k - 1) * t:  # Zippin's existence condition: the catches do not fall on average
        # The weighted likelihood still has a maximum, but it rests on the prior weighting, not on the records.
        shown = ", ".join(map(str, c))
        result = dataclasses.replace(result, warnings=(
            f"catches do not fall along the passes ({shown}): the estimate comes from the method's weighting, "
            "not from the records, and its interval is not to be trusted (Zippin and two-pass removal refuse "
            "these catches)",))
    return result


def _zippin_equation_root(k: int, t: int, x: int) -> float:
    """The root N > T of log N + k·log(kN−X−T) − log(N−T) − k·log(kN−X) = 0."""

    def h(n: float) -> float:
        return math.log(n) + k * math.log(k * n - x - t) - math.log(n - t) - k * math.log(k * n - x)

    # h → +∞ as N → T and is negative for large N when X > (k−1)T/2 (checked by the caller).
    low = t * (1 + 1e-12) + 1e-9
    high = 2.0 * t + 1
    while h(high) >= 0:
        high *= 2
        if high > 1e15:
            raise EstimatorCannotRun(ZIPPIN, "the ML estimate of N is beyond 10¹⁵: catches barely fall")
    return optimize.brentq(h, low, high, xtol=1e-12, rtol=1e-14)


def removal_zippin_from_catches(catches: Sequence[int], level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Zippin (1956) continuous MLE: N solves N(kN−X−T)^k = (N−T)(kN−X)^k, p = T/(kN−X); Zippin variance.

    Continuous, not an integer search: (38, 26, 12) → N = 94.93. The estimate
    exists only when catches fall on average, X > (k−1)·T/2.
    """
    c = _catches(catches, ZIPPIN)
    k, t, x = _tx(c)
    if c[0] == t:  # everyone at the first pass: p = 1 and nobody is left
        return _removal_result(ZIPPIN, float(t), t, 0.0, level, {"p": 1.0, "passes": k})
    if 2 * x <= (k - 1) * t:
        raise EstimatorCannotRun(ZIPPIN, f"catches do not fall along the passes ({', '.join(map(str, c))})")
    n = _zippin_equation_root(k, t, x)
    p = t / (k * n - x)
    return _removal_result(ZIPPIN, n, t, zippin_variance(n, p, k), level, {"p": p, "passes": k})


def _pass_probabilities(p: float, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """π_i = s_i·p·Π_{j<i}(1 − s_j·p) and dπ_i/dp."""
    escape = 1.0 - s * p
    survive = np.concatenate([[1.0], np.cumprod(escape)[:-1]])
    pi = s * p * survive
    earlier = np.concatenate([[0.0], np.cumsum(s / escape)[:-1]])
    return pi, pi * (1.0 / p - earlier)


def removal_relative_sensitivity_from_catches(
    catches: Sequence[int], sensitivities: Sequence[float], level: float = DEFAULT_LEVEL
) -> EstimateResult:
    """ML removal with pass catchability s_i·p for known relative sensitivities s_i (any common scale).

    p maximises the likelihood of the catches given T (continuous, as
    :func:`removal_zippin_from_catches`; equal s_i reproduce it), and
    N = T / P(caught at some pass). Var(N) is the inverse expected
    information of the full multinomial likelihood in (N, p), which for equal
    s_i is Zippin's variance.
    """
    c = _catches(catches, RELATIVE)
    s = np.asarray(sensitivities, dtype=float)
    if s.shape != c.shape or not np.all(np.isfinite(s)) or np.any(s <= 0):
        raise EstimatorCannotRun(RELATIVE, "needs one positive relative sensitivity per pass")
    s = s / s.max()  # p then lies in (0, 1]
    k, t = c.size, int(c.sum())
    earlier_total = np.concatenate([[0.0], np.cumsum(s)[:-1]])
    # Slope of the log-likelihood as p → 0: an interior maximum needs it positive (X > (k−1)T/2 when s_i are equal).
    pairs = (s.sum() ** 2 - np.sum(s**2)) / 2
    if t * pairs / s.sum() - np.sum(c * earlier_total) <= 0:
        raise EstimatorCannotRun(RELATIVE, "catches do not fall along the passes relative to the given sensitivities")

    def slope(p: float) -> float:
        pi, dpi = _pass_probabilities(p, s)
        return float(np.sum(c * dpi / np.where(pi > 0, pi, 1.0)) - t * dpi.sum() / pi.sum())

    top = 1.0 - 1e-12
    if slope(top) >= 0:  # the likelihood still rises where the most sensitive pass catches everyone
        p, caught = 1.0, 1.0
        n, variance = float(t), 0.0
    else:
        p = optimize.brentq(slope, 1e-12, top, xtol=1e-15, rtol=1e-14)
        pi, dpi = _pass_probabilities(p, s)
        caught = float(pi.sum())
        n = t / caught
        info_pp = n * (np.sum(dpi**2 / pi) + dpi.sum() ** 2 / (1 - caught))
        info_nn = caught / (n * (1 - caught))
        info_np = dpi.sum() / (1 - caught)
        variance = float(info_pp / (info_nn * info_pp - info_np**2))
    parameters = {"p": p, "caught": caught, "passes": k}
    parameters.update({f"s{i + 1}": v for i, v in enumerate(s)})
    return _removal_result(RELATIVE, n, t, variance, level, parameters)


# --- observed records -----------------------------------------------------------------------------


@dataclass(frozen=True)
class Passes:
    """Catches per primary station in route order, with the detections that were not counted as a pass."""

    stations: tuple[str, ...]
    catches: tuple[int, ...]
    window: Window
    referred_detections: int  # found at a secondary station, counted in the referring station's catch
    other_station_detections: int
    boarding_point_encounters: int


def removal_catches(observed: Observed, window: Window = None, *, estimator: str = "removal") -> Passes:
    """Persons detected at each primary station in route order, or after its referral, in the window."""
    window = check_window(window, estimator)
    tables = load_tables(
        observed,
        {"stations": ["station", "position", "role"], "encounters": ["day", "kind", "place", "place_kind", "referred_by"]},
        estimator,
    )
    stations = primary_stations(tables["stations"], estimator)
    if len(stations) < 2:
        raise EstimatorCannotRun(estimator, f"needs at least two primary stations, the route has {len(stations)}")
    encounters = in_window(tables["encounters"], window)
    if encounters.empty:
        raise EstimatorCannotRun(estimator, f"no encounters in the window ({window_text(window)})")
    detections = station_detections(encounters)
    at_primary = detections["place"].isin(stations)
    referred = ~at_primary & detections["referred_by"].isin(stations)
    counts = detections.loc[at_primary, "place"].value_counts()
    credited = detections.loc[referred, "referred_by"].value_counts()
    catches = tuple(int(counts.get(name, 0)) + int(credited.get(name, 0)) for name in stations)
    return Passes(
        stations=tuple(stations),
        catches=catches,
        window=window,
        referred_detections=int(referred.sum()),
        other_station_detections=len(detections) - sum(catches),
        boarding_point_encounters=len(encounters) - len(detections),
    )


def _on_records(result: EstimateResult, passes: Passes) -> EstimateResult:
    order = ", ".join(f"{name} ({c})" for name, c in zip(passes.stations, passes.catches))
    extra = (
        ("referred_detections", float(passes.referred_detections)),
        ("other_station_detections", float(passes.other_station_detections)),
        ("boarding_point_encounters", float(passes.boarding_point_encounters)),
    )
    return dataclasses.replace(
        result,
        target=f"attempts reaching station '{passes.stations[0]}'",
        window=passes.window,
        assumptions=result.assumptions + (f"passes in route order (catch): {order}",),
        parameters=result.parameters + extra,
    )


def removal_two_pass(observed: Observed, window: Window = None, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Two-pass closed form on the first two primary stations; see :func:`removal_two_pass_from_catches`."""
    passes = removal_catches(observed, window, estimator=TWO_PASS)
    return _on_records(removal_two_pass_from_catches(passes.catches, level), passes)


def removal_carle_strub(observed: Observed, window: Window = None, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Carle & Strub integer search over all primary stations; see :func:`removal_carle_strub_from_catches`."""
    passes = removal_catches(observed, window, estimator=CARLE_STRUB)
    return _on_records(removal_carle_strub_from_catches(passes.catches, level), passes)


def removal_zippin(observed: Observed, window: Window = None, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Zippin continuous MLE over all primary stations; see :func:`removal_zippin_from_catches`."""
    passes = removal_catches(observed, window, estimator=ZIPPIN)
    return _on_records(removal_zippin_from_catches(passes.catches, level), passes)


def removal_relative_sensitivity(
    observed: Observed,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    *,
    sensitivities: Mapping[str, float],
) -> EstimateResult:
    """Removal ML with known relative sensitivity per primary station (keyed by station name).

    See :func:`removal_relative_sensitivity_from_catches`.
    """
    passes = removal_catches(observed, window, estimator=RELATIVE)
    missing = [name for name in passes.stations if name not in sensitivities]
    if missing:
        raise EstimatorCannotRun(RELATIVE, f"no relative sensitivity given for station(s): {', '.join(missing)}")
    s = [float(sensitivities[name]) for name in passes.stations]
    return _on_records(removal_relative_sensitivity_from_catches(passes.catches, s, level), passes)
