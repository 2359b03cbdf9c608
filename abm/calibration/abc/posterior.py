"""What an ABC run gives: the reference table of prior draws, each generation, the posterior."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .weighted import effective_sample_size, weighted_quantile


@dataclass(frozen=True, eq=False)
class ReferenceTable:
    """Every prior draw of a stage and what its simulation gave, kept or not.

    Rejection ABC reads it whole; the self-check (:mod:`abm.calibration.self_check`)
    takes its rows in turn as pseudo-observed data with known parameters.
    """

    theta: np.ndarray  # (n, d) as drawn from the prior
    summaries: np.ndarray  # (n, k)
    latent: np.ndarray  # (n, m)
    labels: tuple[str, ...]

    @property
    def size(self) -> int:
        return int(self.theta.shape[0])

    def without(self, i: int) -> "ReferenceTable":
        """The table less row ``i`` (leave-one-out)."""
        keep = np.arange(self.size) != i
        return ReferenceTable(
            self.theta[keep], self.summaries[keep], self.latent[keep], tuple(l for l, k in zip(self.labels, keep) if k)
        )


@dataclass(frozen=True, eq=False)
class Generation:
    """One population of an ABC run (rejection has one), with what it took to make it."""

    index: int
    epsilon: float
    simulations: int
    theta: np.ndarray  # (N, d); adjusted values in a regression-adjusted rejection
    weights: np.ndarray  # (N,), summing to 1
    distances: np.ndarray  # (N,)
    summaries: np.ndarray  # (N, k) simulated summaries of the kept particles
    latent: np.ndarray  # (N, m)
    labels: tuple[str, ...]  # the simulations the particles came from
    scale: np.ndarray  # (k,) the distance's scale
    theta_raw: np.ndarray | None = None  # before the regression adjustment
    latent_raw: np.ndarray | None = None
    reference: ReferenceTable | None = None  # generation 0: every prior draw, kept or not

    @property
    def accepted(self) -> int:
        return int(self.theta.shape[0])

    @property
    def ess(self) -> float:
        return effective_sample_size(self.weights)


@dataclass(frozen=True, eq=False)
class ABCPosterior:
    """A weighted sample from an ABC posterior, with every generation that led to it."""

    method: str
    names: tuple[str, ...]
    summary_names: tuple[str, ...]
    latent_names: tuple[str, ...]
    observed: np.ndarray
    generations: tuple[Generation, ...]
    level: float = 0.9
    stopped: str = ""  # why the algorithm stopped before its last generation, if it did

    @property
    def final(self) -> Generation:
        return self.generations[-1]

    @property
    def theta(self) -> np.ndarray:
        return self.final.theta

    @property
    def weights(self) -> np.ndarray:
        return self.final.weights

    @property
    def latent(self) -> np.ndarray:
        return self.final.latent

    def diagnostics(self) -> pd.DataFrame:
        """One row per generation: tolerance, simulations, accepted, acceptance rate, effective sample size."""
        return pd.DataFrame(
            {
                "generation": [g.index for g in self.generations],
                "epsilon": [g.epsilon for g in self.generations],
                "simulations": [g.simulations for g in self.generations],
                "accepted": [g.accepted for g in self.generations],
                "acceptance_rate": [g.accepted / g.simulations if g.simulations else math.nan for g in self.generations],
                "ess": [g.ess for g in self.generations],
            }
        )

    def sample_frame(self) -> pd.DataFrame:
        """The final particles: parameters, latent quantities, weight, distance and simulation label."""
        frame = pd.DataFrame(self.theta, columns=list(self.names))
        for j, name in enumerate(self.latent_names):
            frame[name] = self.latent[:, j]
        frame["weight"] = self.weights
        frame["distance"] = self.final.distances
        frame["simulation"] = list(self.final.labels)
        return frame

    def to_frame(self) -> pd.DataFrame:
        """Posterior mean, SD and equal-tailed credible interval of every parameter and latent quantity."""
        rows = []
        lo, hi = (1 - self.level) / 2, 1 - (1 - self.level) / 2
        columns = [(n, self.theta[:, j], "parameter") for j, n in enumerate(self.names)]
        columns += [(n, self.latent[:, j], "latent") for j, n in enumerate(self.latent_names)]
        for name, values, kind in columns:
            mean = float(np.average(values, weights=self.weights))
            sd = float(np.sqrt(np.average((values - mean) ** 2, weights=self.weights)))
            low, high = weighted_quantile(values, self.weights, [lo, hi])
            rows.append(
                {"quantity": name, "kind": kind, "mean": mean, "sd": sd, "low": float(low), "high": float(high), "level": self.level}
            )
        return pd.DataFrame(rows)

    def summary(self) -> str:
        """The posterior table and the diagnostics, in words."""
        final = self.final
        lines = [
            f"{self.method}: {final.accepted} particles, effective sample size {final.ess:.0f}, "
            f"{sum(g.simulations for g in self.generations)} simulations in {len(self.generations)} generation(s).",
        ]
        if self.stopped:
            lines.append(f"Stopped early: {self.stopped}.")
        table = self.to_frame()
        width = max(len("quantity"), *(len(q) for q in table["quantity"]))
        lines += ["", f"  {'quantity':<{width}}  {'mean':>10}  {'sd':>10}  {f'{self.level:.0%} interval':>24}"]
        for row in table.itertuples():
            interval = f"[{row.low:.4g}, {row.high:.4g}]"
            lines.append(f"  {row.quantity:<{width}}  {row.mean:>10.4g}  {row.sd:>10.4g}  {interval:>24}")
        diag = self.diagnostics()
        lines += ["", "  generation  epsilon     simulations  accepted  acceptance  ESS"]
        for row in diag.itertuples():
            lines.append(
                f"  {row.generation:>10}  {row.epsilon:<10.4g}  {row.simulations:>11}  {row.accepted:>8}  "
                f"{row.acceptance_rate:>10.3f}  {row.ess:.0f}"
            )
        return "\n".join(lines)
