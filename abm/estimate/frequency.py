"""Population size from how often each identified person was encountered (capture frequencies).

In a window, f_i is the number of persons encountered exactly i times (linked
by ``person_ref``), n = Σ f_i the persons seen and S = Σ i·f_i their
encounters. Every estimator here estimates the number of distinct
identifiable persons at risk in the window, the never-encountered included;
``observed`` is n. Detections and interdictions both count as encounters.

Each estimator comes twice: ``name(observed, window, level)`` on observed
records, and ``name_from_frequencies(...)`` (or ``..._from_counts``) on the
counts themselves, for simulation studies.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Sequence

import numpy as np
import pandas as pd
from scipy import optimize

from .inputs import Observed, load_tables
from .results import DEFAULT_LEVEL, EstimateResult, EstimatorCannotRun, make_result
from .windows import Window, check_window, identified_in_window

CHAO = "Chao (1987) lower bound"
CHAO_BC = "Chao (1987) lower bound, bias-corrected"
ZELTERMAN = "Zelterman (1988)"
ZTP = "Zero-truncated Poisson MLE"
ZTP_REGRESSION = "Zero-truncated Poisson regression"

TARGET = "distinct identifiable persons at risk"

VDH_2003 = (
    "van der Heijden, Bustami, Cruyff, Engbersen & van Houwelingen (2003), Statistical Modelling 3:305-322"
)
SOURCES = {
    CHAO: "Chao (1987), Biometrics 43:783-791",
    CHAO_BC: "Chao (1987), Biometrics 43:783-791; bias-corrected form and variance: Chao (2005), "
    "Encyclopedia of Statistical Sciences, 2nd ed.",
    ZELTERMAN: "Zelterman (1988), J. Statistical Planning and Inference 18:225-237; "
    f"Horvitz-Thompson variance: {VDH_2003}",
    ZTP: f"{VDH_2003} (Horvitz-Thompson variance)",
    ZTP_REGRESSION: f"{VDH_2003} (covariates; Horvitz-Thompson estimate and variance)",
}

COMMON_ASSUMPTIONS = (
    "closed population: the same persons are at risk throughout the window",
    "all encounters of a person carry one person_ref; unidentified encounters are left out",
    "an encounter does not change a person's chance of being encountered again",
)
ASSUMPTIONS = {
    CHAO: COMMON_ASSUMPTIONS
    + ("encounter rates may differ between persons: the estimate is then a lower bound, exact under equal rates",),
    CHAO_BC: COMMON_ASSUMPTIONS
    + ("as the Chao lower bound, with a small-sample correction that also runs when f2 = 0",),
    ZELTERMAN: COMMON_ASSUMPTIONS
    + ("persons seen once or twice follow a Poisson law, so λ = 2·f2/f1; the often-seen do not sway it",),
    ZTP: COMMON_ASSUMPTIONS + ("every person's encounter count is Poisson with one common rate λ",),
    ZTP_REGRESSION: COMMON_ASSUMPTIONS
    + (
        "each person's encounter count is Poisson with log λ linear in the covariates",
        "covariates are read at the person's first encounter in the window",
    ),
}


# --- observed records -> per-person counts ----------------------------------------------------


def _persons(
    observed: Observed, window: Window, estimator: str, covariates: Sequence[str] = ()
) -> tuple[pd.DataFrame, dict[str, float], Window]:
    """Encounter count per identified person (column ``count``) plus covariates at first encounter."""
    window = check_window(window, estimator)
    columns = ["encounter_id", "day", "minute", "person_ref", *covariates]
    encounters = load_tables(observed, {"encounters": list(dict.fromkeys(columns))}, estimator)["encounters"]
    encounters, known = identified_in_window(encounters, window, estimator)
    known = known.sort_values(["day", "minute", "encounter_id"], kind="stable")
    grouped = known.groupby("person_ref", sort=True)
    persons = pd.DataFrame({"count": grouped["encounter_id"].nunique()})
    for column in covariates:
        persons[column] = grouped[column].first().fillna("")
    extra = {"unidentified_encounters": float(len(encounters) - len(known))}
    return persons, extra, window


def capture_frequencies(observed: Observed, window: Window = None) -> np.ndarray:
    """f_1, f_2, ...: persons encountered exactly i times in the window (element i-1)."""
    persons, _, _ = _persons(observed, window, "capture frequencies")
    return np.bincount(persons["count"].to_numpy())[1:]


def _on_records(result: EstimateResult, window: Window, extra: dict[str, float]) -> EstimateResult:
    return dataclasses.replace(result, window=window, parameters=result.parameters + tuple(extra.items()))


def _from_records(
    observed: Observed,
    window: Window,
    level: float,
    estimator: str,
    from_frequencies: Callable[[np.ndarray, float], EstimateResult],
) -> EstimateResult:
    """Run a frequency estimator on the capture frequencies of observed records in ``window``."""
    persons, extra, window = _persons(observed, window, estimator)
    f = np.bincount(persons["count"].to_numpy())[1:]
    return _on_records(from_frequencies(f, level), window, extra)


def _frequencies(frequencies: Sequence[int], estimator: str) -> np.ndarray:
    """Checked frequencies f_1..f_m as an int array of length >= 2."""
    f = np.asarray(frequencies, dtype=float)
    if f.ndim != 1 or np.any(f < 0) or np.any(f != np.round(f)):
        raise EstimatorCannotRun(estimator, "frequencies must be a list of non-negative whole counts f1, f2, ...")
    f = np.concatenate([f, np.zeros(max(0, 2 - f.size))]).astype(np.int64)
    if f.sum() == 0:
        raise EstimatorCannotRun(estimator, "no identified persons (every f_i is 0)")
    if f[1:].sum() == 0:
        raise EstimatorCannotRun(estimator, "no repeat encounters: nobody was seen more than once")
    return f


# --- Chao ---------------------------------------------------------------------------------------


def chao_from_frequencies(frequencies: Sequence[int], level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Chao (1987) lower bound N = n + f1²/(2·f2), Chao's variance and log-normal interval."""
    f = _frequencies(frequencies, CHAO)
    f1, f2, n = int(f[0]), int(f[1]), int(f.sum())
    if f2 == 0:
        raise EstimatorCannotRun(CHAO, "nobody was seen exactly twice (f2 = 0), so f1²/(2·f2) is undefined")
    ratio = f1 / f2
    variance = f2 * (ratio**4 / 4 + ratio**3 + ratio**2 / 2)
    return make_result(
        method=CHAO, source=SOURCES[CHAO], target=TARGET, estimate=n + f1**2 / (2 * f2), observed=n,
        variance=variance, level=level, interval="lognormal", assumptions=ASSUMPTIONS[CHAO],
        parameters={"f1": f1, "f2": f2},
    )


