"""People react to checking: displacement direction, and both sides adapting without losing anyone."""

from __future__ import annotations

import copy

import numpy as np
import pytest

from abm.model import PortModel
from abm.world import load_world, parse_world, read_yaml_mapping
from abm.world.paths import set_path
from tests.agents.test_choice_and_learning import two_option_world

DEMO = "worlds/kestrel_quay/world.yaml"


def route_world(behaviour: str, upstream_fraction: float) -> dict:
    """Point 'upstream' lies before both stations, point 'inner' only before the second one."""
    world = two_option_world(0.0, 0.0, rationality=1.0, exploration=0.02)
    world["methods"] = [
        {"name": "scan", "service": {"dist": "deterministic", "mean": 0.2}, "detection": {"default": 0.8}}
    ]
    world["stations"] = [
        {"name": "outer", "method": "scan", "lanes": 2, "selection": {"rule": "fraction", "fraction": upstream_fraction}},
        {"name": "inner", "method": "scan", "lanes": 2, "selection": {"rule": "fraction", "fraction": 0.2}},
    ]
    world["boarding_points"] = [
        {"name": "upstream", "before_station": "outer", "stops": {"lorry": {"share": 1.0}}},
        {"name": "inside", "before_station": "inner", "stops": {"lorry": {"share": 1.0}}},
    ]
    world["roster"] = {"teams": [{"name": "all", "hours": [0, 24], "lanes": {"outer": 2, "inner": 2}}]}
    world["adversary"]["behaviour"] = behaviour
    world["adversary"]["static"]["point_shares"] = {"upstream": 0.5, "inside": 0.5}
    return world


def upstream_share(behaviour: str, fraction: float, days: int = 120, warmup: int = 60) -> tuple[float, int]:
    model = PortModel(parse_world(route_world(behaviour, fraction)), seed=5)  # same seed: common random numbers
    for _ in range(days):
        model.step()
    attempts = model.records.truth_tables()["attempts"]
    late = attempts[attempts["day"] >= warmup]
    return float((late["point"] == "upstream").mean()), len(late)


def test_more_checks_downstream_of_a_point_move_adaptive_attempts_away_from_it() -> None:
    before, _ = upstream_share("adaptive", 0.1)
    after, _ = upstream_share("adaptive", 0.9)
    # risk at 'upstream' rises from about 0.23 to 0.77 while 'inside' stays at 0.16:
    # the logit shares fall from about 0.42 to about 0.05, so demand a drop of at least 0.2
    assert after < before - 0.2


def test_static_attempts_do_not_react_to_checking() -> None:
    before, n_before = upstream_share("static", 0.1)
    after, n_after = upstream_share("static", 0.9)
    # two-proportion z-test at the 0.1% level (normal approximation to the binomial)
    pooled = (before * n_before + after * n_after) / (n_before + n_after)
    se = np.sqrt(pooled * (1 - pooled) * (1 / n_before + 1 / n_after))
    assert abs(after - before) < 3.3 * se


def depth_world(fraction: float, deep_hazard: float, hazard_aversion: float) -> dict:
    """One point and one station; hiding deep cuts the check's detection chance from 0.8 to 0.08."""
    world = two_option_world(0.0, 0.0, rationality=1.0, exploration=0.02, hazard_aversion=hazard_aversion)
    world["methods"] = [{"name": "scan", "service": {"dist": "deterministic", "mean": 0.2},
                         "detection": {"default": 0.8}, "depth_factor": {"deep": 0.1}}]  # fmt: skip
    world["stations"] = [{"name": "gate", "method": "scan", "lanes": 2, "selection": {"rule": "fraction", "fraction": fraction}}]
    world["boarding_points"] = [{"name": "a", "before_station": "gate", "stops": {"lorry": {"share": 1.0}}}]
    world["adversary"]["static"]["point_shares"] = {"a": 1.0}
    world["depths"] = [{"name": "normal"}, {"name": "deep", "hazard": deep_hazard}]
    return world


def deep_share(world: dict, days: int = 120, warmup: int = 60) -> float:
    model = PortModel(parse_world(world), seed=5)  # same seed: common random numbers
    for _ in range(days):
        model.step()
    attempts = model.records.truth_tables()["attempts"]
    late = attempts[attempts["day"] >= warmup]
    assert len(late) > 1000
    return float((late["depth"] == "deep").mean())


