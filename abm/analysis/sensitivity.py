"""Which assumptions drive the answer: partial rank correlation coefficients (PRCC; Marino et al. 2008).

A screen on any design whose factors were sampled (Latin hypercube or Sobol'
rows, or a batch already run): the correlation between the ranks of a factor
and of an output once the ranks of the other factors are regressed out of
both. It measures monotone influence, not a share of variance; it can miss a
factor whose effect is non-monotone. The briefing of a sampled design shows it
beside PRIM's scenarios (:mod:`abm.analysis.discovery`).

Stochastic models: each design row is one draw of the simulator's own noise as
well as of the factors; running every row with the same seed (common random
numbers) keeps that noise out of the ranks.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from ..errors import InputError


class SensitivityInputError(InputError):
    """Factors or outputs a sensitivity analysis cannot use."""


def _frozen(array: ArrayLike) -> np.ndarray:
    """A read-only float copy, so a frozen result cannot be changed through its arrays."""
    out = np.array(array, dtype=float)
    out.setflags(write=False)
    return out


def _per_output_and_factor(
    outputs: Sequence[str], factors: Sequence[str], columns: dict[str, np.ndarray]
) -> pd.DataFrame:
    """One row per output and factor (outputs outer), from arrays indexed ``[output, factor]``."""
    records = [
        {"output": output, "factor": factor, **{name: values[o, f] for name, values in columns.items()}}
        for o, output in enumerate(outputs)
        for f, factor in enumerate(factors)
    ]
    return pd.DataFrame.from_records(records)


# -- partial rank correlation -----------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class PrccResult:
    """Partial rank correlation per output and factor (arrays indexed ``[output, factor]``).

    ``p_value`` is two-sided from ``t = r * sqrt(df / (1 - r^2))`` with
    ``df = n - 2 - (k - 1)``; the interval is Fisher's z, ``tanh(atanh(r) +- z / sqrt(n - 3 - (k - 1)))``
    (k - 1 variables held fixed).
    """

    factors: tuple[str, ...]
    outputs: tuple[str, ...]
    n: int
    coefficient: np.ndarray
    p_value: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    confidence_level: float

    @property
    def df(self) -> int:
        """Degrees of freedom of the t-test: ``n - 2 - (k - 1)``."""
        return self.n - 2 - (len(self.factors) - 1)

    def to_frame(self) -> pd.DataFrame:
        """One row per output and factor."""
        return _per_output_and_factor(self.outputs, self.factors, {
            "prcc": self.coefficient, "p_value": self.p_value, "ci_low": self.ci_low, "ci_high": self.ci_high,
        })

    def summary(self) -> str:
        """A table per output, factors ranked by the size of their coefficient."""
        level = f"{self.confidence_level:.0%}"
        lines = [f"Partial rank correlation: {len(self.factors)} factors, n = {self.n} runs, t-test df = {self.df}; "
                 f"{level} Fisher-z intervals."]
        width = max(len("factor"), *(len(f) for f in self.factors))
        for o, output in enumerate(self.outputs):
            lines += ["", f"{output}:", f"  {'factor':<{width}}  {'PRCC':>7}  {'interval':>17}  {'p-value':>9}"]
            for f in np.argsort(-np.abs(self.coefficient[o]), kind="stable"):
                interval = f"[{self.ci_low[o, f]:.3f}, {self.ci_high[o, f]:.3f}]"
                lines.append(f"  {self.factors[f]:<{width}}  {self.coefficient[o, f]:>7.3f}  {interval:>17}  "
                             f"{self.p_value[o, f]:>9.2g}")
        lines += ["", "PRCC measures monotone influence with the other factors held fixed (in rank); "
                      "a non-monotone effect can hide behind a coefficient near 0."]
        return "\n".join(lines)


def prcc(
    inputs: pd.DataFrame,
    outputs: pd.DataFrame | pd.Series,
    *,
    confidence_level: float = 0.95,
) -> PrccResult:
    """Partial rank correlation of each output with each factor, over any design's rows.

    Inputs and outputs are rank-transformed (average ranks for ties); for each
    factor, its ranks and the outputs' ranks are regressed (least squares, with
    intercept) on the ranks of the other factors, and the residuals correlated.
    """
    if isinstance(outputs, pd.Series):
        outputs = outputs.to_frame(name=str(outputs.name or "y"))
    factors = tuple(str(c) for c in inputs.columns)
    names = tuple(str(c) for c in outputs.columns)
    n, k = len(inputs), len(factors)
    if k == 0 or not names:
        raise SensitivityInputError("prcc: at least one factor and one output are needed")
    if len(outputs) != n:
        raise SensitivityInputError(f"prcc: {n} input rows but {len(outputs)} output rows")
    if n - k - 2 < 1:
        # The Fisher-z standard error 1/sqrt(n - 3 - (k - 1)) needs at least one spare run.
        raise SensitivityInputError(f"prcc: {k} factors need at least {k + 3} runs, got {n}")
    x = inputs.to_numpy(dtype=float)
    y = outputs.to_numpy(dtype=float)
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise SensitivityInputError("prcc: inputs or outputs hold missing or infinite values; drop those runs first")
    rx, ry = stats.rankdata(x, axis=0), stats.rankdata(y, axis=0)

    coefficient = np.empty((len(names), k))
    for j in range(k):
        others = np.column_stack([np.ones(n), np.delete(rx, j, axis=1)])
        res_x = rx[:, j] - others @ np.linalg.lstsq(others, rx[:, j], rcond=None)[0]
        res_y = ry - others @ np.linalg.lstsq(others, ry, rcond=None)[0]
        ss_x, ss_y = res_x @ res_x, np.einsum("ij,ij->j", res_y, res_y)
        # Residuals at rounding level: the factor (or an output) is fixed by the other factors,
        # so no partial correlation exists.
        if ss_x <= 1e-12 * (rx[:, j] @ rx[:, j]):
            raise SensitivityInputError(f"prcc: factor {factors[j]} is constant or determined by the other factors")
        if (ss_y <= 1e-12 * np.einsum("ij,ij->j", ry, ry)).any():
            raise SensitivityInputError(
                f"prcc: an output is constant or determined by the factors other than {factors[j]}"
            )
        coefficient[:, j] = np.clip(res_x @ res_y / np.sqrt(ss_x * ss_y), -1.0, 1.0)

    df = n - 2 - (k - 1)
    with np.errstate(divide="ignore"):
        t = coefficient * np.sqrt(df / (1.0 - coefficient**2))
        z = np.arctanh(coefficient)
    p_value = 2.0 * stats.t.sf(np.abs(t), df)
    half = stats.norm.ppf(0.5 + confidence_level / 2) / math.sqrt(n - 3 - (k - 1))
    return PrccResult(
        factors=factors,
        outputs=names,
        n=n,
        coefficient=_frozen(coefficient),
        p_value=_frozen(p_value),
        ci_low=_frozen(np.tanh(z - half)),
        ci_high=_frozen(np.tanh(z + half)),
        confidence_level=confidence_level,
    )
