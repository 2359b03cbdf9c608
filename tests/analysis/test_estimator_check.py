"""Estimator evaluation against truth: metrics by hand, truth counting, and replicated runs.

External checks, each named where it is used:

* Wilson and Clopper-Pearson intervals against scipy.stats.binomtest(...).proportion_ci
  and against Newcombe (1998), Statistics in Medicine 17:857-872, Table II
  (81/263, 15/148, 0/20);
* the t interval of the bias against scipy.stats.ttest_1samp(...).confidence_interval.

The reference world worlds/reference/layered_removal/world.yaml is built so
that removal and expansion assumptions hold under static behaviour: there
the bias must be zero within sampling error. Under adaptive behaviour the
same world lets people board after the first station; the bias is reported
(record_property and printed), not asserted away.
"""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from abm.analysis.estimator_check import (
    ESTIMATES_CACHE,
    PER_RUN_COLUMNS,
    TRUTH_TABLE,
    Route,
    attempts_reaching,
    bias_sentence,
    briefing_sentences,
    cached_estimates,
    cached_results,
    check_runs,
    clopper_pearson_interval,
    estimates_for_run,
    estimators_fingerprint,
    method_slug,
    passed_unfound,
    persons_at_risk,
    relative_bias_interval,
    run_estimators,
    runs_from_store,
    sensitivities_from_world,
    summarise_check,
    truth_for_run,
)
from abm.estimate.expansion import expansion_name
from abm.estimate.frequency import CHAO
from abm.estimate.report import run_all
from abm.estimate.results import DEFAULT_LEVEL
from abm.experiment.compare import mean_interval, wilson_interval
from abm.experiment.single import run_to_directory
from abm.world import load_world, parse_world, read_yaml_mapping
from abm.world.paths import set_path

ROOT = Path(__file__).resolve().parents[2]
LAYERED = ROOT / "worlds" / "reference" / "layered_removal" / "world.yaml"
DEMO = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
TANDEM = ROOT / "worlds" / "reference" / "tandem" / "world.yaml"

REPLICATIONS = 10
DAYS = 60
SEEDS = [2024 + r for r in range(REPLICATIONS)]
REMOVAL = ("removal_two_pass", "removal_carle_strub", "removal_zippin", "removal_relative")
EXPANSION = ("expansion_first_check", "expansion_second_check", "expansion_third_check")


def world_with(path: Path, behaviour: str):
    return parse_world(set_path(read_yaml_mapping(path), "adversary.behaviour", behaviour), path)


# ---------------------------------------------------------------- binomial intervals


@pytest.mark.parametrize(
    "k, n, wilson, exact",
    [  # Newcombe (1998) Table II, methods 3 (score) and 5 (exact), 4 decimals
        (81, 263, (0.2553, 0.3662), (0.2527, 0.3676)),
        (15, 148, (0.0624, 0.1605), (0.0578, 0.1617)),
        (0, 20, (0.0, 0.1611), (0.0, 0.1684)),
    ],
)
def test_binomial_intervals_match_newcombe(k, n, wilson, exact):
    assert wilson_interval(k, n) == pytest.approx(wilson, abs=5e-5)
    assert clopper_pearson_interval(k, n) == pytest.approx(exact, abs=5e-5)


@pytest.mark.parametrize("k, n", [(0, 1), (1, 1), (3, 10), (9, 10), (10, 10), (0, 12), (47, 50), (500, 1000)])
@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_binomial_intervals_match_scipy_binomtest(k, n, confidence):
    test = stats.binomtest(k, n)
    w = test.proportion_ci(confidence_level=confidence, method="wilson")
    e = test.proportion_ci(confidence_level=confidence, method="exact")
    assert wilson_interval(k, n, confidence) == pytest.approx((w.low, w.high), abs=1e-12)
    assert clopper_pearson_interval(k, n, confidence) == pytest.approx((e.low, e.high), abs=1e-10)


# ---------------------------------------------------------------- metrics on a hand-made per-run table


