"""The results object every estimator returns, its error, and the shared interval rules."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

import pandas as pd
from scipy import special  # not scipy.stats: its import costs every worker process about 0.45 s

from ..errors import InputError

DEFAULT_LEVEL = 0.9
FRAME_COLUMNS = (
    "method", "target", "window_start", "window_end", "estimate", "observed", "undetected",
    "se", "ci_low", "ci_high", "level", "interval", "source", "assumptions", "warnings",
)


class EstimatorCannotRun(InputError):
    """An estimator that cannot run on the records it was given; ``str()`` names it and says why."""

    def __init__(self, estimator: str, reason: str) -> None:
        super().__init__(f"{estimator} cannot run: {reason}")
        self.estimator = estimator
        self.reason = reason


@dataclass(frozen=True)
class EstimateResult:
    """One estimate of an unobserved total, statsmodels-style.

    ``target`` says what is counted (distinct persons, attempts reaching a
    station, ...); ``observed`` is the observed count the estimate expands;
    ``undetected`` is ``estimate - observed``. ``interval`` names the rule
    behind ``ci_low``/``ci_high``. ``parameters`` holds fitted quantities and
    counts as (name, value) pairs, in the order the estimator reports them.
    """

    method: str
    source: str
    target: str
    estimate: float
    observed: int
    se: float
    ci_low: float
    ci_high: float
    level: float
    interval: str
    assumptions: tuple[str, ...]
    window: tuple[int, int] | None = None
    parameters: tuple[tuple[str, float], ...] = ()
    warnings: tuple[str, ...] = ()  # why this estimate deserves less trust than its interval suggests
    undetected: float = field(init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "undetected", self.estimate - self.observed)

    @property
    def params(self) -> dict[str, float]:
        """``parameters`` as a dict."""
        return dict(self.parameters)

    def window_text(self) -> str:
        """The window as readable text."""
        return "all days" if self.window is None else f"days {self.window[0]}-{self.window[1]}"

    def summary(self) -> str:
        """A readable multi-line summary."""
        pct = f"{100 * self.level:g}%"
        lines = [
            self.method,
            f"  source:      {self.source}",
            f"  target:      {self.target} ({self.window_text()})",
            f"  estimate:    {self.estimate:.2f}   observed: {self.observed}   undetected: {self.undetected:.2f}",
            f"  SE:          {self.se:.2f}   {pct} interval: {self.ci_low:.2f} to {self.ci_high:.2f} ({self.interval})",
        ]
        if self.parameters:
            lines.append("  parameters:  " + ", ".join(f"{k} = {v:.6g}" for k, v in self.parameters))
        lines.append("  assumptions:")
        lines.extend(f"    - {a}" for a in self.assumptions)
        lines.extend(f"  warning: {w}" for w in self.warnings)
        return "\n".join(lines)

    def to_dict(self) -> dict[str, object]:
        """Plain values for JSON."""
        return {
            "method": self.method,
            "source": self.source,
            "target": self.target,
            "window": None if self.window is None else list(self.window),
            "estimate": self.estimate,
            "observed": self.observed,
            "undetected": self.undetected,
            "se": self.se,
            "ci_low": self.ci_low,
            "ci_high": self.ci_high,
            "level": self.level,
            "interval": self.interval,
            "assumptions": list(self.assumptions),
            "parameters": dict(self.parameters),
            "warnings": list(self.warnings),
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, object]) -> "EstimateResult":
        """The result :meth:`to_dict` describes; ``parameters`` a mapping or (name, value) pairs (which keep order)."""
        parameters = data.get("parameters", ())
        pairs = parameters.items() if isinstance(parameters, Mapping) else parameters
        window = data.get("window")
        return cls(
            method=str(data["method"]),
            source=str(data["source"]),
            target=str(data["target"]),
            estimate=float(data["estimate"]),
            observed=int(data["observed"]),
            se=float(data["se"]),
            ci_low=float(data["ci_low"]),
            ci_high=float(data["ci_high"]),
            level=float(data["level"]),
            interval=str(data["interval"]),
            assumptions=tuple(str(a) for a in data["assumptions"]),
            window=None if window is None else (int(window[0]), int(window[1])),
            parameters=tuple((str(name), float(value)) for name, value in pairs),
            warnings=tuple(str(w) for w in data.get("warnings", ())),  # type: ignore[union-attr]
        )

    def to_frame(self) -> pd.DataFrame:
        """One-row DataFrame; assumptions joined by ' | ', parameters left to ``to_dict``."""
        start, end = (pd.NA, pd.NA) if self.window is None else self.window
        return pd.DataFrame(
            {
                "method": [self.method],
                "target": [self.target],
                "window_start": pd.array([start], dtype="Int64"),
                "window_end": pd.array([end], dtype="Int64"),
                "estimate": [self.estimate],
                "observed": [self.observed],
                "undetected": [self.undetected],
                "se": [self.se],
                "ci_low": [self.ci_low],
                "ci_high": [self.ci_high],
                "level": [self.level],
                "interval": [self.interval],
                "source": [self.source],
                "assumptions": [" | ".join(self.assumptions)],
                "warnings": [" | ".join(self.warnings)],
            },
            columns=list(FRAME_COLUMNS),
        )


def z_value(level: float, estimator: str) -> float:
    """Two-sided normal quantile for a confidence ``level`` in (0, 1)."""
    if not (isinstance(level, (int, float)) and 0.0 < level < 1.0):
        raise EstimatorCannotRun(estimator, f"confidence level must lie strictly between 0 and 1, got {level!r}")
    return float(special.ndtri(0.5 + level / 2.0))  # the normal quantile, as scipy.stats.norm.ppf computes it


def wald_interval(estimate: float, se: float, z: float, floor: float) -> tuple[float, float]:
    """estimate ± z·se, the lower end raised to ``floor`` (what was observed cannot be undercut)."""
    return max(estimate - z * se, floor), estimate + z * se


def lognormal_interval(observed: float, unseen: float, variance: float, z: float) -> tuple[float, float]:
    """Chao's (1987) log-normal interval: observed + unseen/C .. observed + unseen·C.

    C = exp(z·sqrt(ln(1 + Var/unseen²))). It keeps the interval above the
    observed count and skewed like the estimate of the unseen part.
    """
    if unseen <= 0.0 or variance <= 0.0:
        return observed + unseen, observed + unseen
    c = math.exp(z * math.sqrt(math.log1p(variance / unseen**2)))
    return observed + unseen / c, observed + unseen * c


INTERVAL_NAMES = {
    "wald": "Wald, lower end kept at the observed count",
    "lognormal": "log-normal on the unseen part, Chao 1987",
}


def make_result(
    *,
    method: str,
    source: str,
    target: str,
    estimate: float,
    observed: int,
    variance: float,
    level: float,
    interval: str,
    assumptions: Iterable[str],
    parameters: Mapping[str, float] | None = None,
    window: tuple[int, int] | None = None,
) -> EstimateResult:
    """Build a result with a ``"wald"`` or ``"lognormal"`` interval at ``level``.

    Any non-finite number or negative variance raises EstimatorCannotRun, so no
    NaN leaves an estimator silently.
    """
    z = z_value(level, method)
    numbers = {"estimate": estimate, "variance": variance, **(parameters or {})}
    bad = [name for name, value in numbers.items() if not math.isfinite(float(value))]
    if bad:
        raise EstimatorCannotRun(method, f"the computation gave no finite value for {', '.join(bad)}")
    if variance < 0.0:
        raise EstimatorCannotRun(method, f"the variance formula gave a negative value ({variance:.6g})")
    if interval == "wald":
        low, high = wald_interval(estimate, math.sqrt(variance), z, floor=observed)
    else:
        low, high = lognormal_interval(observed, estimate - observed, variance, z)
    return EstimateResult(
        method=method,
        source=source,
        target=target,
        estimate=float(estimate),
        observed=int(observed),
        se=math.sqrt(variance),
        ci_low=float(low),
        ci_high=float(high),
        level=float(level),
        interval=INTERVAL_NAMES[interval],
        assumptions=tuple(assumptions),
        window=window,
        parameters=tuple((name, float(value)) for name, value in (parameters or {}).items()),
    )
