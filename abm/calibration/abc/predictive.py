"""The posterior predictive check: fresh simulations at posterior draws against the observed summaries."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .posterior import ABCPosterior
from .seeds import PREDICTIVE_STAGE, stage_rng
from .simulation import ABCError, BatchSimulator, column_names, simulate_stage


@dataclass(frozen=True, eq=False)
class PredictiveCheck:
    """Fresh simulations at posterior draws: their summaries against the observed ones, and latent quantities."""

    summary_names: tuple[str, ...]
    latent_names: tuple[str, ...]
    observed: np.ndarray
    theta: np.ndarray  # (P, d) the posterior draws simulated
    summaries: np.ndarray  # (P, k)
    latent: np.ndarray  # (P, m)
    labels: tuple[str, ...]
    level: float = 0.9

    def to_frame(self) -> pd.DataFrame:
        """Per summary: observed value, predictive mean and interval, and the two-sided predictive tail share."""
        lo, hi = (1 - self.level) / 2, 1 - (1 - self.level) / 2
        rows = []
        for j, name in enumerate(self.summary_names):
            sims, obs = self.summaries[:, j], float(self.observed[j])
            tail = 2 * min(np.mean(sims >= obs), np.mean(sims <= obs))
            low, high = np.quantile(sims, [lo, hi])
            rows.append(
                {
                    "summary": name,
                    "observed": obs,
                    "predictive_mean": float(sims.mean()),
                    "low": float(low),
                    "high": float(high),
                    "inside": bool(low <= obs <= high),
                    "tail_p": float(min(1.0, tail)),
                }
            )
        return pd.DataFrame(rows)

    def latent_frame(self) -> pd.DataFrame:
        """Latent quantities of the fresh simulations: mean and interval (a new period like the observed one)."""
        lo, hi = (1 - self.level) / 2, 1 - (1 - self.level) / 2
        rows = []
        for j, name in enumerate(self.latent_names):
            values = self.latent[:, j]
            low, high = np.quantile(values, [lo, hi])
            rows.append({"quantity": name, "mean": float(values.mean()), "low": float(low), "high": float(high)})
        return pd.DataFrame(rows)

    def summary(self) -> str:
        table = self.to_frame()
        inside = int(table["inside"].sum())
        lines = [
            f"Posterior predictive check: {self.theta.shape[0]} fresh simulations at posterior draws; "
            f"{inside} of {len(table)} observed summaries inside their {self.level:.0%} predictive interval."
        ]
        width = max(len("summary"), *(len(s) for s in table["summary"]))
        lines.append(f"  {'summary':<{width}}  {'observed':>10}  {'predicted':>10}  {'interval':>20}  tail p")
        for row in table.itertuples():
            flag = "" if row.inside else "  <- outside"
            interval = f"[{row.low:.4g}, {row.high:.4g}]"
            lines.append(
                f"  {row.summary:<{width}}  {row.observed:>10.4g}  {row.predictive_mean:>10.4g}  {interval:>20}  "
                f"{row.tail_p:.2f}{flag}"
            )
        return "\n".join(lines)


def predictive_check(
    simulate: BatchSimulator, posterior: ABCPosterior, draws: int, *, seed: int
) -> PredictiveCheck:
    """Simulate ``draws`` posterior draws (resampled by weight) with fresh seeds."""
    if draws < 1:
        raise ABCError(f"predictive draws: expected at least 1, got {draws}")
    rng = stage_rng(seed, PREDICTIVE_STAGE)
    pick = rng.choice(posterior.theta.shape[0], size=draws, p=posterior.weights)
    theta = posterior.theta[pick]
    sims, labels = simulate_stage(simulate, theta, seed, PREDICTIVE_STAGE, 0, posterior.observed.size)
    return PredictiveCheck(
        summary_names=posterior.summary_names,
        latent_names=column_names(posterior.latent_names, sims.latent.shape[1], "z"),
        observed=posterior.observed,
        theta=theta,
        summaries=sims.summaries,
        latent=sims.latent,
        labels=tuple(labels),
        level=posterior.level,
    )