def hand_table() -> pd.DataFrame:
    """Six runs of one estimator: three static, three adaptive, errors and coverage chosen by hand."""
    rows = [
        # behaviour, estimate, lo, hi, truth
        ("static", 102.0, 90.0, 115.0, 100),
        ("static", 95.0, 85.0, 105.0, 100),
        ("static", 107.0, 101.0, 113.0, 100),  # misses: 100 < 101
        ("adaptive", 60.0, 50.0, 70.0, 80),  # misses
        ("adaptive", 70.0, 60.0, 90.0, 90),  # covers at the top end
        ("adaptive", 55.0, 45.0, 65.0, 70),  # misses
    ]
    frame = pd.DataFrame(
        [
            {
                "behaviour": b, "run": f"run{i}", "slug": "zippin", "method": "Zippin", "label": "the Zippin estimate",
                "quantity": "reaching:first_check", "target": "attempts reaching station 'first_check'",
                "estimate": est, "ci_low": lo, "ci_high": hi, "level": 0.9, "observed": 40, "truth": t,
                "error": est - t, "ratio": est / t, "covered": lo <= t <= hi, "exact": True, "note": "",
            }
            for i, (b, est, lo, hi, t) in enumerate(rows)
        ],
        columns=["behaviour", *PER_RUN_COLUMNS],
    )
    frame.attrs["factors"] = ["behaviour"]
    return frame


def test_summary_metrics_by_hand():
    summary = summarise_check(hand_table()).set_index("behaviour")
    static, adaptive = summary.loc["static"], summary.loc["adaptive"]

    assert static["n"] == 3 and adaptive["n"] == 3
    # errors 2, -5, 7 and -20, -20, -15
    assert static["bias"] == pytest.approx(4 / 3)
    assert adaptive["bias"] == pytest.approx(-55 / 3)
    assert static["rmse"] == pytest.approx(math.sqrt((4 + 25 + 49) / 3))
    assert adaptive["rmse"] == pytest.approx(math.sqrt((400 + 400 + 225) / 3))
    assert static["mean_truth"] == 100 and adaptive["mean_truth"] == 80
    assert static["relative_bias"] == pytest.approx((4 / 3) / 100)
    assert adaptive["relative_bias"] == pytest.approx((-55 / 3) / 80)
    assert static["relative_rmse"] == pytest.approx(static["rmse"] / 100)
    assert static["mean_estimate"] == pytest.approx(304 / 3)
    assert adaptive["mean_ratio"] == pytest.approx(np.mean([60 / 80, 70 / 90, 55 / 70]))
    assert (static["covered"], static["coverage"]) == (2, pytest.approx(2 / 3))
    assert (adaptive["covered"], adaptive["coverage"]) == (1, pytest.approx(1 / 3))
    assert (adaptive["coverage_low"], adaptive["coverage_high"]) == pytest.approx(wilson_interval(1, 3, 0.95))

    # t interval of the bias: scipy.stats.ttest_1samp(...).confidence_interval
    for row, errors in ((static, [2, -5, 7]), (adaptive, [-20, -20, -15])):
        ci = stats.ttest_1samp(errors, 0.0).confidence_interval(0.95)
        assert (row["bias_low"], row["bias_high"]) == pytest.approx((ci.low, ci.high))

    # static truth is constant, so the relative interval is the bias interval over the truth
    assert (static["relative_bias_low"], static["relative_bias_high"]) == pytest.approx(
        (static["bias_low"] / 100, static["bias_high"] / 100)
    )


def test_relative_bias_interval_is_the_ratio_of_means_delta_method():
    errors, truths = np.array([-20.0, -20.0, -15.0]), np.array([80.0, 90.0, 70.0])
    r, low, high = relative_bias_interval(errors, truths, 0.95)
    assert r == pytest.approx(errors.mean() / truths.mean())
    u = (errors - r * truths) / truths.mean()
    half = stats.t.ppf(0.975, 2) * u.std(ddof=1) / math.sqrt(3)
    assert (low, high) == pytest.approx((r - half, r + half))


def test_clopper_pearson_coverage_and_one_run():
    summary = summarise_check(hand_table(), coverage_interval="clopper-pearson").set_index("behaviour")
    assert (summary.loc["static", "coverage_low"], summary.loc["static", "coverage_high"]) == pytest.approx(
        clopper_pearson_interval(2, 3)
    )
    one = summarise_check(hand_table().iloc[:1])
    assert one["n"].iloc[0] == 1 and math.isnan(one["bias_low"].iloc[0])
    assert mean_interval([5.0], finite_only=False)[0] == 5.0
    assert "too few runs" in briefing_sentences(one)[0]


