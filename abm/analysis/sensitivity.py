"""Which assumptions drive the answer: Sobol indices and partial rank correlations.

Two tools, for two budgets.

Sobol indices (variance-based; Sobol 1993, Saltelli et al. 2008 and 2010)
    How much of an output's variance each factor explains on its own (first
    order, S_i) and together with all its interactions (total order, S_Ti).
    They need the Saltelli scheme: two independent sample matrices A and B of
    ``n`` rows, and for each factor i a matrix AB_i that is A with column i
    taken from B, so ``n * (d + 2)`` model evaluations for ``d`` factors. The
    indices come from :func:`scipy.stats.sobol_indices` (Saltelli 2010
    estimators, Table 2 (b) and (f)), fed the outputs as a dict of precomputed
    arrays, so the runs can be made anywhere:

    * :func:`sobol_design` returns the rows to simulate (a :class:`SobolDesign`;
      :meth:`SobolDesign.rows` documents their order), and
      :func:`sobol_from_outputs` turns the simulated outputs back into indices;
    * :func:`sobol_batch` does both around a function that evaluates a table of
      rows (where a batch executor plugs in);
    * :func:`sobol_callable` evaluates a vectorised model in scipy's own
      convention (inputs of shape ``(d, n)``).

    The three give identical indices for the same factors, ``n`` and seed: the
    design draws A and B exactly as scipy's callable path does (one scrambled
    Sobol' sequence of ``2d`` dimensions, split in two), which the tests check.

Partial rank correlation coefficients (PRCC; Marino et al. 2008)
    A cheaper screen on any design (Latin hypercube rows, a batch already run):
    the correlation between the ranks of a factor and of an output once the
    ranks of the other factors are regressed out of both. It measures monotone
    influence, not variance share; it can miss a factor whose effect is
    non-monotone, which the Sobol total index would catch.

Randomness: every function takes a seed (an int or a
:class:`numpy.random.SeedSequence`); the sample and the bootstrap draw from two
streams derived from it by spawn key, never from global state, so the same
seed gives the same indices and the same intervals.

Stochastic models: each design row is one draw of the simulator's own noise as
well as of the factors. Running every row with the same seed (common random
numbers) keeps that noise out of the comparison; otherwise it appears as
variance no factor explains, and first-order indices sum to well below 1.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from ..errors import InputError

Seed = int | np.random.SeedSequence
# A factor is a (low, high) range, sampled uniformly, or any frozen scipy
# distribution (anything with ``ppf``), e.g. ``scipy.stats.randint(1, 6)`` for a
# whole-number factor or a normal for an uncertain rate.
FactorSpec = tuple[float, float] | Any

# Spawn-key purposes of the two random streams a seed gives.
_SAMPLE, _BOOTSTRAP = 0, 1
# Bookkeeping columns of SobolDesign.rows(); a factor may not take these names.
BLOCK, SWAPPED, SAMPLE = "sobol_block", "sobol_swapped", "sobol_sample"
# Resample counts the bootstrap holds at once (about 32 MB as int64): bounds memory when the
# BCa jackknife makes n resamples of n - 1 samples each.
_BOOTSTRAP_ELEMENTS = 4_000_000


class SensitivityInputError(InputError):
    """Factors, designs or outputs a sensitivity analysis cannot use."""


def _stream(seed: Seed, purpose: int) -> np.random.Generator:
    """A generator for one purpose, derived from the seed by spawn key (not by spawn(), which counts calls)."""
    if isinstance(seed, np.random.SeedSequence):
        root = seed
    elif isinstance(seed, (int, np.integer)) and not isinstance(seed, bool):
        root = np.random.SeedSequence(int(seed))
    else:
        raise SensitivityInputError(f"seed: expected an int or a numpy SeedSequence, got {seed!r}")
    return np.random.default_rng(np.random.SeedSequence(root.entropy, spawn_key=(*root.spawn_key, purpose)))


def _distributions(factors: Mapping[str, FactorSpec]) -> tuple[tuple[str, ...], list[Any]]:
    """Factor names and one frozen distribution per factor (a range becomes a uniform)."""
    if not factors:
        raise SensitivityInputError("factors: at least one factor is needed")
    names, dists = [], []
    for name, spec in factors.items():
        if name in (BLOCK, SWAPPED, SAMPLE):
            raise SensitivityInputError(f"factors.{name}: the name is reserved for the design's bookkeeping")
        if hasattr(spec, "ppf"):
            dists.append(spec)
        elif isinstance(spec, Sequence) and not isinstance(spec, str) and len(spec) == 2:
            try:
                low, high = (float(v) for v in spec)
            except (TypeError, ValueError):
                low = high = math.nan
            if not (math.isfinite(low) and math.isfinite(high) and high > low):
                raise SensitivityInputError(f"factors.{name}: expected a range low < high, got {tuple(spec)!r}")
            dists.append(stats.uniform(loc=low, scale=high - low))
        else:
            raise SensitivityInputError(
                f"factors.{name}: expected a (low, high) range or a scipy distribution, got {spec!r}"
            )
        names.append(str(name))
    return tuple(names), dists


def _check_n(n: int) -> int:
    """Sobol' points keep their balance only in powers of two; scipy refuses other n."""
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 2 or n & (n - 1):
        raise SensitivityInputError(f"n: expected a power of two of at least 2, got {n!r}")
    return int(n)


