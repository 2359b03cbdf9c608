"""Designs and seeds: factorial, one-at-a-time, Latin hypercube and Sobol points; common random numbers."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np

from abm.experiment.design import crn_seeds, load_plan
from abm.world import parse_world

from .helpers import ROOT, experiment

LHS_EXAMPLE = ROOT / "worlds" / "kestrel_quay" / "experiment_lhs.yaml"


def test_crn_seeds_follow_the_documented_derivation() -> None:
    # SeedSequence(root).spawn(R)[r].generate_state(1) -> int, as the experiment files promise.
    expected = [int(s.generate_state(1)[0]) for s in np.random.SeedSequence(11).spawn(4)]
    assert list(crn_seeds(11, 4)) == expected
    assert len(set(expected)) == 4
    assert crn_seeds(11, 2) == crn_seeds(11, 4)[:2]  # more replications keep the first ones' seeds


def test_every_point_of_a_replication_shares_its_seed(make_experiment: Callable[..., Path]) -> None:
    plan = load_plan(make_experiment(experiment(replications=3)))
    runs = list(plan.runs())
    assert len(runs) == plan.total_runs == 9
    for replication in range(3):
        assert {r.seed for r in runs if r.replication == replication} == {plan.seeds[replication]}
    assert [r.run_id for r in runs] == sorted(r.run_id for r in runs)
    assert runs[4].run_id == "p001-r01"


def test_full_factorial_crosses_levels_and_pairs_each_point_with_its_baseline(
    make_experiment: Callable[..., Path],
) -> None:
    factors = [
        {
            "name": "policy",
            "baseline": "current",
            "levels": [
                {"name": "current", "set": {}},
                {"name": "more", "set": {"stations.gate_imaging.selection.fraction": 0.4}},
            ],
        },
        {"path": "adversary.attempt_chance", "levels": [0.3, 0.6, 0.9]},
    ]
    plan = load_plan(make_experiment(experiment(factors=factors)))
    assert [p.values["policy"] for p in plan.points] == ["current"] * 3 + ["more"] * 3
    assert [p.values["adversary.attempt_chance"] for p in plan.points] == [0.3, 0.6, 0.9] * 2
    # "more" at attempt chance 0.6 is compared with "current" at 0.6, and so on
    assert [p.compare_to for p in plan.points] == [None, None, None, 0, 1, 2]
    world = parse_world(plan.world_for(4))
    assert world.stations[0].selection.fraction == 0.4 and world.adversary.attempt_chance == 0.6


def test_bundle_changes_several_paths_and_list_items_by_name_or_index(make_experiment: Callable[..., Path]) -> None:
    factors = [
        {
            "name": "policy",
            "levels": [
                {"name": "current", "set": {}},
                {"name": "surge", "set": {"roster.teams.night_shift.lanes.gate_imaging": 4, "stations[1].lanes": 5}},
            ],
        }
    ]
    plan = load_plan(make_experiment(experiment(factors=factors)))
    base, surge = parse_world(plan.world_for(0)), parse_world(plan.world_for(1))
    assert base.roster.teams[1].lanes["gate_imaging"] == 3 and surge.roster.teams[1].lanes["gate_imaging"] == 4
    assert base.stations[1].lanes == 4 and surge.stations[1].lanes == 5
    assert plan.points[1].compare_to is None  # no baseline designated, no paired comparison


def test_one_at_a_time_moves_one_factor_from_the_centre(make_experiment: Callable[..., Path]) -> None:
    factors = [
        {"path": "adversary.attempt_chance", "levels": [0.3, 0.5, 0.7], "baseline": 0.5},
        {"path": "stations.gate_imaging.selection.fraction", "levels": [0.2, 0.4]},
    ]
    plan = load_plan(make_experiment(experiment(design="one_at_a_time", factors=factors)))
    chance, fraction = "adversary.attempt_chance", "stations.gate_imaging.selection.fraction"
    values = [(p.values[chance], p.values[fraction]) for p in plan.points]
    assert values == [(0.5, 0.2), (0.3, 0.2), (0.7, 0.2), (0.5, 0.4)]
    assert [p.compare_to for p in plan.points] == [None, 0, 0, 0]


def test_latin_hypercube_puts_one_point_in_each_stratum_of_every_range() -> None:
    plan = load_plan(LHS_EXAMPLE)
    n = len(plan.points)
    assert n == plan.spec.samples
    for factor in plan.factors:
        x = np.array([p.values[factor.label] for p in plan.points], dtype=float)
        assert factor.low <= x.min() and x.max() <= factor.high
        if factor.integer:
            # whole-number ranges are the stratified unit coordinate floored onto the range's values:
            # each value spans more than two whole strata here, so each comes up at least twice
            assert np.array_equal(x, np.round(x))
            counts = np.bincount(x.astype(int) - factor.low, minlength=factor.high - factor.low + 1)
            assert counts.min() >= 2 and counts.sum() == n
        else:
            strata = np.floor((x - factor.low) / (factor.high - factor.low) * n).astype(int)
            assert sorted(strata) == list(range(n))


def test_sampled_designs_are_seeded_from_the_root_seed(make_experiment: Callable[..., Path]) -> None:
    ranges = [
        {"path": "adversary.attempt_chance", "range": [0.2, 0.8]},
        {"path": "adversary.give_up", "range": [0.0, 0.2]},
    ]
    first = load_plan(make_experiment(experiment(design="sobol", samples=8, factors=ranges), "a.yaml"))
    again = load_plan(make_experiment(experiment(design="sobol", samples=8, factors=ranges), "b.yaml"))
    other = load_plan(make_experiment(experiment(design="sobol", samples=8, seed=12, factors=ranges), "c.yaml"))
    assert [p.values for p in first.points] == [p.values for p in again.points]
    assert [p.values for p in first.points] != [p.values for p in other.points]
    # a scrambled Sobol' set of 2^m points is a net: each 1-D projection has one point per 1/2^m stratum
    for factor in first.factors:
        x = np.array([p.values[factor.label] for p in first.points])
        assert sorted(np.floor((x - factor.low) / (factor.high - factor.low) * 8).astype(int)) == list(range(8))