def test_bias_sentence_reads_like_a_briefing():
    row = {
        "slug": "expansion_gate", "behaviour": "adaptive", "label": "the expansion estimate at 'gate'",
        "quantity": "reaching:gate", "n": 10, "relative_bias": -0.23, "relative_bias_low": -0.28,
        "relative_bias_high": -0.18, "covered": 3, "coverage": 0.3, "coverage_low": 0.108, "coverage_high": 0.603,
        "level": 0.9, "confidence": 0.95,
    }
    text = bias_sentence(row, ["behaviour"])
    assert text.startswith(
        "Under adaptive behaviour the expansion estimate at 'gate' undercounts attempts reaching 'gate' "
        "by 23% (95% interval 18–28%) over 10 runs"
    )
    assert "its 90% intervals covered the truth in 3 of 10" in text
    calm = bias_sentence({**row, "relative_bias": 0.01, "relative_bias_low": -0.02, "relative_bias_high": 0.04}, ["behaviour"])
    assert "shows no bias distinguishable from zero" in calm and "+1.0% (95% interval −2.0% to +4.0%)" in calm
    policy = bias_sentence({**row, "policy": "more_dogs"}, ["behaviour", "policy"])
    assert policy.startswith("Under adaptive behaviour with policy = more_dogs the expansion")


# ---------------------------------------------------------------- truth counting


def test_truth_quantities_on_hand_made_attempts():
    route = Route.from_world(load_world(LAYERED))
    assert route.primaries == ("first_check", "second_check", "third_check") and not route.inexact
    attempts = pd.DataFrame(
        [  # agent, persons, day, point, outcome, station
            (1, 2, 0, "upstream_park", "detected", "first_check"),
            (1, 2, 3, "upstream_park", "detected", "third_check"),  # the same two persons again
            (2, 1, 1, "midroute_lane", "crossed", ""),  # boards after first_check
            (3, 3, 2, "upstream_park", "crossed", ""),
            (4, 1, 2, "upstream_park", "no_vehicle", ""),  # at risk, never aboard
            (5, 1, 9, "midroute_lane", "detected", "second_check"),
        ],
        columns=["agent_id", "persons", "day", "point", "outcome", "station"],
    )
    assert persons_at_risk(attempts) == 2 + 1 + 3 + 1 + 1
    assert persons_at_risk(attempts, (3, 9)) == 2 + 1
    assert attempts_reaching(attempts, route, "first_check") == 2 + 2 + 3
    assert attempts_reaching(attempts, route, "second_check") == 2 + 1 + 3 + 1  # first detection stops at first_check
    assert attempts_reaching(attempts, route, "third_check") == 2 + 1 + 3
    assert passed_unfound(attempts, route, "first_check") == 2 + 3
    assert passed_unfound(attempts, route, "third_check") == 1 + 3
    assert attempts_reaching(attempts, route, "first_check", (0, 2)) == 2 + 3


def test_route_flags_stations_a_referral_can_skip():
    demo = load_world(DEMO)
    route = Route.from_world(demo)
    assert "gate_imaging" not in route.inexact
    assert set(route.inexact) == {"yard_dogs", "checkin_probe"}
    assert "false alarm at 'gate_imaging'" in route.inexact["yard_dogs"]
    data = demo.model_dump(mode="json")
    for method in data["methods"]:
        method["false_alarm"] = 0.0
    assert not Route.from_world(parse_world(data)).inexact  # referral then only follows a find


def test_truth_table_covers_every_estimator_with_a_reason():
    assert all(rule.why and rule.slug and rule.label for rule in TRUTH_TABLE)
    assert len({rule.slug for rule in TRUTH_TABLE}) == len(TRUTH_TABLE)
    assert method_slug(expansion_name("gate-imaging")) == "expansion_gate_imaging"


def test_sensitivities_from_world_average_over_people_carrying_classes():
    beta = sensitivities_from_world(load_world(LAYERED))
    assert set(beta) == {"first_check", "second_check", "third_check"}
    a, b = beta["first_check"]
    assert a / (a + b) == pytest.approx(0.8) and a + b == pytest.approx(1000)
    demo = sensitivities_from_world(load_world(DEMO))
    a, b = demo["gate_imaging"]  # imaging portal; tankers (capacity 0) left out
    assert a / (a + b) == pytest.approx((0.4 * 0.75 + 0.2 * 0.6 + 0.2 * 0.5 + 0.1 * 0.9) / 0.9)
    assert "manual_search" not in demo  # secondary


