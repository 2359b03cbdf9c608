"""PRIM scenario discovery (Friedman & Fisher 1999) on synthetic data with a known box."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from abm.analysis.discovery import (
    DEFAULT_MIN_MASS,
    DiscoveryInputError,
    PrimBox,
    PrimResult,
    boxes_summary,
    prim,
)

# The planted box: y = 1 where x1 > 0.7 and x2 < 0.3, over 2000 uniform points in [0, 1]^4,
# with 3% of labels flipped. The truth is the construction [calc].
TRUE_X1_LOW, TRUE_X2_HIGH = 0.7, 0.3


def planted(seed: int = 7, noise: float = 0.03) -> tuple[pd.DataFrame, pd.Series]:
    rng = np.random.default_rng(seed)
    inputs = pd.DataFrame(rng.uniform(size=(2000, 4)), columns=["x1", "x2", "x3", "x4"])
    inside = (inputs.x1 > TRUE_X1_LOW) & (inputs.x2 < TRUE_X2_HIGH)
    flip = rng.uniform(size=len(inputs)) < noise
    return inputs, pd.Series(np.where(flip, ~inside, inside).astype(int), name="exceeds")


def hand_measures(box: PrimBox, inputs: pd.DataFrame, y: np.ndarray) -> tuple[float, float, float]:
    """Coverage, density and mass counted directly from the box's limits."""
    inside = np.ones(len(inputs), dtype=bool)
    for name, low, high in box.limits:
        inside &= (inputs[name] >= low).to_numpy() & (inputs[name] <= high).to_numpy()
    interest = y == 1
    return (interest & inside).sum() / interest.sum(), (interest & inside).sum() / inside.sum(), inside.mean()


def test_finds_the_planted_box():
    inputs, y = planted()
    result = prim(inputs, y, outcome="crossings exceed 40")
    assert isinstance(result, PrimResult)
    limits = {name: (low, high) for name, low, high in result.box.limits}
    assert abs(limits["x1"][0] - TRUE_X1_LOW) <= 0.05 and limits["x1"][1] >= 0.95
    assert abs(limits["x2"][1] - TRUE_X2_HIGH) <= 0.05 and limits["x2"][0] <= 0.05
    for free in ("x3", "x4"):  # unrestricted, or barely (at most 5% of the range shaved off either end)
        low, high = limits.get(free, (-np.inf, np.inf))
        assert low <= 0.05 and high >= 0.95, free

    coverage, density, mass = hand_measures(result.box, inputs, y.to_numpy())
    assert result.coverage == pytest.approx(coverage, abs=1e-12)
    assert result.density == pytest.approx(density, abs=1e-12)
    assert result.mass == pytest.approx(mass, abs=1e-12)
    assert result.runs == round(mass * 2000) and result.total_runs == 2000
    assert result.base_density == pytest.approx(y.mean())
    assert result.density > 0.9 > 5 * result.base_density
    assert np.array_equal(result.box.contains(inputs), hand_inside(result.box, inputs))

    frame = result.to_frame()
    assert list(frame.columns) == ["factor", "low", "high"]
    assert set(frame.factor) == set(result.box.restricted)


def hand_inside(box: PrimBox, inputs: pd.DataFrame) -> np.ndarray:
    mask = np.ones(len(inputs), dtype=bool)
    for name, low, high in box.limits:
        mask &= inputs[name].between(low, high).to_numpy()
    return mask


def test_peeling_trajectory_shrinks_to_the_minimum_mass():
    inputs, y = planted()
    result = prim(inputs, y)
    traj = result.trajectory
    assert traj.loc[0, "mass"] == 1.0 and traj.loc[0, "coverage"] == 1.0 and traj.loc[0, "peeled"] == ""
    assert (np.diff(traj.mass) < 0).all()  # every step removes runs
    assert (np.diff(traj.coverage) <= 0).all()  # and so can only lose runs of interest
    # Peeling stops at the minimum mass: the last box holds at least 5% of runs, and one more shave of
    # about alpha would go below it.
    assert traj.mass.iloc[-1] >= DEFAULT_MIN_MASS > traj.mass.iloc[-1] * (1 - result.alpha) - 1 / 2000
    # Each step shaves about alpha (5%) of the box: a whole number of runs, at least one.
    removed = -np.diff(traj.runs)
    assert (removed == np.maximum(1, (0.05 * traj.runs.iloc[:-1]).astype(int))).all()
    # The recorded measures are those of the recorded limits.
    for step in (0, 10, 30, len(traj) - 1):
        coverage, density, mass = hand_measures(result.box_at(step), inputs, y.to_numpy())
        assert traj.loc[step, ["coverage", "density", "mass"]].tolist() == pytest.approx([coverage, density, mass])


