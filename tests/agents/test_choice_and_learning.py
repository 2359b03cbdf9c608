"""Choice and learning of concealment agents checked against published values and scipy.

Sources are named beside each check; see ../shared/REFERENCES.md.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special, stats

from abm.agents.behaviour import AdaptiveBehaviour, ReinforcementBehaviour, logit_probabilities
from abm.agents.concealment import ConcealmentAgent
from abm.model import PortModel
from abm.world import parse_world


def two_option_world(risk_a: float, risk_b: float, **adaptive: object) -> dict:
    """Two boarding points whose only risk is a known interdiction chance; nothing else differs.

    Vehicles are plentiful and roomy (no capacity interaction), the station finds
    nobody, and caught people always come back the next day.
    """
    learning = {"rationality": 1.0, "exploration": 0.0, "detection_cost": 5.0, "hazard_aversion": 0.0,
                "forgetting": 1.0, "rumour_delay_days": 1, "rumour_noise": 0.0, "rumour_weight": 1.0,
                "peer_weight": 0.0, "network_degree": 0}
    learning.update(adaptive)
    return {
        "name": "two options",
        "time_bands": {"all_day": [0, 24]},
        "vehicle_classes": [{"name": "lorry", "share": 1.0, "capacity": 500}],
        "traffic": {"vehicles_per_day": 240, "hourly_profile": [1] * 24},
        "methods": [{"name": "look", "service": {"dist": "deterministic", "mean": 0.1}, "detection": {"default": 0.0}}],
        "stations": [{"name": "gate", "method": "look", "lanes": 2, "selection": {"rule": "all"}}],
        "boarding_points": [
            {"name": "a", "before_station": "gate", "stops": {"lorry": {"share": 1.0}}, "interdiction": {"default": risk_a}},
            {"name": "b", "before_station": "gate", "stops": {"lorry": {"share": 1.0}}, "interdiction": {"default": risk_b}},
        ],
        "roster": {"teams": [{"name": "all", "hours": [0, 24], "lanes": {"gate": 2}}]},
        "adversary": {
            "arrivals_per_day": 40,
            "attempt_chance": 1.0,
            "return_delay_days": 1,
            "behaviour": "adaptive",
            "static": {"point_shares": {"a": 0.5, "b": 0.5}, "band_shares": {"all_day": 1.0}, "class_shares": {"lorry": 1.0}},
            "adaptive": learning,
        },
    }


# -- logit -------------------------------------------------------------------------------
def test_logit_matches_published_values_and_scipy_softmax() -> None:
    # lambda = 1, u = (1, 2, 3) -> (0.0900, 0.2447, 0.6652) [calc, REFERENCES.md "Choice and learning"]
    u = np.array([1.0, 2.0, 3.0])
    p = logit_probabilities(u, 1.0, np.ones(3, dtype=bool))
    np.testing.assert_allclose(p, [0.0900, 0.2447, 0.6652], atol=5e-5)
    # reference library: scipy.special.softmax
    for lam in (0.0, 0.5, 2.0, 10.0):
        np.testing.assert_allclose(logit_probabilities(u, lam, np.ones(3, dtype=bool)), special.softmax(lam * u))


def test_logit_excludes_invalid_options_and_mixes_exploration() -> None:
    u = np.array([1.0, 2.0, 3.0, 100.0])
    valid = np.array([True, True, True, False])
    p = logit_probabilities(u, 1.0, valid, exploration=0.1)
    assert p[3] == 0.0
    np.testing.assert_allclose(p[:3], 0.9 * special.softmax(u[:3]) + 0.1 / 3)
    # lambda = 0 is uniform over the valid options; a large lambda approaches best response
    np.testing.assert_allclose(logit_probabilities(u, 0.0, valid)[:3], 1 / 3)
    assert logit_probabilities(u, 50.0, valid)[2] > 0.999


# -- Beta-Bernoulli ----------------------------------------------------------------------
def _agent_with_beliefs(world: dict) -> tuple[PortModel, ConcealmentAgent, AdaptiveBehaviour]:
    model = PortModel(parse_world(world), seed=0)
    agent = ConcealmentAgent(model, 1, 0)
    assert isinstance(model.behaviour, AdaptiveBehaviour)
    return model, agent, model.behaviour


def test_beta_bernoulli_update_reproduces_the_bda3_example() -> None:
    # 437 of 980 with a uniform prior -> Beta(438, 544), mean 0.44603, SD 0.01585,
    # 95% interval 0.41507-0.47720 (Gelman et al., Bayesian Data Analysis 3rd ed., section 2.4)
    _, agent, behaviour = _agent_with_beliefs(two_option_world(0.2, 0.5, rumour_weight=0.0))
    for k in range(980):
        behaviour.learn(agent, 0, "detected" if k < 437 else "crossed", day=0)
    alpha, beta = behaviour.posterior(agent, 0)
    assert (alpha[0], beta[0]) == (438.0, 544.0)
    belief = stats.beta(alpha[0], beta[0])  # reference library: scipy.stats.beta
    assert belief.mean() == pytest.approx(0.44603, abs=5e-6)
    assert belief.std() == pytest.approx(0.01585, abs=5e-6)
    lo, hi = belief.interval(0.95)
    assert lo == pytest.approx(0.41507, abs=5e-5) and hi == pytest.approx(0.47720, abs=5e-5)
    assert behaviour.perceived_risk(agent, 0)[0] == pytest.approx(belief.mean())


def test_forgetting_of_one_is_plain_conjugate_updating_and_less_than_one_decays() -> None:
    rng = np.random.default_rng(7)
    outcomes = [(day, "detected" if rng.random() < 0.3 else "crossed") for day in range(60) for _ in range(5)]
    plain = _agent_with_beliefs(two_option_world(0.2, 0.5, rumour_weight=0.0, forgetting=1.0))
    decaying = _agent_with_beliefs(two_option_world(0.2, 0.5, rumour_weight=0.0, forgetting=0.9))
    for day, outcome in outcomes:
        for _, agent, behaviour in (plain, decaying):
            behaviour.learn(agent, 1, outcome, day)
    caught = sum(o == "detected" for _, o in outcomes)
    alpha, beta = plain[2].posterior(plain[1], 59)
    # Beta(1 + caught, 1 + crossed): the conjugate update (Gelman et al., BDA3 section 2.4)
    assert (alpha[1], beta[1]) == (1 + caught, 1 + len(outcomes) - caught)
    # with forgetting f, evidence from d days ago counts f**d
    weights = {day: 0.9 ** (59 - day) for day in range(60)}
    expected_alpha = 1 + sum(weights[d] for d, o in outcomes if o == "detected")
    alpha_d, _ = decaying[2].posterior(decaying[1], 59)
    assert alpha_d[1] == pytest.approx(expected_alpha)


# -- equilibrium ---------------------------------------------------------------------------
@pytest.mark.parametrize("rationality", [0.0, 0.5, 1.0])
def test_adaptive_population_converges_to_the_analytic_logit_shares(rationality: float) -> None:
    """With fixed, known risks the learnt risks approach them and choices approach the logit shares."""
    risk = np.array([0.2, 0.5])
    model = PortModel(parse_world(two_option_world(*risk, rationality=rationality)), seed=11)
    for _ in range(150):
        model.step()
    attempts = model.records.truth_tables()["attempts"]
    late = attempts[attempts["day"] >= 75]
    share_a = float((late["point"] == "a").mean())
    # logit shares of u = -cost * risk (REFERENCES.md "Logit / quantal response")
    expected = special.softmax(rationality * -5.0 * risk)[0]
    n = len(late)
    assert n > 3000
    # sampling error of a share of n choices (binomial), plus a small allowance for belief noise
    tolerance = 3.3 * np.sqrt(expected * (1 - expected) / n) + 0.02
    assert share_a == pytest.approx(expected, abs=tolerance), (share_a, expected, n)


# -- Roth-Erev -------------------------------------------------------------------------------
def test_roth_erev_update_follows_the_published_rule() -> None:
    # q_j <- (1 - phi) q_j + R (1 - e) for the chosen option, (1 - phi) q_k + R e / (K - 1) otherwise
    # (Erev & Roth 1998, American Economic Review 88:848-881, the "basic + experimentation + recency" model)
    world = two_option_world(0.2, 0.5)
    world["adversary"]["behaviour"] = "reinforcement"
    world["adversary"]["reinforcement"] = {"recency": 0.1, "experimentation": 0.2, "initial_propensity": 1.0}
    model = PortModel(parse_world(world), seed=0)
    behaviour = model.behaviour
    assert isinstance(behaviour, ReinforcementBehaviour)
    behaviour.end_of_day(0, np.array([0, 0, 1]), ["crossed", "detected", "crossed"], np.ones(3))
    q = np.array([1.0, 1.0])
    for option, reward in ((0, 1.0), (0, 0.0), (1, 1.0)):
        spread = np.full(2, reward * 0.2 / 1)
        spread[option] = reward * 0.8
        q = 0.9 * q + spread
    np.testing.assert_allclose(behaviour.propensity, q)


@pytest.mark.parametrize("behaviour", ["static", "adaptive", "reinforcement"])
def test_a_day_when_nobody_attempts_is_an_empty_choice(behaviour: str) -> None:
    # Found on a rail world whose few groups all rested one day: the reinforcement model failed to shape no rows.
    world = two_option_world(0.2, 0.5)
    world["adversary"]["behaviour"] = behaviour
    model = PortModel(parse_world(world), seed=0)
    chosen = model.behaviour.choose([], np.random.default_rng(0))
    assert np.asarray(chosen).shape == (0,)