def chao_bias_corrected_from_frequencies(frequencies: Sequence[int], level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Bias-corrected Chao N = n + f1(f1−1)/(2(f2+1)), its variance (Chao 2005) and log-normal interval."""
    f = _frequencies(frequencies, CHAO_BC)
    f1, f2, n = int(f[0]), int(f[1]), int(f.sum())
    unseen = f1 * (f1 - 1) / (2 * (f2 + 1))
    variance = (
        unseen
        + f1 * (2 * f1 - 1) ** 2 / (4 * (f2 + 1) ** 2)
        + f1**2 * (f1 - 1) ** 2 * f2 / (4 * (f2 + 1) ** 4)
    )
    return make_result(
        method=CHAO_BC, source=SOURCES[CHAO_BC], target=TARGET, estimate=n + unseen, observed=n,
        variance=variance, level=level, interval="lognormal", assumptions=ASSUMPTIONS[CHAO_BC],
        parameters={"f1": f1, "f2": f2},
    )


def chao(observed: Observed, window: Window = None, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Chao (1987) lower bound on observed records; see :func:`chao_from_frequencies`."""
    return _from_records(observed, window, level, CHAO, chao_from_frequencies)


def chao_bias_corrected(observed: Observed, window: Window = None, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Bias-corrected Chao on observed records; see :func:`chao_bias_corrected_from_frequencies`."""
    return _from_records(observed, window, level, CHAO_BC, chao_bias_corrected_from_frequencies)


# --- Poisson-based: Zelterman and the zero-truncated Poisson ------------------------------------


def _ht_variance(n: float, lam: float, lam_variance: float) -> float:
    """Var(N) = n(1−p)/p² + (n·e^−λ/p²)²·Var(λ), p = 1−e^−λ (van der Heijden et al. 2003)."""
    p = -math.expm1(-lam)
    return n * (1 - p) / p**2 + (n * math.exp(-lam) / p**2) ** 2 * lam_variance


def zelterman_from_frequencies(frequencies: Sequence[int], level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Zelterman (1988): λ = 2·f2/f1, N = n/(1−e^−λ); Var(λ) = λ²(1/f1 + 1/f2) in the HT variance."""
    f = _frequencies(frequencies, ZELTERMAN)
    f1, f2, n = int(f[0]), int(f[1]), int(f.sum())
    if f1 == 0 or f2 == 0:
        raise EstimatorCannotRun(ZELTERMAN, f"λ = 2·f2/f1 needs persons seen once and twice (f1 = {f1}, f2 = {f2})")
    lam = 2 * f2 / f1
    variance = _ht_variance(n, lam, lam**2 * (1 / f1 + 1 / f2))
    return make_result(
        method=ZELTERMAN, source=SOURCES[ZELTERMAN], target=TARGET, estimate=n / -math.expm1(-lam), observed=n,
        variance=variance, level=level, interval="lognormal", assumptions=ASSUMPTIONS[ZELTERMAN],
        parameters={"lambda": lam, "f1": f1, "f2": f2},
    )


def ztp_rate(n: float, s: float) -> float:
    """The zero-truncated Poisson MLE of λ: the root of λ/(1−e^−λ) = S/n (needs S > n)."""
    target = s / n
    # λ/(1−e^−λ) rises from 1 at λ = 0 and exceeds λ, so the root lies in (0, S/n).
    return optimize.brentq(lambda lam: lam / -math.expm1(-lam) - target, 1e-12, target, xtol=1e-14, rtol=1e-15)


def ztp_from_frequencies(frequencies: Sequence[int], level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Zero-truncated Poisson MLE: λ from λ/(1−e^−λ) = S/n, N = n/(1−e^−λ), HT variance."""
    f = _frequencies(frequencies, ZTP)
    i = np.arange(1, f.size + 1)
    n, s = int(f.sum()), int((i * f).sum())
    lam = ztp_rate(n, s)
    lam_variance = 1 / (s / lam**2 - n * math.exp(lam) / math.expm1(lam) ** 2)
    return make_result(
        method=ZTP, source=SOURCES[ZTP], target=TARGET, estimate=n / -math.expm1(-lam), observed=n,
        variance=_ht_variance(n, lam, lam_variance), level=level, interval="lognormal",
        assumptions=ASSUMPTIONS[ZTP], parameters={"lambda": lam, "encounters": s},
    )


def zelterman(observed: Observed, window: Window = None, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Zelterman (1988) on observed records; see :func:`zelterman_from_frequencies`."""
    return _from_records(observed, window, level, ZELTERMAN, zelterman_from_frequencies)


def ztp(observed: Observed, window: Window = None, level: float = DEFAULT_LEVEL) -> EstimateResult:
    """Zero-truncated Poisson MLE on observed records; see :func:`ztp_from_frequencies`."""
    return _from_records(observed, window, level, ZTP, ztp_from_frequencies)


# --- zero-truncated Poisson regression -----------------------------------------------------------

_RUNAWAY_ETA = 20.0  # |log λ| beyond this means the ML estimate does not exist (λ → 0 or ∞)


def ztp_regression_from_counts(
    counts: Sequence[int], design: pd.DataFrame | None = None, level: float = DEFAULT_LEVEL
) -> EstimateResult:
    """Zero-truncated Poisson regression, log λ_i = β0 + x_iᵀβ, fitted by maximum likelihood.

    ``counts`` are encounters per person (all >= 1); ``design`` holds the
    numeric covariates per person (no intercept column; one is added). The
    fit is scipy.optimize.minimize (trust-exact) with the analytic gradient
    and Hessian. N = Σ 1/(1−e^−λ_i) (Horvitz–Thompson). The SE is analytic,
    van der Heijden et al. (2003): Var(N) = Σ e^−λ_i/p_i² + gᵀ·I⁻¹·g with
    g = ∂N/∂β and I the information matrix; no bootstrap.
    """
    y = np.asarray(counts, dtype=float)
    if y.ndim != 1 or y.size == 0:
        raise EstimatorCannotRun(ZTP_REGRESSION, "no identified persons")
    if np.any(y < 1) or np.any(y != np.round(y)):
        raise EstimatorCannotRun(ZTP_REGRESSION, "encounter counts must be whole numbers of at least 1")
    if np.all(y == 1):
        raise EstimatorCannotRun(ZTP_REGRESSION, "no repeat encounters: nobody was seen more than once")
    names = ["intercept"]
    x = np.ones((y.size, 1))
    if design is not None and design.shape[1]:
        if len(design) != y.size:
            raise EstimatorCannotRun(ZTP_REGRESSION, "the design has a different number of rows than counts")
        names += [str(c) for c in design.columns]
        x = np.column_stack([x, design.to_numpy(dtype=float)])
    if np.linalg.matrix_rank(x) < x.shape[1]:
        raise EstimatorCannotRun(ZTP_REGRESSION, "the covariates are collinear (a level or column is redundant)")

    def negloglik(beta: np.ndarray) -> tuple[float, np.ndarray]:
        eta = x @ beta
        lam = np.exp(eta)
        p = -np.expm1(-lam)
        # log y! is constant in β and left out
        return -float(np.sum(y * eta - lam - np.log(p))), -(x.T @ (y - lam / p))

    def hessian(beta: np.ndarray) -> np.ndarray:
        lam = np.exp(x @ beta)
        p = -np.expm1(-lam)
        weight = lam * (p - lam * np.exp(-lam)) / p**2  # Var(y_i): the ZTP is a natural exponential family
        return x.T @ (weight[:, None] * x)

    start = np.zeros(x.shape[1])
    start[0] = math.log(ztp_rate(y.size, y.sum()))
    fit = optimize.minimize(
        negloglik, start, jac=True, hess=hessian, method="trust-exact", options={"gtol": 1e-10, "maxiter": 500}
    )
    eta = x @ fit.x
    # trust-exact can stop when the log-likelihood no longer changes in floating point; the
    # score (O(1) per person) tells whether that is the maximum.
    converged = fit.success or float(np.max(np.abs(fit.jac))) < 1e-8 * y.size
    if not converged or np.max(np.abs(eta)) > _RUNAWAY_ETA:
        raise EstimatorCannotRun(
            ZTP_REGRESSION,
            "the likelihood has no finite maximum (a covariate group may have nobody seen more than once)",
        )
    lam = np.exp(eta)
    p = -np.expm1(-lam)
    covariance = np.linalg.inv(hessian(fit.x))
    gradient = -(x.T @ (np.exp(-lam) * lam / p**2))
    variance = float(np.sum(np.exp(-lam) / p**2) + gradient @ covariance @ gradient)
    coef_se = np.sqrt(np.diag(covariance))
    parameters = {f"coef:{name}": b for name, b in zip(names, fit.x)}
    parameters.update({f"se:{name}": se for name, se in zip(names, coef_se)})
    parameters["loglik"] = -fit.fun - float(np.sum([math.lgamma(v + 1) for v in y]))
    return make_result(
        method=ZTP_REGRESSION, source=SOURCES[ZTP_REGRESSION], target=TARGET, estimate=float(np.sum(1 / p)),
        observed=y.size, variance=variance, level=level, interval="lognormal",
        assumptions=ASSUMPTIONS[ZTP_REGRESSION], parameters=parameters,
    )


def ztp_regression(
    observed: Observed,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    *,
    covariates: Sequence[str] = ("vehicle_class",),
) -> EstimateResult:
    """Zero-truncated Poisson regression on observed records.

    ``covariates`` are encounter columns (e.g. ``vehicle_class``, ``place``,
    ``method``, ``kind``) read at each person's first encounter in the window
    and one-hot coded against the first level in sorted order. A level in
    which nobody was seen twice has no finite ML estimate: that raises
    EstimatorCannotRun. See :func:`ztp_regression_from_counts` for the fit and SE.
    """
    covariates = list(covariates)
    persons, extra, window = _persons(observed, window, ZTP_REGRESSION, covariates)
    if persons["count"].max() < 2:
        raise EstimatorCannotRun(ZTP_REGRESSION, "no repeat encounters: nobody was seen more than once")
    for column in covariates:
        repeats = persons.groupby(column)["count"].max()
        lonely = sorted(repeats.index[repeats < 2])
        if lonely:
            # an empty level is an encounter with no vehicle: a person stopped at a boarding point
            level = f"'{lonely[0]}'" if lonely[0] else "(none: stopped at a boarding point, no vehicle)"
            raise EstimatorCannotRun(
                ZTP_REGRESSION,
                f"{column} level {level} has nobody seen more than once, so its rate has no ML estimate",
            )
    design = (
        pd.get_dummies(persons[covariates].astype(str), prefix_sep="=", drop_first=True, dtype=float)
        if covariates
        else None
    )
    result = ztp_regression_from_counts(persons["count"].to_numpy(), design, level)
    covariate_text = ", ".join(covariates) if covariates else "none (intercept only)"
    result = dataclasses.replace(result, assumptions=result.assumptions + (f"covariates: {covariate_text}",))
    return _on_records(result, window, extra)