# ---------------------------------------------------------------- replicated runs of the reference world


@pytest.fixture(scope="module")
def layered_runs(tmp_path_factory):
    """REPLICATIONS static and adaptive runs of the layered-removal world, common seeds."""
    base = tmp_path_factory.mktemp("layered")
    runs = []
    for behaviour in ("static", "adaptive"):
        world = world_with(LAYERED, behaviour)
        for seed in SEEDS:
            out = base / f"{behaviour}-{seed}"
            run_to_directory(world, "test", DAYS, seed, out)
            runs.append((out, {"replication": seed - SEEDS[0]}))
    return runs


@pytest.fixture(scope="module")
def layered_check(layered_runs):
    per_run, skipped = check_runs([(path, {}) for path, _ in layered_runs])
    return per_run, skipped, summarise_check(per_run)


def test_per_run_rows_are_consistent(layered_check):
    per_run, _, _ = layered_check
    assert per_run.attrs["factors"] == ["behaviour"]
    assert (per_run["error"] == per_run["estimate"] - per_run["truth"]).all()
    assert np.allclose(per_run["ratio"], per_run["estimate"] / per_run["truth"])
    covered = (per_run["ci_low"] <= per_run["truth"]) & (per_run["truth"] <= per_run["ci_high"])
    assert (per_run["covered"] == covered).all()
    assert per_run["exact"].all()
    static = per_run[per_run["behaviour"] == "static"]
    assert set(REMOVAL + EXPANSION) <= set(static["slug"])
    # every run compares the removal estimators with the same truth as the first expansion
    for _, rows in static.groupby("run"):
        truths = rows.set_index("slug")["truth"]
        assert truths[list(REMOVAL)].nunique() == 1 and truths["removal_zippin"] == truths["expansion_first_check"]


def test_static_removal_and_expansion_are_unbiased(layered_check, record_property):
    _, _, summary = layered_check
    static = summary[summary["behaviour"] == "static"].set_index("slug")
    for slug in REMOVAL + EXPANSION:
        row = static.loc[slug]
        record_property(f"static_{slug}_relative_bias", round(float(row["relative_bias"]), 4))
        print(bias_sentence(row.to_dict() | {"slug": slug}, ["behaviour"]))
        assert row["n"] == REPLICATIONS
        errors = layered_check[0].query("behaviour == 'static' and slug == @slug")["error"]
        _, low, high = mean_interval(errors, 0.99, finite_only=False)
        assert low <= 0 <= high, f"{slug}: 99% interval of the bias {low:.1f} to {high:.1f} misses 0"
        assert abs(row["relative_bias"]) < 0.05, slug
        # the intervals are honest too: the Wilson 99% interval of coverage reaches the nominal 90%
        low_cov, high_cov = wilson_interval(int(row["covered"]), int(row["n"]), 0.99)
        assert low_cov <= row["level"] <= high_cov or row["coverage"] >= row["level"], slug


def test_adaptive_bias_is_reported(layered_check, record_property):
    _, skipped, summary = layered_check
    adaptive = summary[summary["behaviour"] == "adaptive"]
    assert set(EXPANSION) | {"removal_zippin"} <= set(adaptive["slug"])
    for _, row in adaptive.iterrows():
        record_property(f"adaptive_{row['slug']}_relative_bias", round(float(row["relative_bias"]), 4))
        print(bias_sentence(row, ["behaviour"]))
        assert math.isfinite(row["bias"]) and math.isfinite(row["rmse"]) and math.isfinite(row["relative_bias"])
        if row["n"] >= 2:
            assert math.isfinite(row["bias_low"]) and math.isfinite(row["bias_high"])
        assert 0.0 <= row["coverage_low"] <= row["coverage"] <= row["coverage_high"] <= 1.0
    for _, row in skipped[skipped["behaviour"] == "adaptive"].iterrows():
        print(f"adaptive, {row['slug']}: {row['why']}")


