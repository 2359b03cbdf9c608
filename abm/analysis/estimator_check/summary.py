"""Bias, relative bias, RMSE and coverage per estimator and factor levels, with their intervals.

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

import math
from collections.abc import Callable, Sequence
from typing import Any, Literal

import numpy as np
import pandas as pd
from scipy import special  # quantile functions without scipy.stats, whose import costs each worker about 0.45 s

from ...experiment.compare import mean_interval, t_half_width, wilson_interval
from .per_run import PER_RUN_COLUMNS
from .truth import EstimatorCheckError


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
    half = t_half_width(u, confidence)
    return r, r - half, r + half


def _group_figures(
    group: pd.DataFrame, confidence: float, interval: Callable[[int, int, float], tuple[float, float]]
) -> dict[str, Any]:
    """The figures of one estimator at one set of factor levels: every summary column but the keys and settings."""
    errors, truths = group["error"].to_numpy(float), group["truth"].to_numpy(float)
    bias, bias_low, bias_high = mean_interval(errors, confidence, finite_only=False)
    rel, rel_low, rel_high = relative_bias_interval(errors, truths, confidence)
    n, hits = len(group), int(group["covered"].sum())
    cov_low, cov_high = interval(hits, n, confidence)
    mean_truth = float(truths.mean())
    rmse = float(np.sqrt(np.mean(errors**2)))
    ratios = group["ratio"].to_numpy(float) if "ratio" in group else np.full(n, math.nan)
    first = group.iloc[0]
    return {
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
    }


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
            rows.append(
                {
                    **dict(zip(["slug", *by], keys, strict=True)),
                    **_group_figures(group, confidence, interval),
                    "confidence": confidence,
                    "coverage_interval": coverage_interval,
                }
            )
    columns = ["slug", *by, *[c for c in SUMMARY_COLUMNS if c != "slug"]]
    summary = pd.DataFrame(rows, columns=columns)
    summary.attrs["factors"] = by
    return summary
