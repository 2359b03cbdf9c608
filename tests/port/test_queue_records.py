"""Queue figures written to a run directory: queues.parquet, queue_hours.parquet and departures.parquet.

Checked three ways: against what the record book already holds (every wait of
``RecordBook.queue_waits``, the observed checks table, the check minutes of
``methods.parquet``, each vehicle's missed departure); the compiled hour tally
against a direct numpy computation; and, on the M/M/2 reference world, the
mean wait, mean queue length and lane utilisation against Erlang C
(Kleinrock 1975, Queueing Systems vol. 1, section 3.5; Hillier & Lieberman,
Introduction to Operations Research; the same formulas as
``tests/port/test_queue_theory.py``).

Adding them must not move any other record: the digests below are of a run
made by the code before these tables existed.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from abm.experiment.single import run_to_directory, simulate
from abm.port.queues import tally_pass
from abm.records import DEPARTURES_FILE, QUEUE_HOURS_FILE, QUEUES_FILE, RecordBook
from abm.world import load_world

from .digests import record_sha256

ROOT = Path(__file__).resolve().parents[2]
KESTREL = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
CORRAN = ROOT / "worlds" / "corran_ridge" / "world.yaml"
MMC = ROOT / "worlds" / "reference" / "mmc" / "world.yaml"

# SHA-256 of each record file of a 14-day run with seed 3 (`undertow run WORLD --days 14 --seed 3`), computed
# from commit 009e582 of branch runreport, before the engine tallied station hours and departures.
BEFORE: dict[str, dict[str, str]] = {
    "kestrel_quay": {
        "daily.parquet": "7ac35ad4ece43607c157e79ab6971961753f2d2cdb09ffbeff47ec0c4f411c5c",
        "methods.parquet": "ea1a071fc7d22fdfb3dd487639e317fddaf1db745598e685c595572b04640d95",
        "observed/checks.parquet": "5def153b3bc778a3d9e9924c6578e189e1a4ae24320d30cf3d453a1b712cee0e",
        "observed/encounters.parquet": "019c2e186dd7db565cf61d4020cce18d14dfd5757c27f279cec3b894361602f3",
        "observed/false_alarms.parquet": "d4215ad2532a37dec37b05de1efeeba2894d000601fc04040206e484fbfdc3a6",
        "observed/stations.parquet": "8bb3f381f21e48a86b42225ad2ae4ec9b6a1e97a759f0d8d45c1b3093ee7b76c",
        "summary.json": "3499b745617f9e5eb0eab03084181ff60ab4f925f640fb2ae5ce92c8d2499501",
        "truth/arrivals.parquet": "eab354aaa314b240ea6754734ae9a7e3596a8c6bd1fa63737ae95f9e14d92f1e",
        "truth/attempts.parquet": "80adae5f3403911326074b1745a5dccc6830d20e57109982eb623ac30fe51af8",
        "truth/exits.parquet": "2ceb3c8638c9600f119e1b2e1b8050049b87df05a2074d6010b5c4e82c641f95",
    },
    "corran_ridge": {
        "daily.parquet": "bf56c66633d034f2780071c0903ce344f2f5bc175ab32c769c9cdca175accb72",
        "methods.parquet": "1e26492727df5df59791a23ccd5f9a8ecbe6f9e9eb0018493a64bd7bbca254d5",
        "observed/checks.parquet": "93acd00de002562851bb9dfcd828496437b3f55f68813bcc93efff37a056531a",
        "observed/encounters.parquet": "73829d023c5a3f300b0c6b2b96646f6ee35344421646d3aba1443579c7d9cfaf",
        "observed/false_alarms.parquet": "d24c4d01e68b596b3170a09277705a06130e690d4f7de8a9abd1817b58c72726",
        "observed/stations.parquet": "c0275fedee8ed561a0eea1f711e2958fa2d09ecbb6b77a182154e1a97d808a1a",
        "truth/arrivals.parquet": "2d9174b60366de662e713468fcd1c172ed322b99260b94f4cce88bdc7cd0d2ec",
        "truth/attempts.parquet": "8f16077c3745e71587f30c180b5d7f7c61a9aa1534282b27fc5f25bce0eadac5",
        "truth/exits.parquet": "5084c0b74f93dbdb4fb10b199db842dc571453787e631ac23fb06150d5dece70",
    },
}


@pytest.mark.parametrize("name,path", [("kestrel_quay", KESTREL), ("corran_ridge", CORRAN)])
def test_the_other_records_are_byte_identical_to_before(name: str, path: Path, tmp_path: Path) -> None:
    out = tmp_path / name
    run_to_directory(load_world(path), "hash", 14, 3, out)
    for file, digest in BEFORE[name].items():
        assert record_sha256(out / file) == digest, f"{name}: {file} changed"
    for file in (QUEUES_FILE, QUEUE_HOURS_FILE, DEPARTURES_FILE):
        assert (out / file).is_file()


# -- the compiled tally ----------------------------------------------------------------------------------------


def _overlap(begin: np.ndarray, end: np.ndarray, first: int, n: int) -> np.ndarray:
    """Minutes of each interval in each hour, as a dense vehicles x hours matrix summed over vehicles."""
    lo = (first + np.arange(n)) * 60.0
    return np.clip(np.minimum(end[:, None], lo + 60.0) - np.maximum(begin[:, None], lo), 0.0, None).sum(axis=0)


@pytest.mark.parametrize("seed", range(10))
def test_the_hour_tally_equals_a_direct_computation(seed: int) -> None:
    rng = np.random.default_rng(seed)
    day = int(rng.integers(0, 5))
    arrival = np.sort(day * 1440 + rng.uniform(0, 1440, 300))
    start = arrival + rng.exponential(40.0, arrival.size) * (rng.random(arrival.size) < 0.7)
    end = start + rng.exponential(25.0, arrival.size)
    checked = rng.random(arrival.size) < 0.6
    start = np.where(checked, start, arrival)
    vehicles, checks, waiting, busy, wait_hour = tally_pass(arrival, start, end, checked, day * 24, 24)
    n = vehicles.shape[0]
    assert n >= 24 and n - 1 + day * 24 >= math.ceil(end[checked].max() / 60) - 1  # spill past midnight is kept
    hours = np.floor(arrival / 60).astype(np.int64) - day * 24
    np.testing.assert_array_equal(vehicles, np.bincount(hours, minlength=n))
    np.testing.assert_array_equal(checks, np.bincount(hours[checked], minlength=n))
    np.testing.assert_allclose(waiting, _overlap(arrival[checked], start[checked], day * 24, n), atol=1e-9)
    np.testing.assert_allclose(busy, _overlap(start[checked], end[checked], day * 24, n), atol=1e-9)
    np.testing.assert_array_equal(wait_hour, hours[checked] + day * 24)


# -- against the record book -----------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def book() -> RecordBook:
    return simulate(load_world(KESTREL), 12, 8).records


def test_queue_table_holds_every_wait_of_the_record_book(book: RecordBook) -> None:
    table = book.queue_table()
    for station, waits in book.queue_waits().items():
        rows = table[table["station"] == station]
        assert int(rows["checks"].sum()) == waits.size
        checked = rows[rows["checks"] > 0]
        mean = float((checked["wait_mean_min"] * checked["checks"]).sum() / checked["checks"].sum())
        assert mean == pytest.approx(float(waits.astype(np.float64).mean()), rel=1e-9)
        assert float(checked["wait_max_min"].max()) == pytest.approx(float(waits.max()), rel=1e-6)
        assert (checked["wait_p95_min"] <= checked["wait_max_min"] + 1e-9).all()
    # the hours a vehicle reached a station, as observed/checks counts them
    observed = book.observed_tables()["checks"].groupby(["day", "hour", "station"])[["vehicles", "checks"]].sum()
    ours = table.set_index(["day", "hour", "station"])[["vehicles", "checks"]]
    ours = ours[ours["vehicles"] > 0]
    pd.testing.assert_frame_equal(ours.sort_index(), observed.sort_index(), check_dtype=False, check_names=False)


def test_lane_minutes_agree_with_the_methods_table_and_the_roster(book: RecordBook) -> None:
    table = book.queue_table()
    assert table["busy_lane_minutes"].sum() == pytest.approx(book.methods_table()["check_minutes"].sum(), rel=1e-9)
    staffed = table[table["day"] < 12]["staffed_lane_minutes"]
    assert staffed.sum() == pytest.approx(60.0 * book.daily_table()["staff_hours"].sum(), rel=1e-9)
    # a station hour cannot be busier than its lanes on duty, but for checks carried past midnight
    within = table[(table["staffed_lane_minutes"] > 0) & (table["day"] < 11)]
    assert (within["utilisation"] <= 1.0 + 1e-9).mean() > 0.99


def test_pooled_hours_leave_the_warm_up_out(book: RecordBook) -> None:
    daily = book.queue_table()
    pooled = book.queue_hours_table(4, 11)
    assert len(pooled) == 24 * daily["station"].nunique()
    window = daily[daily["day"].between(4, 11)]
    sums = window.groupby(["station", "hour"])[["checks", "busy_lane_minutes"]].sum()
    ours = pooled.set_index(["station", "hour"])[["checks", "busy_lane_minutes"]]
    pd.testing.assert_frame_equal(ours.sort_index(), sums.sort_index(), check_dtype=False)
    queue = window.groupby(["station", "hour"])["queue_mean"].mean()
    np.testing.assert_allclose(pooled.set_index(["station", "hour"])["queue_mean"].sort_index(), queue.sort_index())


def test_departures_count_every_vehicle_and_every_missed_one(book: RecordBook) -> None:
    raw = book._departures  # every day's tally before the table keeps the run's own days
    missed = book.missed()
    assert sum(int(d["missed"].sum()) for d in raw) == int(missed.sum())
    assert sum(int(d["left"].sum()) for d in raw) == int(np.isfinite(book.time_in_port()).sum())
    table = book.departures_table()
    assert table["day"].max() == 11 and (table["missed"] <= table["booked"]).all()
    places = {f"{m // 60:02d}:{m % 60:02d}": load_world(KESTREL).departures.capacity
              for _, m, _ in load_world(KESTREL).departures.week()}
    assert (table["left"] + table["places_left"] == table["time"].map(places)).all()
    assert list(table["time"].iloc[:2]) == ["00:30", "02:00"]


# -- against Erlang C -------------------------------------------------------------------------------------------


def erlang_c(lam: float, mu: float, c: int) -> tuple[float, float]:
    """M/M/c: (Wq, Lq) in the time unit of the rates (Erlang C; Kleinrock 1975, eq. 3.40 ff.)."""
    a = lam / mu
    head = sum(a**k / math.factorial(k) for k in range(c))
    tail = a**c / math.factorial(c) * c / (c - a)
    wq = tail / (head + tail) / (c * mu - lam)
    return wq, lam * wq


def test_mmc_queue_figures_agree_with_erlang_c(tmp_path: Path) -> None:
    """lambda = 2/h, mu = 3/h, c = 2: Wq = 2.5 min, Lq = 1/12 (Erlang C, Kleinrock 1975), utilisation
    lambda/(c mu) = 1/3. 99% Student t intervals (scipy) over 10-day batches of one 200-day run after a 7-day
    warm-up; the queue length is measured from arrival and start times, so Lq tests it, not Little's law."""
    out = tmp_path / "mmc"
    run_to_directory(load_world(MMC), "hash", 200, 5, out, warmup=7)
    wq, lq = erlang_c(2.0, 3.0, 2)
    table = pd.read_parquet(out / QUEUES_FILE)
    table = table[table["day"].between(7, 206)].assign(batch=lambda t: (t["day"] - 7) // 10)
    table["wait_sum"] = table["wait_mean_min"].fillna(0.0) * table["checks"]
    batches = table.groupby("batch").agg(wait=("wait_sum", "sum"), checks=("checks", "sum"), queue=("queue_mean", "mean"),
                                         busy=("busy_lane_minutes", "sum"), staffed=("staffed_lane_minutes", "sum"))
    for what, values, expected in (
        ("mean wait (minutes)", batches["wait"] / batches["checks"], 60.0 * wq),
        ("mean queue length", batches["queue"], lq),
        ("lane utilisation", batches["busy"] / batches["staffed"], 2.0 / (2 * 3.0)),
    ):
        x = values.to_numpy(float)
        half = stats.t.ppf(0.995, x.size - 1) * x.std(ddof=1) / math.sqrt(x.size)
        assert abs(x.mean() - expected) <= half, f"{what}: {x.mean():.4f} ± {half:.4f}, Erlang C {expected:.4f}"
    pooled = pd.read_parquet(out / QUEUE_HOURS_FILE)
    assert set(pooled["first_day"]) == {7} and set(pooled["last_day"]) == {206}
    assert pd.read_parquet(out / DEPARTURES_FILE).empty  # a station without departures
