"""Policy search: a reference world whose best policy is known by hand, toy evaluators, and file checks.

The reference world (worlds/reference/two_station_budget) has two stations in route order that every
person passes: brief_lane checks a lorry with chance f_B in 1 minute and finds people with chance 0.5;
thorough_bay checks with chance f_A in 6 minutes and finds them with chance 0.9. Selection and detection
are independent draws, nobody is interdicted, and each person attempts once (a person found leaves), so

    P(cross) = (1 - 0.9 f_A)(1 - 0.5 f_B).

The budget is 1.5 check minutes per lorry: 6 f_A + f_B <= 1.5, with 0 <= f_A, f_B <= 1. log P(cross)
is a sum of terms log(1 - p f), each concave in f, so its minimum over the budget polygon lies at a
vertex. The vertices are (f_A, f_B) = (0, 0), (0.25, 0), (1/12, 1) and (0, 1), with P(cross) = 1,
0.775, 0.925 x 0.5 = 0.4625 and 0.5: the optimum is f_B = 1, f_A = 1/12 - brief checks of every lorry,
and thorough checks of the share the rest of the budget pays for. (A minute of brief checking finds
0.5 / 1 = 0.5 people per person-pass checked, a minute of thorough checking 0.9 / 6 = 0.15.) [calc]

Runs are tiny (400 lorries a day, 1 + 14 days), so a search takes seconds.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from abm.analysis.frontier import frontier
from abm.analysis.policy_search import (
    Allocation,
    Constraint,
    OptimisationFileError,
    Problem,
    SearchSettings,
    Variable,
    candidate_id,
    describe_optimisation,
    load_optimisation,
    run_optimisation,
    search_policy,
)
from abm.cli import EXIT_INPUT, EXIT_OK, main
from abm.experiment.executors import ProcessExecutor
from abm.experiment.worker import is_complete

ROOT = Path(__file__).resolve().parents[2]
BUDGET_WORLD = ROOT / "worlds" / "reference" / "two_station_budget" / "world.yaml"
BRIEF, THOROUGH = "stations.brief_lane.selection.fraction", "stations.thorough_bay.selection.fraction"
F_A, F_B, P_CROSS = 1 / 12, 1.0, 0.4625
STAFF_HOURS = 4 * 24 * 14  # four lanes round the clock for the 14 summarised days

BUDGET_SEARCH = {
    "kind": "optimisation",
    "name": "two stations under a budget (test)",
    "world": str(BUDGET_WORLD),
    "days": 14,
    "warmup_days": 1,
    "replications": 2,
    "seed": 7,
    "objective": {"figure": "crossings", "sense": "minimise"},
    "allocations": [
        {
            "name": "check_minutes_per_lorry",
            "total": 1.5,
            "paths": [{"path": BRIEF, "weight": 1.0, "max": 1.0}, {"path": THOROUGH, "weight": 6.0, "max": 1.0}],
        }
    ],
    "constraints": [
        {"figure": "time_in_port_p95_min", "max": 15},
        {"figure": "staff_hours", "max": STAFF_HOURS},
    ],
    "search": {"popsize": 6, "maxiter": 6},
    "selection": {"top": 3, "replications": 8},
}


def write(path: Path, data) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def executor():
    with ProcessExecutor(2) as pool:
        yield pool


def test_the_search_finds_the_known_optimum_and_it_holds_on_fresh_seeds(tmp_path, executor):
    path = write(tmp_path / "optimise.yaml", BUDGET_SEARCH)
    result = run_optimisation(load_optimisation(path), tmp_path / "out", executor)
    # The allocation spends the budget on brief checks first (share x of 1.5 minutes, capped at f_B = 1),
    # so every x >= 2/3 decodes to the optimum exactly; the search must find that region.
    assert result.best_changes[BRIEF] == pytest.approx(F_B, abs=0.02)
    assert result.best_changes[THOROUGH] == pytest.approx(F_A, abs=0.005)
    best = result.selection.iloc[0]
    assert best["candidate"] == result.best and best["verdict"] == "best"
    assert best["status:time_in_port_p95_min"] == "met" and best["status:staff_hours"] == "met"
    assert best["staff_hours_mean"] == STAFF_HOURS
    # On the search's seeds the best policy's crossings per attempt are close to P(cross) = 0.4625.
    row = result.history.set_index("candidate").loc[result.best]
    assert row["crossings"] / row["attempts"] == pytest.approx(P_CROSS, abs=0.03)
    # Runner-ups on the same fresh seeds are never better than the incumbent.
    assert (result.selection["difference"].iloc[1:] >= 0).all()
    assert (tmp_path / "out" / "frontier.png").is_file() and (tmp_path / "out" / "selection.parquet").is_file()
    assert "Best policy" in result.summary()

    # Resumed in the same folder, the search replays through the stored runs and runs nothing.
    again = run_optimisation(load_optimisation(path), tmp_path / "out", executor, resume=True, figure=False)
    assert again.search["runs"] == 0 and again.search["reused"] > 0
    assert again.best == result.best
    pd.testing.assert_frame_equal(again.selection, result.selection)


def test_a_budget_given_as_a_constraint_on_check_hours_leads_to_the_same_vertex(tmp_path, executor):
    # The same budget as a limit on hours spent checking: 1.5 minutes x the lorries of 14 days (about 5,560)
    # / 60 = 139 hours. A constraint that binds at the optimum sits at its limit, so on fresh seeds its mean
    # falls either side by noise: it must not be shown violated (its interval reaches the limit) and may
    # overshoot by at most 1%.
    data = dict(BUDGET_SEARCH)
    data.pop("allocations")
    data["variables"] = [{"path": BRIEF, "bounds": [0, 1]}, {"path": THOROUGH, "bounds": [0, 1]}]
    data["constraints"] = [{"figure": "check_hours", "max": 139.0}]
    data["search"] = {"popsize": 6, "maxiter": 8}
    result = run_optimisation(load_optimisation(write(tmp_path / "o.yaml", data)), tmp_path / "out", executor, figure=False)
    assert result.best_changes[BRIEF] == pytest.approx(F_B, abs=0.05)
    assert result.best_changes[THOROUGH] == pytest.approx(F_A, abs=0.012)
    best = result.selection.iloc[0]
    assert best["status:check_hours"] != "violated"
    assert best["check_hours_mean"] <= 139.0 * 1.01


# -- the pure parts, on toy evaluators ----------------------------------------------------------


class Toy:
    """A noisy model: loss (x - 0.3)^2 + (y - 0.8)^2 plus noise that depends on the seed only, and g = x + y."""

    figures = ("loss", "g", "detections", "time_in_port_p95_min")

    def __init__(self) -> None:
        self.calls = 0

    def __call__(self, candidates, seeds):
        self.calls += len(candidates) * len(seeds)
        out = np.zeros((len(candidates), len(seeds), len(self.figures)))
        for k, c in enumerate(candidates):
            x, y = c.get("x", 0.0), c.get("y", 0.0)
            for r, seed in enumerate(seeds):
                noise = np.random.default_rng(seed).normal(0, 0.5)
                out[k, r] = [(x - 0.3) ** 2 + (y - 0.8) ** 2 + noise, x + y, 10 * (x + y) + noise, 5 + x]
        return out


def test_the_search_meets_a_constraint_at_its_edge_on_a_toy():
    # min (x - 0.3)^2 + (y - 0.8)^2 subject to x + y <= 0.8: the projection of (0.3, 0.8) onto the line
    # x + y = 0.8 is (0.15, 0.65) [calc]. The noise is the same for every candidate of a seed (common random
    # numbers), so it shifts the objective without changing which candidate is best.
    problem = Problem(
        variables=(Variable("x", 0.0, 1.0), Variable("y", 0.0, 1.0)),
        allocations=(),
        objective="loss",
        sense="minimise",
        constraints=(Constraint("g", max=0.8),),
    )
    toy = Toy()
    settings = SearchSettings(replications=2, popsize=10, maxiter=60, tol=1e-8, top=3, selection_replications=5)
    result = search_policy(toy, problem, settings, seed=3, policies={"origin": {"x": 0.0, "y": 0.0}})
    assert result.best_changes["x"] == pytest.approx(0.15, abs=0.02)
    assert result.best_changes["y"] == pytest.approx(0.65, abs=0.02)
    sel = result.selection.set_index("candidate")
    assert sel.loc[result.best, "status:g"] == "met"
    # Common fresh seeds make the paired differences exact: the origin is worse, with no doubt at all.
    assert sel.loc["origin", "verdict"] == "worse" and sel.loc["origin", "p_value"] < 1e-12
    assert sel.loc["origin", "difference"] == pytest.approx(0.3**2 + 0.8**2 - 0.15**2 - 0.15**2, abs=0.01)
    # The same seed gives the same search; each candidate is simulated once per seed.
    again = search_policy(Toy(), problem, settings, seed=3, policies={"origin": {"x": 0.0, "y": 0.0}})
    assert again.best_changes == result.best_changes
    assert toy.calls == len(result.history) * 2 + len(result.selection) * 5


def test_a_better_candidate_that_breaks_a_constraint_does_not_win():
    problem = Problem((Variable("x", 0.0, 1.0),), (), "loss", "minimise", (Constraint("g", max=0.5),))
    settings = SearchSettings(replications=2, popsize=5, maxiter=3, top=1, selection_replications=4)
    result = search_policy(Toy(), problem, settings, seed=1, policies={"tempting": {"x": 0.3, "y": 0.8}})
    sel = result.selection.set_index("candidate")
    assert result.best != "tempting"
    assert sel.loc["tempting", "verdict"] == "better, but breaks g"
    assert not sel.loc["tempting", "feasible"] and sel.loc["tempting", "status:g"] == "violated"


def test_allocations_share_out_the_total_by_stick_breaking():
    lanes = Allocation("lanes", 4, ("a", "b", "c"), (1.0, 1.0, 1.0), (None, None, None), integer=True)
    assert lanes.decode([0.5, 0.5]) == {"a": 2, "b": 1, "c": 1}
    assert lanes.decode([1.0, 0.3]) == {"a": 4, "b": 0, "c": 0}
    assert lanes.decode([0.0, 0.0]) == {"a": 0, "b": 0, "c": 4}
    assert sum(lanes.decode([0.37, 0.81]).values()) == 4
    minutes = Allocation("minutes", 1.5, ("brief", "thorough"), (1.0, 6.0), (1.0, 1.0))
    assert minutes.decode([0.8]) == {"brief": 1.0, "thorough": pytest.approx(0.5 / 6)}  # capped: the rest goes on
    assert minutes.decode([0.2]) == {"brief": pytest.approx(0.3), "thorough": pytest.approx(0.2)}
    problem = Problem((Variable("v", 0, 10, integer=True),), (lanes,), "loss", "minimise")
    assert problem.bounds() == [(0, 10), (0.0, 1.0), (0.0, 1.0)]
    assert list(problem.integrality()) == [True, False, False]
    assert problem.decode([3.6, 0.5, 0.5]) == {"v": 4, "a": 2, "b": 1, "c": 1}


def test_the_frontier_keeps_the_candidates_nobody_beats_on_both_axes():
    history = pd.DataFrame(
        {
            "candidate": list("abcdef"),
            "detections": [10, 12, 12, 15, 9, 15],
            "time_in_port_p95_min": [5, 6, 7, 9, 5, 8],
        }
    )
    # a (10, 5) beats e (9, 5); b (12, 6) beats c (12, 7); f (15, 8) beats d (15, 9).
    assert list(frontier(history)["candidate"]) == ["a", "b", "f"]


def test_candidate_ids_are_stable():
    assert candidate_id({"x": 0.1, "y": 2}) == candidate_id({"y": 2, "x": 0.1 + 1e-15})
    assert candidate_id({"x": 0.1}) != candidate_id({"x": 0.2})


# -- optimisation files ---------------------------------------------------------------------


def bad(**changes):
    data = {k: v for k, v in BUDGET_SEARCH.items()}
    data.update(changes)
    return data


BAD = [
    (bad(objectiv={}), "objectiv", "unknown key 'objectiv'; did you mean 'objective'?"),
    (bad(objective={"figure": "crossing", "sense": "minimise"}), "objective.figure", "did you mean 'crossings'?"),
    (bad(constraints=[{"figure": "staff_hours"}]), "constraints[0]", "exactly one of max or min"),
    (bad(constraints=[{"figure": "missed_departure_share", "max": 0.02}]), "constraints[0].figure", "no departures"),
    (bad(variables=[{"path": BRIEF, "bounds": [1, 0]}]), "variables[0].bounds", "expected low < high"),
    (bad(variables=[{"path": BRIEF, "bounds": [0, 1.5]}]), "variables[0].path", "at the high bound, in the world"),
    (bad(variables=[{"path": "stations.brief_lane.lanes", "bounds": [1, 2.5], "integer": True}]), "variables[0].bounds",
     "whole-number bounds"),
    (bad(variables=[{"path": "stations.wharf.lanes", "bounds": [1, 2]}]), "variables[0].path", "no item named 'wharf'"),
    (bad(variables=[{"path": BRIEF, "bounds": [0, 1]}]), "allocations[0]", "which variables[0] also changes"),
    (bad(allocations=[{"name": "l", "total": 2.5, "integer": True, "paths": [{"path": BRIEF}, {"path": THOROUGH}]}]),
     "allocations[0]", "unit weights and a whole-number total"),
    (bad(allocations=[{"name": "l", "total": 3, "paths": [{"path": BRIEF}, {"path": THOROUGH}]}]), "allocations[0]",
     "with the total on the first path, in the world"),
    (bad(allocations=[], variables=[]), "variables", "at least one variable or allocation"),
    (bad(policies=[{"name": "p", "set": {}}, {"name": "p", "set": {}}]), "policies[1].name", "used twice"),
    (bad(policies=[{"name": "p", "set": {"stations.brief_lane.lanes": -1}}]), "policies[0].set", "in the world"),
    (bad(selection={"replications": 1}), "selection.replications", "greater than or equal to 2"),
]


@pytest.mark.parametrize(("data", "key", "message"), BAD, ids=[b[1] for b in BAD])
def test_bad_optimisation_files_name_the_key(tmp_path, data, key, message):
    path = write(tmp_path / "optimise.yaml", data)
    with pytest.raises(OptimisationFileError) as info:
        load_optimisation(path)
    text = str(info.value)
    assert "\n" not in text and info.value.path == key, text
    assert message in text


def test_the_command_line_checks_files_and_the_demo_example_validates(tmp_path, capsys):
    example = ROOT / "worlds" / "kestrel_quay" / "optimise.yaml"
    assert main(["optimise", str(example), "--check"]) == EXIT_OK
    out = capsys.readouterr().out
    assert out.startswith(f"{example}: ok (optimisation") and "4 named policies" in out
    plan = load_optimisation(example)
    assert set(plan.policies) == {"current", "brief_all_p20", "brief_all_p40", "brief_all_p60"}
    # The YAML merge keeps the shared brief-check settings and overrides the sensitivity.
    assert plan.policies["brief_all_p40"]["methods.motion_sensing.service.mean"] == 1.2
    assert plan.policies["brief_all_p40"]["methods.motion_sensing.detection"] == {"default": 0.4}
    path = write(tmp_path / "bad.yaml", bad(seed=-1))
    assert main(["optimise", str(path), "--check"]) == EXIT_INPUT
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("undertow optimise: ") and ": seed: " in err[0]
    assert "3 search dimension(s)" in describe_optimisation(example)


def test_search_reports_in_its_own_words_and_shows_candidates_by_their_settings():
    problem = Problem((Variable("x", 0.0, 1.0), Variable("y", 0.0, 1.0)), (), "loss", "minimise")
    settings = SearchSettings(replications=2, popsize=5, maxiter=2, tol=0.0, top=2, selection_replications=4)
    result = search_policy(Toy(), problem, settings, seed=2, policies={"origin": {"x": 0.0, "y": 0.0}})
    assert result.search["message"].startswith("stopped at the limit of 2 generations (search.maxiter)")
    assert "Maximum number" not in result.summary()
    assert "    settings: x = 0; y = 0" in result.summary()  # the named policy, by its settings


def test_the_current_setting_is_always_a_finalist(tmp_path):
    data = {key: value for key, value in BUDGET_SEARCH.items() if key != "policies"}
    plan = load_optimisation(write(tmp_path / "o.yaml", data))
    assert plan.policies == {"current": {}}
    assert "popsize 5 x 1 = 5 candidates per generation" in describe_optimisation(write(
        tmp_path / "p.yaml", data | {"search": {"popsize": 5, "maxiter": 2}}))


def test_lean_and_kept_runs_give_the_same_search_and_a_lean_run_keeps_a_few_hundred_bytes(tmp_path, executor):
    data = dict(BUDGET_SEARCH, search={"popsize": 2, "maxiter": 1}, selection={"top": 2, "replications": 2})
    path = write(tmp_path / "small.yaml", data)
    lean = run_optimisation(load_optimisation(path), tmp_path / "lean", executor, figure=False)
    kept = run_optimisation(load_optimisation(path), tmp_path / "kept", executor, figure=False, keep_runs=True)
    pd.testing.assert_frame_equal(lean.selection, kept.selection)
    pd.testing.assert_frame_equal(lean.history, kept.history)
    simulations = pd.read_parquet(tmp_path / "lean" / "simulations.parquet")
    assert len(simulations) == lean.search["runs"] > 0 and not (tmp_path / "lean" / "runs").exists()
    assert all(is_complete(tmp_path / "kept" / "runs" / run) for run in simulations["run"])
    # The bound: at most 5 KB of disk per candidate run by default (the journal, not a run directory).
    assert (tmp_path / "lean" / "simulations.parquet").stat().st_size / len(simulations) <= 5 * 1024
    # A kept search resumed without --keep-runs reads its journal and runs nothing.
    again = run_optimisation(load_optimisation(path), tmp_path / "kept", executor, resume=True, figure=False)
    assert again.search["runs"] == 0
