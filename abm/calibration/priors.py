"""Prior distributions over the unknowns of a calibration.

Four families, each optionally truncated to ``bounds``: ``uniform(low, high)``,
``loguniform(low, high)``, ``normal(mean, sd)`` and ``gamma(shape, rate)``.
A truncated prior is the family's density renormalised on the bounds; it is
sampled by inverting the family's distribution function on the bounded range
of probabilities, so no draw is ever thrown away.

Each prior also says how the local-linear regression adjustment should see
its values (:meth:`Prior.transform`): on the log scale above a lower bound,
on the logit scale between two bounds, as is otherwise. Adjusting on that
scale keeps adjusted values inside the support (the transformations the R
package ``abc`` offers for the same reason; Csillery, Francois & Blum 2012,
[mem]).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from scipy import stats

from ..errors import InputError

DISTRIBUTIONS: dict[str, tuple[str, ...]] = {
    "uniform": ("low", "high"),
    "loguniform": ("low", "high"),
    "normal": ("mean", "sd"),
    "gamma": ("shape", "rate"),
}

Transform = Literal["identity", "log", "logit"]
# Probabilities this close to 0 or 1 are kept off the ends, so a transform never meets log(0).
_EDGE = 1e-12


class PriorError(InputError):
    """A prior that cannot be used (wrong parameters, empty support)."""


@dataclass(frozen=True)
class Prior:
    """One unknown: its name (a column of every table), its distribution and where it goes in the world.

    ``path`` is the dotted world path the value is written to (``None`` for a
    toy simulator that takes the value directly); with ``multiply`` the value
    multiplies every number found at the path instead of replacing it (a
    sensitivity multiplier on a method's detection chances, say).
    """

    name: str
    dist: str
    params: tuple[tuple[str, float], ...]
    bounds: tuple[float, float] = (-math.inf, math.inf)
    path: str | None = None
    multiply: bool = False

    def __post_init__(self) -> None:
        if self.dist not in DISTRIBUTIONS:
            raise PriorError(f"{self.name}: unknown distribution '{self.dist}'; expected one of {', '.join(DISTRIBUTIONS)}")
        given = dict(self.params)
        needed = DISTRIBUTIONS[self.dist]
        if set(given) != set(needed):
            raise PriorError(f"{self.name}: a {self.dist} prior takes {', '.join(needed)}; got {', '.join(given) or 'none'}")
        problem = _parameter_problem(self.dist, given)
        if problem:
            raise PriorError(f"{self.name}: {problem}")
        low, high = self.bounds
        if not low < high:
            raise PriorError(f"{self.name}: bounds must be low < high, got [{low}, {high}]")
        if self.mass() <= 0.0:
            raise PriorError(f"{self.name}: the bounds [{low}, {high}] hold none of the {self.dist} prior's mass")

    @classmethod
    def make(
        cls,
        name: str,
        dist: str,
        bounds: tuple[float, float] | None = None,
        path: str | None = None,
        multiply: bool = False,
        **params: float,
    ) -> "Prior":
        """A prior from keyword parameters: ``Prior.make("rate", "gamma", shape=2, rate=0.5)``."""
        order = DISTRIBUTIONS.get(dist, tuple(params))
        ordered = tuple((key, float(params[key])) for key in order if key in params)
        extra = tuple((key, float(value)) for key, value in params.items() if key not in order)
        limits = (-math.inf, math.inf) if bounds is None else (float(bounds[0]), float(bounds[1]))
        return cls(name, dist, ordered + extra, limits, path, multiply)

    def family(self) -> Any:
        """The untruncated scipy distribution."""
        p = dict(self.params)
        if self.dist == "uniform":
            return stats.uniform(loc=p["low"], scale=p["high"] - p["low"])
        if self.dist == "loguniform":
            return stats.loguniform(p["low"], p["high"])
        if self.dist == "normal":
            return stats.norm(loc=p["mean"], scale=p["sd"])
        return stats.gamma(a=p["shape"], scale=1.0 / p["rate"])

    def support(self) -> tuple[float, float]:
        """Where the prior has density: the family's support cut to the bounds."""
        low, high = self.family().support()
        return max(float(low), self.bounds[0]), min(float(high), self.bounds[1])

    def mass(self) -> float:
        """The family's probability inside the bounds (1 without bounds)."""
        family = self.family()
        return float(family.cdf(self.bounds[1]) - family.cdf(self.bounds[0]))

    def pdf(self, x: np.ndarray) -> np.ndarray:
        """Density at ``x`` (0 outside the support)."""
        x = np.asarray(x, dtype=float)
        low, high = self.support()
        inside = (x >= low) & (x <= high)
        with np.errstate(divide="ignore", invalid="ignore"):
            density = self.family().pdf(x) / self.mass()
        return np.where(inside, density, 0.0)

    def ppf(self, q: np.ndarray) -> np.ndarray:
        """Quantiles of the truncated prior."""
        family = self.family()
        lo, hi = family.cdf(self.bounds[0]), family.cdf(self.bounds[1])
        u = lo + np.clip(np.asarray(q, dtype=float), _EDGE, 1.0 - _EDGE) * (hi - lo)
        low, high = self.support()
        return np.clip(family.ppf(u), low, high)

    def sd(self) -> float:
        """Standard deviation of the truncated prior (midpoint rule over 4000 quantiles)."""
        return float(np.std(self.ppf((np.arange(4000) + 0.5) / 4000)))

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """``n`` independent draws (inverse distribution function of uniform draws)."""
        return self.ppf(rng.random(n))

    def transform(self) -> Transform:
        """The scale the regression adjustment works on (see the module docstring)."""
        low, high = self.support()
        if math.isfinite(low) and math.isfinite(high):
            return "logit"
        if math.isfinite(low) or math.isfinite(high):
            return "log"
        return "identity"

    def to_scale(self, x: np.ndarray) -> np.ndarray:
        """Values onto the :meth:`transform` scale."""
        low, high = self.support()
        kind = self.transform()
        x = np.asarray(x, dtype=float)
        if kind == "logit":
            p = np.clip((x - low) / (high - low), _EDGE, 1.0 - _EDGE)
            return np.log(p) - np.log1p(-p)
        if kind == "log":
            gap = x - low if math.isfinite(low) else high - x
            return np.log(np.maximum(gap, _EDGE * max(1.0, abs(low if math.isfinite(low) else high))))
        return x

    def from_scale(self, z: np.ndarray) -> np.ndarray:
        """The inverse of :meth:`to_scale`."""
        low, high = self.support()
        kind = self.transform()
        z = np.asarray(z, dtype=float)
        if kind == "logit":
            return low + (high - low) / (1.0 + np.exp(-z))
        if kind == "log":
            return low + np.exp(z) if math.isfinite(low) else high - np.exp(z)
        return z

    def describe(self) -> str:
        """The prior in words, e.g. ``gamma(shape=4, rate=0.4) on [1, 60]``."""
        params = ", ".join(f"{k}={_number(v)}" for k, v in self.params)
        cut = "" if self.bounds == (-math.inf, math.inf) else f" on [{_number(self.bounds[0])}, {_number(self.bounds[1])}]"
        how = " (multiplier)" if self.multiply else ""
        return f"{self.dist}({params}){cut}{how}"


def _parameter_problem(dist: str, p: dict[str, float]) -> str | None:
    if any(not math.isfinite(v) for v in p.values()):
        return "parameters must be finite numbers"
    if dist == "uniform" and not p["low"] < p["high"]:
        return f"a uniform prior needs low < high, got low {p['low']}, high {p['high']}"
    if dist == "loguniform" and not 0 < p["low"] < p["high"]:
        return f"a loguniform prior needs 0 < low < high, got low {p['low']}, high {p['high']}"
    if dist == "normal" and not p["sd"] > 0:
        return f"a normal prior needs sd > 0, got {p['sd']}"
    if dist == "gamma" and not (p["shape"] > 0 and p["rate"] > 0):
        return f"a gamma prior needs shape > 0 and rate > 0, got shape {p['shape']}, rate {p['rate']}"
    return None


def _number(value: float) -> str:
    return f"{value:g}"


@dataclass(frozen=True)
class PriorSet:
    """Independent priors, one per unknown, in a fixed order (the columns of theta)."""

    priors: tuple[Prior, ...]

    def __post_init__(self) -> None:
        if not self.priors:
            raise PriorError("at least one prior is needed")
        names = [p.name for p in self.priors]
        repeated = sorted({n for n in names if names.count(n) > 1})
        if repeated:
            raise PriorError(f"prior names must differ; repeated: {', '.join(repeated)}")

    @classmethod
    def of(cls, priors: Sequence[Prior]) -> "PriorSet":
        return cls(tuple(priors))

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.priors)

    @property
    def dim(self) -> int:
        return len(self.priors)

    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """``n`` draws, shape ``(n, d)``, row by row from the one generator.

        Row i takes the generator's uniforms i*d .. i*d + d - 1, so the first
        rows do not depend on ``n``: a calibration given more draws simulates
        its earlier draws again unchanged, and can reuse their runs.
        """
        u = rng.random((n, self.dim))
        return np.column_stack([p.ppf(u[:, j]) for j, p in enumerate(self.priors)])

    def pdf(self, theta: np.ndarray) -> np.ndarray:
        """Joint density of each row of ``theta`` (shape ``(n, d)``)."""
        theta = np.atleast_2d(theta)
        density = np.ones(theta.shape[0])
        for j, prior in enumerate(self.priors):
            density *= prior.pdf(theta[:, j])
        return density

    def to_scale(self, theta: np.ndarray) -> np.ndarray:
        return np.column_stack([p.to_scale(theta[:, j]) for j, p in enumerate(self.priors)])

    def from_scale(self, z: np.ndarray) -> np.ndarray:
        return np.column_stack([p.from_scale(z[:, j]) for j, p in enumerate(self.priors)])
