"""A calibration checks its own intervals: coverage on pseudo-observed data whose truth is known.

Cross-validation for ABC (Csilléry, François & Blum 2012, Methods Ecol. Evol.
3:475-479; the R ``abc`` package's ``cv4abc``): rows of the calibration's own
reference table, the prior draws it simulated, are taken in turn as
pseudo-observed data. Each is calibrated by the rejection method on the table
less that row, and its parameters and latent quantities (the simulated truth
of that row's run) are compared with the intervals it gets. Over enough rows
a calibrated 90% interval holds the truth in 90% of them; the share is given
with a 95% Wilson (1927) interval, beside the mean interval width and the
root mean squared error of the posterior mean.

No run is simulated for the check: it costs a few distance computations and
regressions per row. For rejection ABC it checks exactly the method that
made the posterior. ABC-SMC is checked by a rejection pass over its
generation-0 prior draws keeping as many as it has particles, with the
regression adjustment; the output says so, since the SMC generations after it
are not what is checked.

:func:`reliability_warnings` turns the check, the posterior and the priors
into one-line warnings: coverage far from nominal, posterior mass piled at a
prior bound, a small effective sample size, and unknowns the records do not
inform.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..experiment.compare import wilson_interval
from .abc.posterior import ABCPosterior, ReferenceTable
from .abc.simulation import ABCError
from .abc.weighted import weighted_quantile
from .priors import PriorSet
from .abc.rejection import rejection_from_table

SELF_CHECK_COLUMNS = (
    "quantity", "level", "trials", "covered", "coverage", "coverage_low", "coverage_high", "mean_width", "rmse",
)
# Measured coverage this far below or above the nominal level is reported (0.80-0.97 around a nominal 0.90).
TOO_LOW, TOO_HIGH = 0.10, 0.07
MIN_TRIALS = 50
MIN_ESS = 50
BOUND_ZONE, BOUND_MASS = 0.02, 0.10  # a flat posterior puts 2% of its mass in the 2% next to a bound
UNIDENTIFIED = 0.9  # posterior SD above this share of the prior's: the records say little


def within_nominal(coverage: float, level: float) -> bool:
    """Measured coverage close enough to the nominal level to call the intervals reliable (0.80-0.97 of 0.90)."""
    return level - TOO_LOW <= coverage <= level + TOO_HIGH


@dataclass(frozen=True, eq=False)
class SelfCheck:
    """Intervals of every pseudo-observed data set against its known truth."""

    how: str  # what was checked, in words
    level: float
    names: tuple[str, ...]  # parameters, then latent quantities
    rows: np.ndarray  # (trials,) the reference rows taken as pseudo-observed
    truth: np.ndarray  # (trials, q)
    mean: np.ndarray  # (trials, q) posterior means
    low: np.ndarray  # (trials, q)
    high: np.ndarray  # (trials, q)

    @property
    def trials(self) -> int:
        return int(self.rows.size)

    def to_frame(self) -> pd.DataFrame:
        """One row per quantity: coverage with its 95% Wilson interval, mean width and RMSE."""
        out = []
        for j, name in enumerate(self.names):
            known = np.isfinite(self.truth[:, j])
            truth, low, high, mean = (a[known, j] for a in (self.truth, self.low, self.high, self.mean))
            n = int(known.sum())
            covered = int(np.sum((low <= truth) & (truth <= high)))
            lo, hi = wilson_interval(covered, n)
            out.append(
                {
                    "quantity": name,
                    "level": self.level,
                    "trials": n,
                    "covered": covered,
                    "coverage": covered / n if n else math.nan,
                    "coverage_low": lo,
                    "coverage_high": hi,
                    "mean_width": float(np.mean(high - low)) if n else math.nan,
                    "rmse": float(np.sqrt(np.mean((mean - truth) ** 2))) if n else math.nan,
                }
            )
        return pd.DataFrame(out, columns=list(SELF_CHECK_COLUMNS))

    def summary(self) -> str:
        """The coverage table in words."""
        table = self.to_frame()
        width = max(len("quantity"), *(len(q) for q in table["quantity"]))
        lines = [
            f"Self-check: {self.how}.",
            f"Share of {self.trials} pseudo-truths inside their {self.level:.0%} interval (95% Wilson interval):",
            f"  {'quantity':<{width}}  {'coverage':>8}  {'95% interval':>13}  {'mean width':>11}  {'RMSE':>10}",
        ]
        for row in table.itertuples():
            lines.append(
                f"  {row.quantity:<{width}}  {row.coverage:>8.0%}  {f'{row.coverage_low:.0%}-{row.coverage_high:.0%}':>13}  "
                f"{row.mean_width:>11.4g}  {row.rmse:>10.4g}"
            )
        return "\n".join(lines)


def cross_validate(
    table: ReferenceTable,
    priors: PriorSet,
    scale: np.ndarray,
    *,
    keep: int,
    regression: bool,
    trials: int,
    seed: int,
    level: float,
    latent_names: Sequence[str],
    how: str,
) -> SelfCheck:
    """Leave-one-out over ``trials`` rows of ``table`` drawn without replacement (see the module docstring).

    Each pseudo-observed row is calibrated on the other rows by
    :func:`~abm.calibration.abc.rejection.rejection_from_table` with ``keep`` and
    ``regression``; ``scale`` is the calibration's own distance scale.
    """
    if not MIN_TRIALS <= trials <= table.size:
        raise ABCError(f"self-check trials: expected {MIN_TRIALS} to {table.size} (the reference table's rows), got {trials}")
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(3,)))
    rows = np.sort(rng.choice(table.size, size=trials, replace=False))
    tail = (1 - level) / 2
    names = (*priors.names, *latent_names)
    shape = (trials, len(names))
    truth, mean, low, high = (np.full(shape, np.nan) for _ in range(4))
    for t, i in enumerate(rows):
        generation = rejection_from_table(
            table.without(int(i)), priors, table.summaries[i], scale, keep=keep, regression=regression
        )
        values = np.column_stack([generation.theta, generation.latent])
        truth[t] = np.concatenate([table.theta[i], table.latent[i]])
        for j in range(values.shape[1]):
            mean[t, j] = np.average(values[:, j], weights=generation.weights)
            low[t, j], high[t, j] = weighted_quantile(values[:, j], generation.weights, [tail, 1 - tail])
    return SelfCheck(how, level, names, rows, truth, mean, low, high)


def reliability_warnings(posterior: ABCPosterior, priors: PriorSet, check: SelfCheck | None) -> list[str]:
    """One line per reason not to trust the posterior as it stands (empty when there is none)."""
    warnings = []
    level = posterior.level
    if check is None:
        warnings.append(
            "warning: no self-check was run (self_check: 0), so how often these intervals hold the truth is unknown"
        )
    else:
        for row in check.to_frame().itertuples():
            if row.mean_width == 0 and row.rmse == 0:
                continue  # the same value in every draw (e.g. no boarding point after the last station): nothing to miss
            if not within_nominal(row.coverage, level):
                verdict = "too narrow: do not trust them" if row.coverage < level else "wider than they need be"
                warnings.append(
                    f"warning: {row.quantity}: its {level:.0%} intervals held the pseudo-truth in {row.coverage:.0%} of "
                    f"{row.trials} self-check trials (95% Wilson {row.coverage_low:.0%}-{row.coverage_high:.0%}); "
                    f"they are {verdict}"
                )
    final = posterior.final
    for j, prior in enumerate(priors.priors):
        values, weights = final.theta[:, j], final.weights
        low, high = prior.support()
        if math.isfinite(low) and math.isfinite(high):
            zone = BOUND_ZONE * (high - low)
            for side, near in (("lower", values <= low + zone), ("upper", values >= high - zone)):
                share = float(weights[near].sum())
                if share > BOUND_MASS:
                    bound = low if side == "lower" else high
                    warnings.append(
                        f"warning: {prior.name}: {share:.0%} of the posterior lies within 2% of the prior's {side} bound "
                        f"({bound:g}); the bound may be cutting the answer off: widen the prior"
                    )
        post_sd = float(np.sqrt(np.average((values - np.average(values, weights=weights)) ** 2, weights=weights)))
        prior_sd = prior.sd()
        if prior_sd > 0 and post_sd > UNIDENTIFIED * prior_sd:
            warnings.append(
                f"warning: {prior.name}: not identified by these records (posterior SD {post_sd:.3g} is "
                f"{post_sd / prior_sd:.0%} of the prior's {prior_sd:.3g}); its interval is the prior's"
            )
    if final.ess < MIN_ESS:
        warnings.append(
            f"warning: the posterior rests on an effective sample size of {final.ess:.0f} (under {MIN_ESS}); "
            "its intervals are rough: simulate more"
        )
    return warnings
