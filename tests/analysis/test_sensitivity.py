"""Partial rank correlation against its definition: Spearman's correlation matrix inverted (the partial
correlation formula), the rank-regression t-test and Fisher's z interval (Marino et al. 2008)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from abm.analysis.sensitivity import PrccResult, SensitivityInputError, prcc


# -- PRCC --------------------------------------------------------------------------------------
def monotone_case(n: int = 400, seed: int = 2):
    """y = 3 x1 + x2 + 0 x3 + noise over a Latin hypercube; the ordering x1 > x2 > x3 = 0 is the construction [calc]."""
    rng = np.random.default_rng(seed)
    inputs = pd.DataFrame(stats.qmc.LatinHypercube(d=3, rng=rng).random(n), columns=["x1", "x2", "x3"])
    output = pd.Series(3 * inputs.x1 + inputs.x2 + 0 * inputs.x3 + rng.normal(0, 0.3, n), name="crossings")
    return inputs, output


def test_prcc_ordering_and_null_factor():
    inputs, output = monotone_case()
    result = prcc(inputs, output)
    assert isinstance(result, PrccResult)
    r = result.coefficient[0]
    assert r[0] > r[1] > abs(r[2])
    assert result.ci_low[0, 2] < 0 < result.ci_high[0, 2]
    assert result.p_value[0, 2] > 0.05
    assert result.p_value[0, 0] < 1e-10 and result.p_value[0, 1] < 1e-10
    assert result.df == 400 - 2 - 2


def test_prcc_matches_inverse_spearman_correlation_matrix():
    # Independent computation: with P the inverse of the Spearman correlation matrix of (inputs, output),
    # PRCC_j = -P_jy / sqrt(P_jj P_yy), the standard identity for partial correlations from the inverse
    # correlation (precision) matrix, applied to ranks [calc].
    inputs, output = monotone_case()
    result = prcc(inputs, output)
    rho = stats.spearmanr(np.column_stack([inputs, output])).statistic
    P = np.linalg.inv(rho)
    expected = -P[:3, 3] / np.sqrt(np.diag(P)[:3] * P[3, 3])
    np.testing.assert_allclose(result.coefficient[0], expected, rtol=0, atol=1e-10)


def test_prcc_p_value_is_the_rank_regression_t_test_and_interval_is_fisher_z():
    # Independent computation: the t-test of a partial correlation with df = n - 2 - (k - 1) is the
    # t-test of that factor's coefficient in the least-squares regression of rank(y) on all ranks [calc].
    inputs, output = monotone_case()
    result = prcc(inputs, output)
    n, k = inputs.shape
    design = np.column_stack([np.ones(n), stats.rankdata(inputs.to_numpy(), axis=0)])
    ry = stats.rankdata(output.to_numpy())
    beta, rss = np.linalg.lstsq(design, ry, rcond=None)[:2]
    df = n - k - 1
    se = np.sqrt(rss[0] / df * np.diag(np.linalg.inv(design.T @ design)))[1:]
    p_regression = 2 * stats.t.sf(np.abs(beta[1:] / se), df)
    np.testing.assert_allclose(result.p_value[0], p_regression, rtol=1e-8)

    # Fisher z with k - 1 factors held fixed: se = 1/sqrt(n - 3 - (k - 1)) [calc from the formula].
    z = np.arctanh(result.coefficient[0])
    half = stats.norm.ppf(0.975) / np.sqrt(n - 3 - (k - 1))
    np.testing.assert_allclose(result.ci_low[0], np.tanh(z - half), rtol=1e-12)
    np.testing.assert_allclose(result.ci_high[0], np.tanh(z + half), rtol=1e-12)


def test_prcc_is_rank_based_and_handles_several_outputs():
    inputs, output = monotone_case()
    base = prcc(inputs, output)
    # A monotone transform of a factor or the output leaves the ranks, hence PRCC, unchanged.
    stretched = inputs.assign(x1=np.exp(5 * inputs.x1))
    both = prcc(stretched, pd.DataFrame({"crossings": output**3, "detections": -output}))
    np.testing.assert_allclose(both.coefficient[0], base.coefficient[0], atol=1e-12)
    np.testing.assert_allclose(both.coefficient[1], -base.coefficient[0], atol=1e-12)
    frame = both.to_frame()
    assert list(frame.columns) == ["output", "factor", "prcc", "p_value", "ci_low", "ci_high"]
    assert len(frame) == 6
    text = both.summary()
    assert text.index("x1") < text.index("x3") and "detections:" in text


def test_prcc_rejects_unusable_inputs():
    inputs, output = monotone_case(n=40)
    with pytest.raises(SensitivityInputError, match="at least 6 runs"):
        prcc(inputs.head(5), output.head(5))
    with pytest.raises(SensitivityInputError, match="x3 is constant"):
        prcc(inputs.assign(x3=1.0), output)
    with pytest.raises(SensitivityInputError, match="determined by the other factors"):
        prcc(inputs.assign(x4=2 * inputs.x1), output)
    with pytest.raises(SensitivityInputError, match="missing"):
        prcc(inputs, output.where(output.index != 3))