def test_choosing_by_minimum_density_and_trade_off():
    inputs, y = planted()
    result = prim(inputs, y, paste=False)
    traj = result.trajectory
    dense = result.select(min_density=0.9, paste=False)
    first = int(np.flatnonzero(traj.density >= 0.9)[0])  # coverage only falls, so the first such box covers most
    assert dense.step == first and dense.density >= 0.9
    assert dense.coverage == pytest.approx(traj.loc[first, "coverage"])
    # beta < 1 weighs density more: a later (denser, smaller) box or the same one.
    strict = result.select(beta=0.3, paste=False)
    assert strict.step >= result.step and strict.density >= result.density
    with pytest.raises(DiscoveryInputError, match="no box on the trajectory reaches 1.5"):
        result.select(min_density=1.5)
    assert result.select(step=0).box.limits == ()


def test_pasting_grows_an_overshot_box_while_the_mean_rises():
    inputs, y = planted()
    result = prim(inputs, y)
    last = len(result.trajectory) - 1
    peeled = result.box_at(last)  # peeled past the planted box: x1 is cut to about 0.82
    pasted = result.select(step=last)
    assert len(pasted.pasting) > 0
    assert (np.diff(pasted.pasting.density) > 0).all()
    assert pasted.pasting.density.iloc[0] > result.trajectory.density.iloc[last]
    assert pasted.density == pytest.approx(pasted.pasting.density.iloc[-1])
    assert np.all(pasted.box.contains(inputs)[peeled.contains(inputs)])  # the pasted box holds the peeled one
    coverage, density, mass = hand_measures(pasted.box, inputs, y.to_numpy())
    assert (pasted.coverage, pasted.density, pasted.mass) == pytest.approx((coverage, density, mass))
    assert dict((n, lo) for n, lo, _ in pasted.box.limits)["x1"] < dict((n, lo) for n, lo, _ in peeled.limits)["x1"]


def test_whole_number_factor_with_few_levels():
    # y = 1 exactly where level == 2 [calc]: shaving 5% of a three-level factor would remove nothing,
    # so a shave takes a whole level.
    rng = np.random.default_rng(3)
    inputs = pd.DataFrame({"level": rng.integers(0, 3, 600), "u": rng.uniform(size=600)})
    result = prim(inputs, (inputs.level == 2).astype(int))
    assert result.box.limits == (("level", 2.0, np.inf),)
    assert result.density == 1.0 and result.coverage == 1.0


def test_continuous_output():
    inputs, _ = planted()
    rng = np.random.default_rng(9)
    inside = (inputs.x1 > TRUE_X1_LOW) & (inputs.x2 < TRUE_X2_HIGH)
    crossings = pd.Series(np.where(inside, 10.0, 1.0) + rng.exponential(1.0, len(inputs)), name="crossings")
    result = prim(inputs, crossings)
    assert not result.binary
    limits = {name: (low, high) for name, low, high in result.box.limits}
    assert abs(limits["x1"][0] - TRUE_X1_LOW) <= 0.05 and abs(limits["x2"][1] - TRUE_X2_HIGH) <= 0.05
    mask = result.box.contains(inputs)
    assert result.density == pytest.approx(crossings[mask].mean())
    assert result.coverage == pytest.approx(crossings[mask].sum() / crossings.sum())
    assert result.sentence().startswith(f"The mean of crossings is {result.density:.3g} in runs where x1 ≥ ")


def test_boxes_summary_sentences():
    inputs, y = planted()
    inputs = inputs.rename(columns={"x1": "rationality", "x2": "imaging_fraction"})
    result = prim(inputs, y, outcome="crossings exceed 40")
    low = dict((n, lo) for n, lo, _ in result.box.limits)["rationality"]
    high = dict((n, hi) for n, _, hi in result.box.limits)["imaging_fraction"]
    (sentence,) = boxes_summary(result)
    assert sentence == (
        f"Crossings exceed 40 in {result.density:.0%} of runs where rationality ≥ {low:.3g} and "
        f"imaging fraction ≤ {high:.3g} (against {y.mean():.0%} over all runs); the box holds "
        f"{result.coverage:.0%} of such runs and {result.mass:.0%} of all runs."
    )
    labelled = boxes_summary([result, result.select(step=0)], labels={"rationality": "group rationality"}, digits=2)
    assert f"group rationality ≥ {low:.2g}" in labelled[0]
    assert "over all runs (no factor restricts the box)" in labelled[1]
    assert PrimBox((("a", 1.0, 4.0), ("b", -np.inf, 0.25))).describe() == "1 ≤ a ≤ 4 and b ≤ 0.25"
    text = result.summary()
    assert "rationality ≥" in text and "coverage" in text and "peeling step" in text


def test_rejects_unusable_inputs():
    inputs, y = planted()
    with pytest.raises(DiscoveryInputError, match="port not numeric"):
        prim(inputs.assign(port=["harbour_a"] * len(inputs)), y)
    with pytest.raises(DiscoveryInputError, match="non-negative"):
        prim(inputs, y - 0.5)
    with pytest.raises(DiscoveryInputError, match="alpha"):
        prim(inputs, y, alpha=0.6)
    with pytest.raises(DiscoveryInputError, match="min_mass"):
        prim(inputs, y, min_mass=0)
    with pytest.raises(DiscoveryInputError, match="one value per input row"):
        prim(inputs, y.head(10))
    with pytest.raises(DiscoveryInputError, match="missing"):
        prim(inputs.assign(x3=inputs.x3.mask(inputs.index == 5)), y)