def _frozen(array: ArrayLike) -> np.ndarray:
    """A read-only float copy, so a frozen result cannot be changed through its arrays."""
    out = np.array(array, dtype=float)
    out.setflags(write=False)
    return out


# -- Sobol: the design ------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class SobolDesign:
    """The rows a Saltelli scheme needs: base matrices A and B (``n`` rows, one column per factor).

    ``seed`` is kept so :func:`sobol_from_outputs` bootstraps from the same seed's second stream.
    """

    factors: tuple[str, ...]
    n: int
    seed: Seed
    A: np.ndarray
    B: np.ndarray

    @property
    def size(self) -> int:
        """Rows to simulate: ``n * (d + 2)``."""
        return self.n * (len(self.factors) + 2)

    def matrix(self) -> np.ndarray:
        """All rows to simulate, shape ``(n * (d + 2), d)``, in the order of :meth:`rows`."""
        d = len(self.factors)
        blocks = [self.A, self.B]
        for i in range(d):
            ab = self.A.copy()
            ab[:, i] = self.B[:, i]
            blocks.append(ab)
        return np.vstack(blocks)

    def rows(self) -> pd.DataFrame:
        """The rows to simulate, as a table with one column per factor.

        Order (the order outputs must come back in): the ``n`` rows of A, then
        the ``n`` rows of B, then for each factor i in ``factors`` order the
        ``n`` rows of AB_i (A with factor i taken from B). Bookkeeping columns:
        ``sobol_block`` ("A", "B" or "AB"), ``sobol_swapped`` (the factor taken
        from B in an AB block, else empty) and ``sobol_sample`` (row 0..n-1
        within its block; rows with the same sample number share A's values).
        """
        d = len(self.factors)
        frame = pd.DataFrame(self.matrix(), columns=list(self.factors))
        frame.insert(0, SAMPLE, np.tile(np.arange(self.n), d + 2))
        frame.insert(0, SWAPPED, np.repeat(["", ""] + list(self.factors), self.n))
        frame.insert(0, BLOCK, np.repeat(["A", "B"] + ["AB"] * d, self.n))
        return frame

    def split(self, outputs: np.ndarray) -> dict[str, np.ndarray]:
        """Outputs in :meth:`rows` order, shape ``(rows, s)``, as scipy's dict.

        ``f_A`` and ``f_B`` have shape ``(s, n)``, ``f_AB`` ``(d, s, n)``.
        """
        d, n = len(self.factors), self.n
        if outputs.ndim != 2 or outputs.shape[0] != self.size:
            raise SensitivityInputError(
                f"outputs: expected {self.size} rows (n = {n} times d + 2 = {d + 2}), got shape {outputs.shape}"
            )
        per_block = outputs.reshape(d + 2, n, -1).transpose(0, 2, 1)  # (d + 2, s, n)
        return {"f_A": per_block[0], "f_B": per_block[1], "f_AB": per_block[2:]}


