"""Static concealment agents: chosen options and group sizes follow the world's configured shares.

Under the ``static`` behaviour each attempt picks boarding point x time band x
vehicle class x concealment depth with probability point_share x band_share x
class_share x depth_share (without depth shares, every attempt at the first level),
independently of outcomes, and each new group's size is drawn from
``group_size``. Both are checked over many draws with Pearson's chi-square
goodness-of-fit test, ``scipy.stats.chisquare`` (SciPy's reference
implementation), at the 0.1% level with fixed seeds.
"""

from __future__ import annotations

import copy
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np
import pandas as pd
import pytest
import yaml
from scipy.stats import chisquare

from abm.experiment.single import simulate
from abm.model import PortModel
from abm.world import parse_world

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
DEMO_DATA: dict[str, Any] = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
ALPHA = 1e-3


def many_attempts_data() -> dict[str, Any]:
    """The demo world with many groups attempting every day and uneven group sizes."""
    data = copy.deepcopy(DEMO_DATA)
    adv = data["adversary"]
    adv["behaviour"] = "static"  # whatever the demo ships with, this file tests the static model
    adv["arrivals_per_day"] = 700
    adv["attempt_chance"] = 1.0
    adv["group_size"] = {1: 0.4, 2: 0.25, 3: 0.15, 4: 0.1, 5: 0.06, 7: 0.04}
    adv["static"]["depth_shares"] = {"normal": 0.7, "deep": 0.3}
    # so many detections would swamp the demo's 40-minute manual search; a quicker search keeps the
    # secondary station within capacity (choice shares do not depend on it)
    search = next(m for m in data["methods"] if m["name"] == "manual_search")
    search["service"] = {"dist": "gamma", "mean": 4.0, "cv": 0.5}
    return data


@pytest.fixture(scope="module")
def tables() -> dict[str, Any]:
    world = parse_world(many_attempts_data(), "many attempts")
    model = simulate(world, 20, seed=17)
    truth = model.records.truth_tables()
    return {"world": world, "attempts": truth["attempts"], "arrivals": truth["arrivals"]}


def expected_option_shares(world) -> pd.Series:
    static = world.adversary.static
    depths = world.depth_names
    index = pd.MultiIndex.from_product(
        [world.point_names, world.band_names, world.class_names, depths], names=["point", "band", "vehicle_class", "depth"]
    )
    shares = [
        static.point_shares.get(p, 0.0) * static.band_shares.get(b, 0.0) * static.class_shares.get(c, 0.0)
        * static.depth_shares.get(d, 0.0)
        for p, b, c, d in index
    ]
    return pd.Series(shares, index=index)


def test_chosen_options_match_the_product_of_point_band_class_and_depth_shares(tables):
    world, attempts = tables["world"], tables["attempts"]
    expected = expected_option_shares(world)
    assert abs(expected.sum() - 1.0) < 1e-12
    counts = attempts.groupby(["point", "band", "vehicle_class", "depth"]).size()
    counts.index = counts.index.set_names(expected.index.names)
    counts = counts.reindex(expected.index, fill_value=0)
    # options with zero probability (tankers are in no class share) are never chosen
    assert (counts[expected == 0] == 0).all()
    positive = expected > 0
    n = int(counts.sum())
    f_exp = expected[positive].to_numpy() * n
    assert n > 20_000
    assert f_exp.min() >= 5, "too few attempts for the chi-square approximation"
    stat, pvalue = chisquare(counts[positive].to_numpy(), f_exp)
    assert pvalue > ALPHA, f"option shares differ from the configured product (chi2={stat:.1f}, p={pvalue:.2g})"


@pytest.mark.parametrize(
    "column,shares_of",
    [("point", "point_shares"), ("band", "band_shares"), ("vehicle_class", "class_shares"), ("depth", "depth_shares")],
)
def test_each_margin_matches_its_configured_share(tables, column, shares_of):
    world, attempts = tables["world"], tables["attempts"]
    shares = getattr(world.adversary.static, shares_of)
    names = [k for k, v in shares.items() if v > 0]
    counts = attempts[column].value_counts().reindex(names, fill_value=0)
    assert int(counts.sum()) == len(attempts)
    stat, pvalue = chisquare(counts.to_numpy(), np.array([shares[k] for k in names]) * len(attempts))
    assert pvalue > ALPHA, f"{column} shares off (chi2={stat:.1f}, p={pvalue:.2g})"


def test_group_sizes_match_the_configured_shares(tables):
    world, arrivals = tables["world"], tables["arrivals"]
    shares = world.adversary.group_size
    sizes = sorted(shares)
    counts = arrivals["persons"].value_counts().reindex(sizes, fill_value=0)
    assert set(arrivals["persons"]) <= set(sizes), "a group size that is not configured appeared"
    n = len(arrivals)
    assert n > 4000 and int(counts.sum()) == n
    stat, pvalue = chisquare(counts.to_numpy(), np.array([shares[s] for s in sizes]) * n)
    assert pvalue > ALPHA, f"group sizes off (chi2={stat:.1f}, p={pvalue:.2g})"


def test_static_behaviour_probabilities_are_the_normalised_product():
    world = parse_world(many_attempts_data(), "many attempts")
    model = PortModel(world, seed=0)
    behaviour, options = model.behaviour, model.options
    assert behaviour.name == "static"
    expected = expected_option_shares(world).to_numpy()
    np.testing.assert_allclose(behaviour.probabilities, expected, rtol=0, atol=1e-12)
    # flat option indices unravel to the same (point, band, class, depth) order
    point, band, vclass, depth = options.unravel(np.arange(options.size))
    depths = world.depth_names
    names = [
        (world.point_names[p], world.band_names[b], world.class_names[c], depths[d])
        for p, b, c, d in zip(point, band, vclass, depth, strict=True)
    ]
    assert names == list(expected_option_shares(world).index)


def test_without_depth_shares_every_attempt_hides_at_the_first_level():
    data = many_attempts_data()
    del data["adversary"]["static"]["depth_shares"]
    data["adversary"]["arrivals_per_day"] = 50
    attempts = simulate(parse_world(data, "no depth shares"), 5, seed=3).records.truth_tables()["attempts"]
    assert len(attempts) > 100
    assert set(attempts["depth"]) == {"normal"}


def test_static_behaviour_draws_match_its_probabilities():
    """The inverse-CDF draw alone, over many draws, without the rest of the model."""
    world = parse_world(many_attempts_data(), "many attempts")
    model = PortModel(world, seed=0)
    behaviour, options = model.behaviour, model.options
    rng = np.random.default_rng(2024)
    n = 60_000
    agent = SimpleNamespace(size=1, memory=None, unique_id=-1)  # static choice does not look at the agent
    draws = behaviour.choose([agent] * n, rng)
    counts = np.bincount(draws, minlength=options.size)
    p = behaviour.probabilities
    assert (counts[p == 0] == 0).all()
    stat, pvalue = chisquare(counts[p > 0], p[p > 0] * n)
    assert pvalue > ALPHA, f"chi2={stat:.1f}, p={pvalue:.2g}"