def test_adaptive_people_hide_deep_when_it_is_safer_from_checks_and_no_more_dangerous() -> None:
    # perceived risk about 0.8 at the normal depth and 0.08 deep, the same hazard: the logit
    # (lambda 1, detection cost 5) puts about 0.97 of attempts deep
    assert deep_share(depth_world(1.0, deep_hazard=0.0, hazard_aversion=1.0)) > 0.8
    # deep now costs 10 x 0.8 in utility, more than the 3.6 it saves: about 0.01 deep
    assert deep_share(depth_world(1.0, deep_hazard=0.8, hazard_aversion=10.0)) < 0.2


def test_more_checking_pushes_adaptive_people_to_hide_deeper_and_in_more_danger() -> None:
    """The safety cost of displacement: checks that find people make hiding deep, and dangerous, worth it."""
    light, heavy = (depth_world(f, deep_hazard=0.3, hazard_aversion=5.0) for f in (0.1, 1.0))
    # utility of deep minus normal: 5 x 0.72 x fraction - 5 x 0.3 = -1.14 at 0.1, +2.1 at 1.0:
    # logit shares of about 0.24 and 0.89 deep
    assert deep_share(heavy) > deep_share(light) + 0.3


@pytest.mark.parametrize("behaviour", ["adaptive", "reinforcement"])
def test_reactive_command_and_adaptive_people_conserve_everyone_every_day(behaviour: str) -> None:
    """Both sides adapting: a long run where nobody is lost or counted twice on any day."""
    data = set_path(read_yaml_mapping(DEMO), "roster.command", "reactive")
    data = set_path(data, "adversary.behaviour", behaviour)
    model = PortModel(parse_world(data), seed=3)
    arrived = 0
    exited = 0
    for day in range(240):
        model.step()
        daily = model.records.daily_table().iloc[-1]
        truth = model.records.truth_tables()
        today = truth["attempts"][truth["attempts"]["day"] == day]
        assert daily["truth_attempts"] == today["persons"].sum()
        by_outcome = today.groupby("outcome")["persons"].sum()
        assert by_outcome.sum() == daily["truth_attempts"]
        arrived = int(truth["arrivals"]["persons"].sum())
        exited = int(truth["exits"]["persons"].sum())
        assert arrived == exited + model.persons_in_system()
        assert truth["exits"]["agent_id"].is_unique
    assert exited > 0 and arrived > exited


def test_reactive_command_keeps_flexible_lane_hours_and_moves_them() -> None:
    data = set_path(read_yaml_mapping(DEMO), "roster.command", "reactive")
    model = PortModel(parse_world(data), seed=3)
    fixed = PortModel(load_world(DEMO), seed=3)
    lanes, rostered = [], []
    for _ in range(60):
        lanes.append(model.command.staffing(model, model.day).lanes.copy())
        rostered.append(fixed.command.staffing(fixed, fixed.day).lanes.copy())
        model.step()
        fixed.step()
    # the flexible total is constant unless a station's physical lanes cap it
    assert {int(x.sum()) for x in lanes} <= {int(rostered[0].sum())} | set(range(int(rostered[0].sum())))
    assert max(int(x.sum()) for x in lanes) == int(rostered[0].sum())
    assert any((x != rostered[0]).any() for x in lanes[10:]), "reactive command never moved anything"
    for x in lanes:
        assert (x <= model.layout.station_lanes[:, None]).all()


def test_randomised_command_draws_postings_with_their_weights() -> None:
    data = set_path(read_yaml_mapping(DEMO), "roster.command", "randomised")
    model = PortModel(parse_world(data), seed=9)
    draws = []
    for day in range(400):
        lanes = model.command.staffing(model, day).lanes
        draws.append(int(lanes[model.world.station_names.index("gate_imaging"), 4]))
    # posting 3 (weight 0.2) is the only one adding an imaging lane at 04:00
    share = np.mean(np.array(draws) > 3)
    assert share == pytest.approx(0.2, abs=3.3 * np.sqrt(0.2 * 0.8 / 400))


def test_intervention_day_changes_policy_from_that_day_only() -> None:
    data = copy.deepcopy(read_yaml_mapping(DEMO))
    data["interventions"] = [{"day": 5, "name": "yard closed", "set": {"boarding_points.holding_yard.interdiction.default": 1.0}}]
    data = set_path(data, "adversary.behaviour", "static")
    model = PortModel(parse_world(data), seed=2)
    for _ in range(10):
        model.step()
    attempts = model.records.truth_tables()["attempts"]
    yard = attempts[attempts["point"] == "holding_yard"]
    assert (yard[yard["day"] >= 5]["outcome"] == "interdicted").all()
    assert (yard[yard["day"] < 5]["outcome"] != "interdicted").any()
    assert model.policy_name == "yard closed"