def sobol_design(factors: Mapping[str, FactorSpec], n: int, *, seed: Seed) -> SobolDesign:
    """The A and B matrices for ``n`` base rows (a power of two) over independent factors.

    As scipy's ``sobol_indices`` does (after Saltelli et al. 2010, section 5),
    A and B are the two halves of one scrambled Sobol' sequence of ``2d``
    dimensions, which keeps them uncorrelated, mapped through each factor's
    inverse distribution function.
    """
    names, dists = _distributions(factors)
    n = _check_n(n)
    d = len(names)
    unit = stats.qmc.Sobol(d=2 * d, scramble=True, bits=64, rng=_stream(seed, _SAMPLE)).random(n)
    a_b = unit.T.reshape(2, d, n)
    for i, dist in enumerate(dists):
        a_b[:, i] = dist.ppf(a_b[:, i])
    return SobolDesign(factors=names, n=n, seed=seed, A=_frozen(a_b[0].T), B=_frozen(a_b[1].T))


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


# -- Sobol: the indices -----------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class SobolIndices:
    """First- and total-order Sobol indices per output and factor, with bootstrap intervals.

    Arrays are indexed ``[output, factor]``; the ``*_ci`` arrays add a last axis
    (low, high). Intervals are BCa bootstrap intervals over the ``n`` Saltelli
    samples (a sample is a row of A with its rows of B and of every AB_i).
    """

    factors: tuple[str, ...]
    outputs: tuple[str, ...]
    n: int
    first_order: np.ndarray
    total_order: np.ndarray
    first_order_ci: np.ndarray
    total_order_ci: np.ndarray
    confidence_level: float
    n_resamples: int

    @property
    def evaluations(self) -> int:
        """Model runs behind the indices: ``n * (d + 2)``."""
        return self.n * (len(self.factors) + 2)

    def to_frame(self) -> pd.DataFrame:
        """One row per output and factor; ``interactions`` is total minus first order."""
        return _per_output_and_factor(self.outputs, self.factors, {
            "first_order": self.first_order,
            "first_order_low": self.first_order_ci[..., 0],
            "first_order_high": self.first_order_ci[..., 1],
            "total_order": self.total_order,
            "total_order_low": self.total_order_ci[..., 0],
            "total_order_high": self.total_order_ci[..., 1],
            "interactions": self.total_order - self.first_order,
        })

    def summary(self) -> str:
        """A table per output, factors ranked by total order, with how to read it."""
        level = f"{self.confidence_level:.0%}"
        lines = [
            f"Sobol indices: {len(self.factors)} factors, n = {self.n} base rows, {self.evaluations} model runs; "
            f"{level} BCa bootstrap intervals ({self.n_resamples} resamples)."
        ]
        width = max(len("factor"), *(len(f) for f in self.factors))
        for o, output in enumerate(self.outputs):
            lines += ["", f"{output}:", f"  {'factor':<{width}}  {'first order':>22}  {'total order':>22}"]
            for f in np.argsort(-self.total_order[o], kind="stable"):
                first = _with_interval(self.first_order[o, f], self.first_order_ci[o, f])
                total = _with_interval(self.total_order[o, f], self.total_order_ci[o, f])
                lines.append(f"  {self.factors[f]:<{width}}  {first:>22}  {total:>22}")
            first_sum = float(self.first_order[o].sum())
            lines.append(f"  first-order sum {first_sum:.3f}: about {max(1.0 - first_sum, 0.0):.0%} of the variance "
                         "comes from interactions (or from noise no factor explains).")
        lines += [
            "",
            "First order: the variance share a factor explains alone; total order: alone and through interactions.",
            "A negative estimate, or first order above total, is Monte Carlo error; an interval covering 0 cannot be "
            "told apart from no influence.",
        ]
        return "\n".join(lines)


