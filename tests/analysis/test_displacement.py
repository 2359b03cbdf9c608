"""Displacement measures: the Bowers & Johnson / Guerette formulas, share distances, and runs real and synthetic.

Synthetic run directories are written by hand (truth and observed parquet files,
world.json, manifest.json, daily.parquet) so each test controls exactly where
attempts go; one pair of real runs checks the whole path and the command line.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import jensenshannon

from abm.analysis.displacement import (
    DISPLACEMENT_FILE,
    DisplacementInputError,
    displacement_between_runs,
    displacement_within_run,
    jensen_shannon,
    total_variation,
    weighted_displacement,
    write_displacement,
)
from abm.analysis.net_effect import RateChange, rate_change, read_verdict
from abm.cli import main
from abm.errors import InputError
from abm.experiment.single import run_to_directory
from abm.observed import OBSERVED_COLUMNS, OBSERVED_DIR, empty_table
from abm.records import TRUTH_COLUMNS, TRUTH_DIR, write_json, write_parquet
from abm.world import load_world
from abm.world.schema import DisplacementAreas

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
HAZARD = {"north_lay_by": 0.3, "approach_lanes": 0.5, "holding_yard": 0.7}
AREAS = {"response": [{"point": "holding_yard"}], "buffer": [{"point": "approach_lanes"}], "control": [{"point": "north_lay_by"}]}


# ---------------------------------------------------------------- a hand-written run directory


def fake_run(
    directory: Path,
    attempts: list[dict[str, Any]],
    days: int = 20,
    detections: dict[int, int] | None = None,
    displaced_out: dict[int, int] | None = None,
    interventions: list[dict[str, Any]] | None = None,
    seed: int = 7,
) -> Path:
    """Write a run directory whose truth and observed records are exactly what the test says.

    ``attempts``: rows with day, persons, point and optionally band, vehicle_class, outcome.
    ``detections`` / ``displaced_out``: persons per day. The world is the demo world with
    the hazards of HAZARD, the areas of AREAS and the given interventions (default: day 10).
    """
    world = load_world(DEMO).model_dump(mode="json")
    for point in world["boarding_points"]:
        point["hazard"] = HAZARD[point["name"]]
    world["interventions"] = (
        interventions
        if interventions is not None
        else [{"day": 10, "name": "holding yard patrols", "set": {"boarding_points.holding_yard.interdiction.default": 0.25}}]
    )
    world["displacement"] = AREAS
    rows = [
        {
            "attempt_id": i,
            "agent_id": i,
            "band": "night",
            "vehicle_class": "curtain_sided",
            "depth": "normal",
            "outcome": "crossed",
            "station": "",
            "method": "",
            "minute": 60.0,
            **row,
        }
        for i, row in enumerate(attempts)
    ]
    truth = {
        "attempts": pd.DataFrame(rows, columns=list(TRUTH_COLUMNS["attempts"])),
        "arrivals": pd.DataFrame(columns=list(TRUTH_COLUMNS["arrivals"])),
        "exits": pd.DataFrame(
            [(1000 + d, d, "displaced_out", n, 1) for d, n in (displaced_out or {}).items()],
            columns=list(TRUTH_COLUMNS["exits"]),
        ),
    }
    for name, frame in truth.items():
        write_parquet(frame.astype(TRUTH_COLUMNS[name]), directory / TRUTH_DIR / f"{name}.parquet", f"{TRUTH_DIR}/{name}")
    encounters = pd.DataFrame(
        [
            (k, d, 600.0, "detection", "gate_imaging", "station", "curtain_sided", "imaging_portal", "", "")
            for d, n in (detections or {}).items()
            for k in range(n)
        ],
        columns=list(OBSERVED_COLUMNS["encounters"]),
    ).astype(OBSERVED_COLUMNS["encounters"])
    for name in OBSERVED_COLUMNS:
        write_parquet(encounters if name == "encounters" else empty_table(name), directory / OBSERVED_DIR / f"{name}.parquet",
                      f"{OBSERVED_DIR}/{name}")
    write_parquet(pd.DataFrame({"day": np.arange(days)}), directory / "daily.parquet", "daily")
    write_json(world, directory / "world.json")
    write_json({"seed": seed, "days": days}, directory / "manifest.json")
    return directory


def daily(point: str, persons: int, days: range, **extra: Any) -> list[dict[str, Any]]:
    """One attempt row a day at ``point``."""
    return [{"day": d, "persons": persons, "point": point, **extra} for d in days]


# ---------------------------------------------------------------- the formulas


def test_guerette_worked_example():
    # Guerette (2009), Analyzing Crime Displacement and Diffusion, POP tool guide 10, appendix D.
    w = weighted_displacement(rb=207, ra=110, db=178, da=157, cb=308, ca=318)
    assert w.gross_effect == 97
    # The guide's "net effect 0.326" is its appendix B eq. (2): NE = Rb/Cb - Ra/Ca (minus the success measure).
    # The relative form 1 - (Ra/Ca)/(Rb/Cb) gives 0.485, so it is not that.
    assert w.net_effect == pytest.approx(0.326, abs=5e-4)
    assert w.net_effect == pytest.approx(207 / 308 - 110 / 318)
    assert 1 - (110 / 318) / (207 / 308) == pytest.approx(0.485, abs=5e-4)
    assert w.success_measure == pytest.approx(110 / 318 - 207 / 308)
    assert w.buffer_displacement_measure == pytest.approx(157 / 318 - 178 / 308)
    assert w.total_net_effect == pytest.approx(130.5, abs=0.05)
    # The guide prints WDQ = .411, but its own formula on its own data gives 0.258
    # ((157/318 - 178/308) / (110/318 - 207/308) = -0.0842 / -0.3262); 0.258 is tested.
    assert w.wdq == pytest.approx(0.258, abs=5e-4)
    assert w.flag == "ok" and "diffusion" in w.note


def test_zero_control_gives_flags_not_nan():
    w = weighted_displacement(rb=10, ra=5, db=3, da=4, cb=0, ca=6)
    assert w.flag == "control_empty" and "before" in w.note
    assert w.wdq is None and w.net_effect is None and w.success_measure is None and w.total_net_effect is None
    json.dumps(w.to_dict(), allow_nan=False)
    after_empty = weighted_displacement(rb=10, ra=5, db=3, da=4, cb=6, ca=0)
    assert after_empty.flag == "control_empty" and after_empty.total_net_effect == pytest.approx(-9.0)


def test_success_measure_zero_or_positive_has_no_wdq():
    # Response and control fall in step: success measure exactly 0, the WDQ denominator.
    zero = weighted_displacement(rb=10, ra=5, db=4, da=8, cb=20, ca=10)
    assert zero.success_measure == 0 and zero.wdq is None and zero.flag == "no_success"
    rose = weighted_displacement(rb=10, ra=20, db=4, da=8, cb=20, ca=20)
    assert rose.success_measure > 0 and rose.wdq is None and rose.flag == "no_success"
    no_buffer = weighted_displacement(rb=10, ra=5, db=0, da=0, cb=20, ca=20, has_buffer=False)
    assert no_buffer.flag == "no_buffer" and no_buffer.wdq is None


def test_distances_by_hand_and_scipy():
    p, q = np.array([0.5, 0.5]), np.array([1.0, 0.0])
    assert total_variation(p, q) == pytest.approx(0.5)
    # By hand: M = (0.75, 0.25); KL(p||M) = 0.5 log2(2/3) + 0.5 log2(2) = 0.2075187, KL(q||M) = log2(4/3) = 0.4150375;
    # JS divergence = their mean 0.3112781, distance = its square root.
    assert jensen_shannon(p, q) == pytest.approx(math.sqrt(0.3112781), abs=1e-7)
    assert jensen_shannon(p, q) == pytest.approx(jensenshannon(p, q, base=2))
    assert total_variation(p, p) == 0 and jensen_shannon(p, p) == 0
    assert total_variation([1, 0], [0, 1]) == 1 and jensen_shannon([1, 0], [0, 1]) == pytest.approx(1)
    rng = np.random.default_rng(3)
    a, b = rng.dirichlet(np.ones(6)), rng.dirichlet(np.ones(6))
    assert total_variation(a, b) == pytest.approx(0.5 * np.abs(a - b).sum())
    assert jensen_shannon(a, b) == pytest.approx(jensenshannon(a, b, base=2))


def _rate(low: float, high: float) -> RateChange:
    return RateChange("x_per_day", "truth", 10.0, 10.0 + (low + high) / 2, (low + high) / 2, low, high, 0.5, 4, 7, True)


@pytest.mark.parametrize(
    ("crossings", "detections", "verdict"),
    [
        ((-1, 1), (1, 3), "displacement"),  # more found, no fewer through beyond chance
        ((-5, -1), (1, 3), "success"),
        ((-5, -1), (-3, -1), "success"),
        ((1, 3), (1, 3), "crossings_rose"),
        ((-1, 1), (-1, 1), "no_clear_change"),
        ((-1, 1), (-3, -1), "no_clear_change"),
    ],
)
def test_verdict_rule(crossings, detections, verdict):
    assert read_verdict(_rate(*crossings), _rate(*detections))[0] == verdict


def test_rate_change_is_the_paired_or_welch_t_test_on_weekly_means():
    # Reference: scipy.stats.ttest_rel / ttest_ind(equal_var=False) on the weekly means (Law, Simulation Modeling
    # and Analysis, batch means; from memory), and scipy's t interval.
    from scipy import stats

    rng = np.random.default_rng(4)
    before, after = rng.poisson(10, 28).astype(float), rng.poisson(8, 28).astype(float)
    weeks_b, weeks_a = before.reshape(4, 7).mean(1), after.reshape(4, 7).mean(1)
    paired = rate_change("crossings_per_day", "truth", before, after, paired=True)
    assert paired.p_value == pytest.approx(stats.ttest_rel(weeks_a, weeks_b).pvalue)
    low, high = stats.t.interval(0.95, 3, loc=(weeks_a - weeks_b).mean(), scale=stats.sem(weeks_a - weeks_b))
    assert (paired.low, paired.high) == pytest.approx((low, high))
    welch = rate_change("crossings_per_day", "truth", before, after[:21], paired=False)
    assert welch.p_value == pytest.approx(stats.ttest_ind(after[:21].reshape(3, 7).mean(1), weeks_b,
                                                          equal_var=False).pvalue)
    short = rate_change("crossings_per_day", "truth", before[:10], after[:10], paired=True)
    assert short.block_days == 1 and short.blocks == 10  # under two weeks: single days
    assert "paired t-test on 4 weekly means" in paired.describe()


# ---------------------------------------------------------------- synthetic runs


def test_shares_move_toward_the_new_point_and_hazard_rises(tmp_path):
    attempts = (
        daily("north_lay_by", 8, range(10)) + daily("holding_yard", 2, range(10))
        + daily("north_lay_by", 2, range(10, 20)) + daily("holding_yard", 8, range(10, 20), band="evening")
    )
    result = displacement_within_run(fake_run(tmp_path / "r", attempts))  # day 10 from world.json
    assert (result.before.start_day, result.before.end_day, result.after.end_day) == (0, 10, 20)
    point = result.share("point")
    shares = dict(zip(point.keys, zip(point.before, point.after)))
    assert shares["north_lay_by"] == pytest.approx((0.8, 0.2))
    assert shares["holding_yard"] == pytest.approx((0.2, 0.8))
    assert shares["approach_lanes"] == (0, 0)
    assert point.total_variation == pytest.approx(0.6)
    assert point.jensen_shannon == pytest.approx(jensenshannon([0.8, 0, 0.2], [0.2, 0, 0.8], base=2))
    band = dict(zip(result.share("band").keys, result.share("band").after))
    assert band["evening"] == pytest.approx(0.8) and band["night"] == pytest.approx(0.2)
    assert result.share("vehicle_class").total_variation == 0
    depth = result.share("depth")  # every depth level of the world, even one nobody used
    assert depth.keys == ("normal", "deep") and depth.before == depth.after == (1.0, 0.0)
    option = result.share("option")
    assert dict(zip(option.keys, option.after))["holding_yard/evening/curtain_sided"] == pytest.approx(0.8)
    # 0.8 x 0.3 + 0.2 x 0.7 = 0.38 before; 0.2 x 0.3 + 0.8 x 0.7 = 0.62 after: pushed toward danger.
    assert result.hazard_weighted_share.before == pytest.approx(0.38)
    assert result.hazard_weighted_share.after == pytest.approx(0.62)
    assert result.hazard_weighted_share.source == "truth"
    assert result.weighted is not None and result.weighted.response_after == 80


def test_wdq_from_run_records_matches_the_worked_example(tmp_path):
    # The Guerette counts as persons in the world's response / buffer / control points.
    counts = {"holding_yard": (207, 110), "approach_lanes": (178, 157), "north_lay_by": (308, 318)}
    attempts = [{"day": 3, "persons": b, "point": p} for p, (b, _) in counts.items()]
    attempts += [{"day": 15, "persons": a, "point": p} for p, (_, a) in counts.items()]
    result = displacement_within_run(fake_run(tmp_path / "r", attempts))
    w = result.weighted
    assert (w.response_before, w.buffer_before, w.control_before) == (207, 178, 308)
    assert w.wdq == pytest.approx(0.258, abs=5e-4) and w.total_net_effect == pytest.approx(130.5, abs=0.05)
    assert "world.json" in result.areas_from


def test_verdict_displacement_when_detections_rise_and_crossings_stay_flat(tmp_path):
    # Day 5 of 20: 5 days before, 15 after; the same 10 crossings a day, detections 2 -> 5 a day.
    attempts = daily("north_lay_by", 10, range(20))
    detections = {d: 2 if d < 5 else 5 for d in range(20)}
    run = fake_run(tmp_path / "r", attempts, detections=detections)
    result = displacement_within_run(run, day=5)
    c = result.crossings_vs_detections
    assert (c.crossings.before, c.crossings.after) == (10, 10)
    assert (c.detections.before, c.detections.after) == (2, 5)
    assert c.crossings.relative == 0 and c.detections.relative == pytest.approx(1.5)
    assert c.verdict == "displacement"


def test_verdict_success_when_crossings_fall(tmp_path):
    attempts = daily("north_lay_by", 10, range(10)) + daily("north_lay_by", 4, range(10, 20))
    attempts += daily("north_lay_by", 6, range(10, 20), outcome="detected")
    detections = {d: 6 for d in range(10, 20)}
    result = displacement_within_run(fake_run(tmp_path / "r", attempts, detections=detections))
    assert result.crossings_vs_detections.verdict == "success"
    assert result.crossings_vs_detections.crossings.relative == pytest.approx(-0.6)
    assert result.attempts_per_day.before == result.attempts_per_day.after == 10


def test_displaced_out_per_day(tmp_path):
    run = fake_run(tmp_path / "r", daily("north_lay_by", 1, range(20)), displaced_out={2: 1, 12: 2, 15: 3})
    out = displacement_within_run(run).displaced_out_per_day
    assert (out.source, out.before, out.after) == ("truth", pytest.approx(0.1), pytest.approx(0.5))


def test_between_runs_with_warmup(tmp_path):
    # Warm-up days (0-4) put everyone at the holding yard in both runs; dropping them isolates the policy.
    warm = daily("holding_yard", 50, range(5))
    a = fake_run(tmp_path / "a", warm + daily("north_lay_by", 10, range(5, 20)))
    b = fake_run(tmp_path / "b", warm + daily("approach_lanes", 10, range(5, 20)))
    result = displacement_between_runs(a, b, warmup=5)
    assert result.design == "between_runs" and result.before.days == result.after.days == 15
    assert result.share("point").total_variation == pytest.approx(1.0)
    assert result.hazard_weighted_share.before == pytest.approx(0.3)
    assert result.hazard_weighted_share.after == pytest.approx(0.5)
    assert result.notes == ()  # same seed: common random numbers
    assert displacement_between_runs(a, b).share("point").total_variation < 1.0


def test_areas_passed_in_and_overlapping_areas(tmp_path):
    run = fake_run(tmp_path / "r", daily("north_lay_by", 5, range(20)) + daily("holding_yard", 5, range(20)))
    mine = DisplacementAreas(response=[{"point": "north_lay_by"}], control=[{"point": "holding_yard", "band": "evening"}])
    result = displacement_within_run(run, areas=mine)
    assert result.areas_from == "areas passed in" and result.weighted.response_before == 50
    assert result.weighted.flag == "control_empty"
    overlapping = DisplacementAreas(response=[{"point": "north_lay_by"}], control=[{"band": "night"}])
    with pytest.raises(DisplacementInputError, match="both the response and the control area"):
        displacement_within_run(run, areas=overlapping)


def test_result_outputs_and_write_displacement(tmp_path):
    run = fake_run(tmp_path / "r", daily("north_lay_by", 3, range(20)), detections={1: 1, 14: 2})
    result = write_displacement(run)
    text = (run / DISPLACEMENT_FILE).read_text(encoding="utf-8")
    data = json.loads(text, parse_constant=lambda c: pytest.fail(f"non-JSON constant {c}"))
    assert data == result.to_dict()
    assert data["crossings_vs_detections"]["detections_per_day"]["source"] == "observed"
    assert data["weighted_displacement"]["flag"] == "no_success"  # no response attempts at all
    assert data["weighted_displacement"]["wdq"] is None
    frame = result.to_frame()
    assert list(frame.columns) == ["section", "measure", "source", "before", "after", "value", "note"]
    assert set(frame["source"]) == {"truth", "observed", "truth+observed"}
    summary = result.summary()
    assert "verdict:" in summary and "observed" in summary and "truth" in summary


@pytest.mark.parametrize(
    ("kind", "message"),
    [
        ("no_intervention", "interventions: none defined"),
        ("nothing_after", "no attempts in after window"),
        ("no_truth", "no truth records"),
        ("no_dir", "no such run directory"),
        ("day_out_of_range", "leaves no days on one side"),
    ],
)
def test_bad_input(tmp_path, kind, message):
    attempts = daily("north_lay_by", 1, range(10 if kind == "nothing_after" else 20))
    run = fake_run(tmp_path / "r", attempts, interventions=[] if kind == "no_intervention" else None)
    if kind == "no_truth":
        for file in (run / TRUTH_DIR).iterdir():
            file.unlink()
        (run / TRUTH_DIR).rmdir()
    if kind == "no_dir":
        run = tmp_path / "missing"
    with pytest.raises(InputError, match=message) as caught:
        displacement_within_run(run, day=25 if kind == "day_out_of_range" else None)
    assert isinstance(caught.value, DisplacementInputError) and "\n" not in str(caught.value)


# ---------------------------------------------------------------- real runs and the command line


@pytest.fixture(scope="module")
def real_runs(tmp_path_factory) -> tuple[Path, Path]:
    base = tmp_path_factory.mktemp("runs")
    world = load_world(DEMO)
    for seed, name in ((1, "a"), (2, "b")):
        run_to_directory(world, "hash", 20, seed, base / name)
    return base / "a", base / "b"


def _numbers(value: Any) -> list[float]:
    if isinstance(value, dict):
        return [x for v in value.values() for x in _numbers(v)]
    if isinstance(value, list):
        return [x for v in value for x in _numbers(v)]
    return [value] if isinstance(value, (int, float)) and not isinstance(value, bool) else []


def test_real_runs_give_finite_measures(real_runs):
    result = displacement_between_runs(*real_runs, warmup=2)
    data = result.to_dict()
    numbers = _numbers(data)
    assert numbers and all(math.isfinite(x) for x in numbers)
    for s in result.shares:
        assert 0 <= s.total_variation <= 1 and 0 <= s.jensen_shannon <= 1
        assert sum(s.before) == pytest.approx(1) and sum(s.after) == pytest.approx(1)
    assert 0 < result.hazard_weighted_share.before < 1
    assert result.crossings_vs_detections.crossings.before > 0
    assert any("seeds differ" in n for n in result.notes)
    json.dumps(data, allow_nan=False)


def test_cli_compare(real_runs, capsys):
    a, b = real_runs
    assert main(["compare", str(a), str(b), "--warmup", "2"]) == 0
    out = capsys.readouterr().out
    assert "verdict:" in out and "days 2-19" in out
    assert "Welch t-test on 2 weekly means" in out  # different seeds: unpaired
    assert "TV (total variation) is the share of attempts that would have" in out
    lines = {line.split("  ")[1]: line for line in out.splitlines() if "per day" in line}
    assert lines["detections per day"].endswith("observed") and lines["crossings per day"].endswith("truth")


def test_cli_compare_leaves_out_the_runs_warm_up_by_default(tmp_path, capsys):
    world = load_world(DEMO)
    for name in ("a", "b"):
        run_to_directory(world, "hash", 20, 3, tmp_path / name, warmup=4)
    assert main(["compare", str(tmp_path / "a"), str(tmp_path / "b")]) == 0
    out = capsys.readouterr().out
    assert "days 4-23 (20 days)" in out and "paired t-test on 2 weekly means" in out  # same seed: paired


def test_cli_compare_missing_run_dir(real_runs, tmp_path, capsys):
    assert main(["compare", str(tmp_path / "nope"), str(real_runs[1])]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no such run directory" in err