def test_labels_split_the_summary(layered_runs):
    chosen = [(path, labels) for path, labels in layered_runs if labels["replication"] < 2]
    per_run, _ = check_runs(chosen)
    assert per_run.attrs["factors"] == ["behaviour", "replication"]
    summary = summarise_check(per_run, by=["behaviour"])
    assert set(summary["n"]) == {2}
    assert set(summarise_check(per_run)["n"]) == {1}


# ---------------------------------------------------------------- flat numbers for a batch store


def test_estimates_for_run_are_finite_or_none_and_deterministic(layered_runs, tmp_path):
    run = layered_runs[0][0]
    first = estimates_for_run(run)
    copy = tmp_path / "copy"
    shutil.copytree(run, copy)
    assert estimates_for_run(run) == first == estimates_for_run(copy)
    assert all(v is None or (isinstance(v, float) and math.isfinite(v)) for v in first.values())
    assert all(key.startswith("est_") for key in first)
    stems = {key.removesuffix("_lo").removesuffix("_hi") for key in first}
    assert all({s, f"{s}_lo", f"{s}_hi"} <= set(first) for s in stems)
    assert {f"est_{slug}" for slug in REMOVAL + EXPANSION} <= stems
    for slug in REMOVAL + EXPANSION:
        assert first[f"est_{slug}_lo"] <= first[f"est_{slug}"] <= first[f"est_{slug}_hi"]
    # the numbers are run_all's, with the world's sensitivities
    results, _ = run_all(run, None, 0.9, sensitivities_from_world(load_world(LAYERED)))
    assert {method_slug(r.method): r.estimate for r in results} == {
        key[4:]: value for key, value in first.items() if key in {f"est_{method_slug(r.method)}" for r in results}
    }
    without = estimates_for_run(run, sensitivities=None)
    assert without["est_expansion_first_check"] is None and without["est_removal_relative"] is None
    assert json.dumps(first, allow_nan=False)

    truth = truth_for_run(run)
    assert truth["truth_removal_zippin"] == truth["truth_expansion_first_check"] > 0


def test_an_estimator_that_breaks_unexpectedly_spoils_no_other(layered_runs, monkeypatch):
    import abm.estimate.report as report

    run = layered_runs[0][0]
    clean, _ = run_estimators(run)
    assert CHAO in [r.method for r in clean]

    def broken(*args, **kwargs):
        raise RuntimeError("deliberately broken for this test")

    monkeypatch.setattr(report, "chao", broken)
    results, failures = run_estimators(run)
    assert (CHAO, "RuntimeError: deliberately broken for this test") in failures
    assert [r.method for r in results] == [r.method for r in clean if r.method != CHAO]
    with pytest.raises(RuntimeError):
        run_all(run, None, 0.9)  # outside the check, a broken estimator is a bug that must be seen


def test_estimates_for_run_never_raises_when_estimators_cannot_run(tmp_path):
    run = tmp_path / "empty"
    run_to_directory(load_world(TANDEM), "test", 2, 1, run)  # nobody attempts: nothing is encountered
    values = estimates_for_run(run)
    assert values and all(v is None for v in values.values())
    assert values == estimates_for_run(run)


# ---------------------------------------------------------------- the demo world: inexact truths left out


def test_demo_world_leaves_out_what_truth_cannot_count(tmp_path, record_property):
    run = tmp_path / "demo"
    run_to_directory(world_with(DEMO, "adaptive"), "test", 60, 11, run)
    per_run, skipped = check_runs([run])
    left_out = skipped[skipped["why"].str.startswith("truth not exact")]
    assert set(left_out["slug"]) == {
        "expansion_yard_dogs", "expansion_yard_dogs_undetected", "expansion_checkin_probe",
        "expansion_checkin_probe_undetected",
    }
    assert "expansion_gate_imaging" in set(per_run["slug"]) and per_run["exact"].all()
    for _, row in per_run.iterrows():
        record_property(f"demo_adaptive_{row['slug']}_ratio", round(float(row["ratio"]), 3))
    loose, _ = check_runs([run], include_inexact=True)
    inexact = loose[~loose["exact"]]
    assert set(inexact["slug"]) == set(left_out["slug"]) and inexact["note"].str.contains("referred").all()