def _bootstrap(
    f: dict[str, np.ndarray], confidence_level: float, n_resamples: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """BCa intervals ``(s, d, 2)`` for first and total order, resampling whole Saltelli samples.

    The statistic is scipy's (``SobolResult.bootstrap()``: outputs centred on
    the full sample's mean, the Saltelli 2010 estimators, Table 2 (b) and (f),
    recomputed on each resample, BCa intervals), but seeded (scipy's draws from
    fresh entropy, so its intervals change from call to call) and fast: each
    estimator is a ratio of sample means of per-sample terms, so a resample's
    estimates are one matrix product of its counts with those terms. scipy's
    loop takes about 9 s for n = 2^13 and 3 factors, most of it in the BCa
    jackknife's n leave-one-out resamples.
    """
    mean = np.mean([f["f_A"], f["f_B"]], axis=(0, -1)).reshape(-1, 1)
    f_a, f_b, f_ab = f["f_A"] - mean, f["f_B"] - mean, f["f_AB"] - mean
    d, s, n = f_ab.shape
    # Means over a sample of these rows give: first-order numerators (d*s), total-order numerators (d*s),
    # and, per output, the mean square and mean of A and B pooled, whose difference is the variance.
    terms = np.concatenate([
        (f_b * (f_ab - f_a)).reshape(d * s, n),
        (0.5 * (f_a - f_ab) ** 2).reshape(d * s, n),
        0.5 * (f_a**2 + f_b**2),
        0.5 * (f_a + f_b),
    ]).T

    def statistic(idx: np.ndarray, axis: int = -1) -> np.ndarray:
        # idx holds resampled sample numbers (..., m); a sample's rows of A, B and every AB_i go together.
        rows = idx.reshape(-1, idx.shape[-1])
        flat = (rows + n * np.arange(len(rows))[:, None]).ravel()
        counts = np.bincount(flat, minlength=len(rows) * n).reshape(len(rows), n)
        means = counts @ terms / rows.shape[1]
        first_num = means[:, : d * s].reshape(-1, d, s)
        total_num = means[:, d * s : 2 * d * s].reshape(-1, d, s)
        var = (means[:, 2 * d * s : 2 * d * s + s] - means[:, 2 * d * s + s :] ** 2)[:, None, :]
        out = np.stack([first_num / var, total_num / var]).transpose(0, 3, 2, 1)  # (2, s, d, resamples)
        return out.reshape(2, s, d, *idx.shape[:-1])

    batch = max(1, _BOOTSTRAP_ELEMENTS // n)
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore"):
        # A factor the output ignores entirely has the same estimate on every resample, where BCa is
        # undefined (scipy warns and returns NaN); its interval is that single value, set below.
        warnings.simplefilter("ignore", stats.DegenerateDataWarning)
        res = stats.bootstrap(
            [np.arange(n)], statistic, n_resamples=n_resamples, batch=batch, vectorized=True,
            confidence_level=confidence_level, method="BCa", rng=rng,
        )
    ci = np.stack([res.confidence_interval.low, res.confidence_interval.high], axis=-1)  # (2, s, d, 2)
    spread = np.ptp(res.bootstrap_distribution, axis=-1)
    single = (spread == 0) & np.isnan(ci).any(axis=-1)
    ci[single] = res.bootstrap_distribution[single][:, :1]
    return ci[0], ci[1]


def _with_interval(value: float, interval: np.ndarray) -> str:
    return f"{value:.3f} [{interval[0]:.3f}, {interval[1]:.3f}]"


def _output_matrix(
    outputs: ArrayLike | pd.DataFrame | pd.Series, names: Sequence[str] | None
) -> tuple[np.ndarray, tuple[str, ...]]:
    """Outputs as a float matrix (rows, s) with a name per column."""
    if isinstance(outputs, pd.DataFrame):
        values, found = outputs.to_numpy(dtype=float), tuple(str(c) for c in outputs.columns)
    elif isinstance(outputs, pd.Series):
        values, found = outputs.to_numpy(dtype=float)[:, None], (str(outputs.name or "y"),)
    else:
        values = np.asarray(outputs, dtype=float)
        if values.ndim == 1:
            values = values[:, None]
        found = ("y",) if values.shape[1] == 1 else tuple(f"y{i}" for i in range(values.shape[1]))
    if values.ndim != 2:
        raise SensitivityInputError(
            f"outputs: expected one value per row, or a column per output; got shape {values.shape}"
        )
    if names is not None:
        if len(names) != values.shape[1]:
            raise SensitivityInputError(f"outputs: {values.shape[1]} output columns but {len(names)} names")
        found = tuple(str(n) for n in names)
    bad = ~np.isfinite(values)
    if bad.any():
        raise SensitivityInputError(
            f"outputs: {int(bad.any(axis=1).sum())} rows hold missing or infinite values (e.g. failed runs); "
            "re-run them: every row of the Saltelli scheme is needed"
        )
    return values, found


def sobol_from_outputs(
    design: SobolDesign,
    outputs: ArrayLike | pd.DataFrame | pd.Series,
    *,
    output_names: Sequence[str] | None = None,
    confidence_level: float = 0.95,
    n_resamples: int = 999,
) -> SobolIndices:
    """Sobol indices from outputs simulated on ``design.rows()``, in that order.

    ``outputs`` has one row per design row: a vector (one output), a matrix or
    a DataFrame (a column per output, its names used). Indices come from
    ``scipy.stats.sobol_indices(func={'f_A': ..., 'f_B': ..., 'f_AB': ...})``;
    intervals from a bootstrap seeded by the design's seed.
    """
    values, names = _output_matrix(outputs, output_names)
    f = design.split(values)
    constant = [name for name, col in zip(names, values.T) if np.ptp(col) == 0]
    if constant:
        # scipy reports 0 for an output without variance; saying so is more honest than indices of nothing.
        raise SensitivityInputError(f"outputs: {', '.join(constant)}: one value on every row, no variance to apportion")
    res = stats.sobol_indices(func=f, n=design.n)
    s, d = len(names), len(design.factors)
    first_ci, total_ci = _bootstrap(f, confidence_level, n_resamples, _stream(design.seed, _BOOTSTRAP))
    return SobolIndices(
        factors=design.factors,
        outputs=names,
        n=design.n,
        first_order=_frozen(np.reshape(res.first_order, (s, d))),
        total_order=_frozen(np.reshape(res.total_order, (s, d))),
        first_order_ci=_frozen(first_ci),
        total_order_ci=_frozen(total_ci),
        confidence_level=confidence_level,
        n_resamples=n_resamples,
    )


def sobol_batch(
    evaluate: Callable[[pd.DataFrame], ArrayLike | pd.DataFrame | pd.Series],
    factors: Mapping[str, FactorSpec],
    n: int,
    *,
    seed: Seed,
    output_names: Sequence[str] | None = None,
    confidence_level: float = 0.95,
    n_resamples: int = 999,
) -> SobolIndices:
    """Sobol indices of a model run through ``evaluate``, which maps a table of rows to their outputs.

    ``evaluate`` receives ``sobol_design(factors, n, seed=seed).rows()`` (the
    ``n * (d + 2)`` rows, bookkeeping columns included) and returns one output
    row per input row, in the same order: the place for a batch executor.
    """
    design = sobol_design(factors, n, seed=seed)
    return sobol_from_outputs(
        design, evaluate(design.rows()), output_names=output_names,
        confidence_level=confidence_level, n_resamples=n_resamples,
    )


def sobol_callable(
    func: Callable[[np.ndarray], ArrayLike],
    factors: Mapping[str, FactorSpec],
    n: int,
    *,
    seed: Seed,
    output_names: Sequence[str] | None = None,
    confidence_level: float = 0.95,
    n_resamples: int = 999,
) -> SobolIndices:
    """Sobol indices of a vectorised model in scipy's convention.

    ``func`` maps inputs of shape ``(d, m)`` (a column per point, factors in
    ``factors`` order) to outputs of shape ``(m,)`` or ``(s, m)``. The indices
    equal those of ``scipy.stats.sobol_indices(func=func, n=n, dists=...,
    rng=...)`` given the same sample stream.
    """
    design = sobol_design(factors, n, seed=seed)
    outputs = np.atleast_2d(np.asarray(func(design.matrix().T), dtype=float)).T
    return sobol_from_outputs(
        design, outputs, output_names=output_names, confidence_level=confidence_level, n_resamples=n_resamples
    )


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