def test_runs_from_store_reads_factor_values(tmp_path, layered_runs):
    out = tmp_path / "batch"
    for i, (path, _) in enumerate(layered_runs[:2]):
        target = out / "runs" / f"r{i:03d}"
        shutil.copytree(path, target)
        manifest = json.loads((target / "manifest.json").read_text())
        manifest["experiment_run"] = {"run_id": f"r{i:03d}", "point": i, "replication": 0, "values": {"lanes": i + 1}}
        (target / "manifest.json").write_text(json.dumps(manifest))
    found = runs_from_store(out)
    assert [labels for _, labels in found] == [{"lanes": 1}, {"lanes": 2}]
    per_run, _ = check_runs(found)
    assert per_run.attrs["factors"] == ["behaviour", "lanes"]


def test_cached_estimates_cover_the_days_the_summary_covers(tmp_path):
    """A batch summary's est_ columns estimate over the summarised days: the warm-up is left out, as in summary.json."""
    run = tmp_path / "run"
    run_to_directory(load_world(DEMO), "test", 12, 5, run, warmup=6)
    values = cached_estimates(run)
    assert values == estimates_for_run(run, (6, 17))
    assert values != estimates_for_run(run)  # every recorded day, warm-up included, estimates something else
    cache = json.loads((run / ESTIMATES_CACHE).read_text(encoding="utf-8"))
    assert cache["window"] == [6, 17] and cache["level"] == DEFAULT_LEVEL
    # the cached results are the estimators' own, parameters in their order, read back as they were written
    fresh, failures = run_estimators(run, (6, 17))
    cached, cached_failures = cached_results(run)
    assert [json.dumps(r.to_dict()) for r in cached] == [json.dumps(r.to_dict()) for r in fresh]
    assert [r.parameters for r in cached] == [r.parameters for r in fresh] and cached_failures == failures
    # a cache written for other days (or in an older layout) is recomputed, not trusted
    (run / ESTIMATES_CACHE).write_text(json.dumps({"window": [6, 17], "estimates": {"est_chao": 1.0}}), encoding="utf-8")
    assert cached_estimates(run) == values
    # so is one written by other estimator code, however well it matches the request
    stale = json.loads((run / ESTIMATES_CACHE).read_text(encoding="utf-8"))
    assert stale["estimators"] == estimators_fingerprint()
    stale["estimators"] = "0" * 64
    stale["results"][0]["estimate"] = -1.0
    (run / ESTIMATES_CACHE).write_text(json.dumps(stale), encoding="utf-8")
    assert cached_estimates(run) == values
    assert json.loads((run / ESTIMATES_CACHE).read_text(encoding="utf-8"))["estimators"] == estimators_fingerprint()


def test_the_estimator_check_over_the_summarised_days_reads_the_cache_and_agrees_with_a_fresh_run(tmp_path):
    run = tmp_path / "run"
    run_to_directory(load_world(DEMO), "test", 12, 5, run, warmup=6)
    cached_results(run)
    from_cache, _ = check_runs([run], window=(6, 17), include_inexact=True)
    # explicit sensitivities (the world's own) bypass the cache: every estimator runs again
    fresh, _ = check_runs([run], window=(6, 17), include_inexact=True, sensitivities=sensitivities_from_world(load_world(DEMO)))
    pd.testing.assert_frame_equal(from_cache, fresh)
    assert len(from_cache) > 5


def test_people_who_learn_to_hide_deep_make_the_expansion_undercount(tmp_path):
    """How wrong an estimate goes when people adapt: the analyst's sensitivity is the kit's trialled 0.8.

    In this world hiding deep cuts the check's detection chance to 0.08 at no extra hazard. Static
    groups all hide at the normal depth and the expansion recovers the truth; adaptive groups learn to
    hide deep, the checks find a tenth as many, and the expansion, still dividing by 0.8, counts a
    fraction of those who reached the station.
    """
    from tests.agents.test_adaptation import depth_world

    ratios = {}
    for behaviour in ("static", "adaptive"):
        world = depth_world(1.0, deep_hazard=0.0, hazard_aversion=1.0)
        world["adversary"]["behaviour"] = behaviour
        run = tmp_path / behaviour
        run_to_directory(parse_world(world), "test", 80, 5, run, warmup=40)
        rows, _ = check_runs([run], window=(40, 119), include_inexact=True)
        ratios[behaviour] = float(rows.loc[rows["slug"] == "expansion_gate", "ratio"].iloc[0])
    assert 0.8 < ratios["static"] < 1.2
    assert ratios["adaptive"] < 0.4
