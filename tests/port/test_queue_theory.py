"""Stations against queueing theory and against a reference simulator (ciw).

Every check value names its source (see /work/shared/REFERENCES.md, Queues):
Erlang C for M/M/c (Hillier & Lieberman, Introduction to Operations Research),
Pollaczek-Khinchine for M/G/1, Little's law, Burke's theorem for the tandem,
and ciw (a test-only reference simulator) run on the same network.

Statistics. Each simulated comparison uses independent replications (one seed
each) with a warm-up excluded. A replication's post-warm-up mean is its batch
mean; the replication means are independent and identically distributed, so a
Student t interval over them is honest without assuming anything about the
autocorrelation of waits inside a run. Intervals are 99 %. The seeds are fixed,
so the outcome is deterministic; ``test_*_reject_*`` show that the same
procedure rejects a station whose service-time mean is off by 10 %.
"""

from __future__ import annotations

import copy
import inspect
import math
from pathlib import Path
from unittest import mock

import ciw
import numpy as np
import pytest
from scipy import stats

import abm.port.day as day_module
from abm.experiment.single import simulate
from abm.port.day import DayEngine, DayResult
from abm.port.queues import FifoCarry, serve_fifo
from abm.world import parse_world, read_yaml_mapping
from abm.world.schema import World

REFERENCE = Path(__file__).resolve().parents[2] / "worlds" / "reference"
LEVEL = 0.99  # confidence level of every interval below
MINUTES_PER_DAY = 1440.0


# -- theory ---------------------------------------------------------------------------------
def erlang_c(lam: float, mu: float, c: int) -> dict[str, float]:
    """M/M/c in steady state (Erlang C): P0, P(wait), Lq, Wq. Rates in any one time unit.

    A = lam/mu, rho = A/c; P(wait) = [A^c/c! * c/(c-A)] / [sum_{k<c} A^k/k! + A^c/c! * c/(c-A)],
    Wq = P(wait)/(c mu - lam), Lq = lam Wq (REFERENCES.md, Queues).
    """
    a = lam / mu
    if a >= c:
        raise ValueError("unstable: lam/mu >= c")
    term, head = 1.0, 0.0  # term = A^k/k! by recurrence (no huge powers or factorials)
    for k in range(c):
        head += term
        term *= a / (k + 1)
    tail = term * c / (c - a)  # A^c/c! * c/(c-A)
    p_wait = tail / (head + tail)
    wq = p_wait / (c * mu - lam)
    return {"p0": 1.0 / (head + tail), "p_wait": p_wait, "lq": lam * wq, "wq": wq}


def pollaczek_khinchine_wq(lam: float, mean_s: float, second_moment_s: float) -> float:
    """M/G/1 mean wait in queue: Wq = lam E[S^2] / (2 (1 - rho)), rho = lam E[S] (Pollaczek-Khinchine)."""
    rho = lam * mean_s
    return lam * second_moment_s / (2.0 * (1.0 - rho))


def t_interval(samples: np.ndarray, level: float = LEVEL) -> tuple[float, float]:
    """Student t interval for the mean of independent replications."""
    x = np.asarray(samples, dtype=float)
    half = stats.t.ppf(0.5 + level / 2, x.size - 1) * x.std(ddof=1) / math.sqrt(x.size)
    return float(x.mean() - half), float(x.mean() + half)


def welch_interval(x: np.ndarray, y: np.ndarray, level: float = LEVEL) -> tuple[float, float]:
    """Welch two-sample t interval for mean(x) - mean(y)."""
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    vx, vy = x.var(ddof=1) / x.size, y.var(ddof=1) / y.size
    df = (vx + vy) ** 2 / (vx**2 / (x.size - 1) + vy**2 / (y.size - 1))
    half = stats.t.ppf(0.5 + level / 2, df) * math.sqrt(vx + vy)
    diff = x.mean() - y.mean()
    return float(diff - half), float(diff + half)


def miss(name: str, value: float, interval: tuple[float, float]) -> list[str]:
    """A message when ``value`` lies outside ``interval``, else nothing."""
    lo, hi = interval
    return [] if lo <= value <= hi else [f"{name}: {value:.6g} outside the {LEVEL:.0%} interval [{lo:.6g}, {hi:.6g}]"]


# -- running the model ------------------------------------------------------------------------
def reference_world(name: str, scale_service: float = 1.0, **service: object) -> World:
    """A reference world, optionally with every service mean scaled or the service distribution replaced."""
    data = copy.deepcopy(read_yaml_mapping(REFERENCE / name / "world.yaml"))
    for method in data["methods"]:
        method["service"].update(service)
        method["service"]["mean"] = float(method["service"]["mean"]) * scale_service
    return parse_world(data, source=f"{name} (test variant)")


def simulate_days(world: World, days: int, seed: int) -> list[DayResult]:
    """``simulate`` the world, keeping every day's DayResult (arrivals and per-station waits by day)."""
    results: list[DayResult] = []
    run_day = DayEngine.run_day

    def keep(self: DayEngine, *args: object) -> DayResult:
        result = run_day(self, *args)
        results.append(result)
        return result

    with mock.patch.object(DayEngine, "run_day", keep):
        model = simulate(world, days, seed)
    # the record book holds exactly the waits the engine produced, in processing order
    names = world.station_names
    for s, waits in model.records.queue_waits().items():
        kept = np.concatenate([r.queue_wait[names.index(s)] for r in results])
        np.testing.assert_array_equal(waits, kept.astype(np.float32))
    return results


def post_warmup_waits(results: list[DayResult], station: int, warmup_days: int) -> np.ndarray:
    return np.concatenate([r.queue_wait[station] for r in results[warmup_days:]])


# -- 1. the formula itself ----------------------------------------------------------------------
def test_erlang_c_reference_suite_case() -> None:
    # 360 arrivals per 30 min, mean service 240 s, c = 55 (A = 48): P(wait) = 0.23870, Wq = 8.184 s
    # [calc, matches a reference suite] (REFERENCES.md, Queues)
    r = erlang_c(lam=360 / 1800, mu=1 / 240, c=55)  # per second
    assert r["p_wait"] == pytest.approx(0.23870, abs=5e-6)
    assert r["wq"] == pytest.approx(8.184, abs=5e-4)


def test_erlang_c_hillier_lieberman_single_server() -> None:
    # lambda = 2/h, mu = 3/h, c = 1: Wq = 2/3 h, Lq = 4/3 (Hillier & Lieberman, hospital example) [pub]
    r = erlang_c(lam=2.0, mu=3.0, c=1)
    assert r["wq"] == pytest.approx(2 / 3, rel=1e-12)
    assert r["lq"] == pytest.approx(4 / 3, rel=1e-12)
    assert r["p_wait"] == pytest.approx(2 / 3, rel=1e-12)  # M/M/1: P(wait) = rho (calc)


def test_erlang_c_hillier_lieberman_two_servers() -> None:
    # lambda = 2/h, mu = 3/h, c = 2: P0 = 0.5, P(wait) = 1/6, Lq = 1/12, Wq = 1/24 h
    # (Hillier & Lieberman hospital example; REFERENCES.md tags c = 2 as [calc])
    r = erlang_c(lam=2.0, mu=3.0, c=2)
    assert r["p0"] == pytest.approx(0.5, rel=1e-12)
    assert r["p_wait"] == pytest.approx(1 / 6, rel=1e-12)
    assert r["lq"] == pytest.approx(1 / 12, rel=1e-12)
    assert r["wq"] == pytest.approx(1 / 24, rel=1e-12)


def test_pollaczek_khinchine_reference_values() -> None:
    # lambda = 0.8, mu = 1: M/M/1 Wq = 4.0 (E[S^2] = 2), M/D/1 Wq = 2.0 (E[S^2] = 1) [calc] (REFERENCES.md)
    assert pollaczek_khinchine_wq(0.8, 1.0, 2.0) == pytest.approx(4.0)
    assert pollaczek_khinchine_wq(0.8, 1.0, 1.0) == pytest.approx(2.0)
    # P-K with exponential service agrees with Erlang C for c = 1 (calc)
    assert pollaczek_khinchine_wq(0.8, 1.0, 2.0) == pytest.approx(erlang_c(0.8, 1.0, 1)["wq"])


# -- 2. M/M/2 reference world against Erlang C and Little's law ----------------------------------
MM2_SEEDS = range(101, 113)  # 12 replications
MM2_DAYS, MM2_WARMUP_DAYS = 240, 2  # 48 vehicles a day: ~11,400 checks kept per replication
MM2_LAMBDA = 2.0 / 60.0  # per minute (world: 48 vehicles a day, flat profile)
MM2_THEORY = erlang_c(lam=2.0, mu=3.0, c=2)  # Hillier & Lieberman; per hour


def mm2_statistics(world: World) -> dict[str, np.ndarray]:
    """Per replication: P(wait), mean wait (min), time-average queue length, and lambda x mean wait."""
    out: dict[str, list[float]] = {"p_wait": [], "wq": [], "lq_time": [], "lambda_wq": []}
    t0, t1 = MM2_WARMUP_DAYS * MINUTES_PER_DAY, MM2_DAYS * MINUTES_PER_DAY
    for seed in MM2_SEEDS:
        results = simulate_days(world, MM2_DAYS, seed)
        # one station, no travel time, every vehicle checked: waits are in arrival order
        arrival = np.concatenate([r.traffic.arrival for r in results])
        wait = np.concatenate([r.queue_wait[0] for r in results])
        assert arrival.shape == wait.shape
        start = arrival + wait
        kept = arrival >= t0
        out["p_wait"].append(float(np.mean(wait[kept] > 0)))
        out["wq"].append(float(wait[kept].mean()))
        out["lambda_wq"].append(MM2_LAMBDA * float(wait[kept].mean()))
        out["lq_time"].append(time_average_queue(arrival, start, t0, t1))
    return {k: np.array(v) for k, v in out.items()}


def time_average_queue(arrival: np.ndarray, start: np.ndarray, t0: float, t1: float) -> float:
    """(1/(t1-t0)) * integral of Q(t) over [t0, t1], Q = vehicles arrived and not yet started.

    Built by sweeping the +1 (arrival) / -1 (start) events, independently of the per-vehicle waits.
    """
    times = np.concatenate([arrival, start])
    steps = np.concatenate([np.ones(arrival.size), -np.ones(start.size)])
    order = np.argsort(times, kind="stable")
    times, q = times[order], np.cumsum(steps[order])
    assert q.min() >= 0, "a vehicle started before it arrived"
    edges = np.clip(np.append(times, t1), t0, t1)  # Q = q[k] on [times[k], times[k+1])
    return float(np.sum(q * np.diff(edges)) / (t1 - t0))


def mm2_misses(s: dict[str, np.ndarray]) -> list[str]:
    misses: list[str] = []
    misses += miss("P(wait) (Erlang C = 1/6)", MM2_THEORY["p_wait"], t_interval(s["p_wait"]))
    misses += miss("Wq min (Erlang C = 60/24 = 2.5)", MM2_THEORY["wq"] * 60.0, t_interval(s["wq"]))
    misses += miss("Lq (Erlang C = 1/12)", MM2_THEORY["lq"], t_interval(s["lq_time"]))
    # Little's law, Lq = lambda Wq: the per-replication difference has mean zero
    misses += miss("Lq - lambda*Wq (Little's law = 0)", 0.0, t_interval(s["lq_time"] - s["lambda_wq"]))
    return misses


@pytest.fixture(scope="module")
def mm2_nominal() -> dict[str, np.ndarray]:
    return mm2_statistics(reference_world("mmc"))


def test_mm2_matches_erlang_c_and_littles_law(mm2_nominal: dict[str, np.ndarray]) -> None:
    check(mm2_misses(mm2_nominal))


@pytest.mark.parametrize("factor", [0.9, 1.1])
def test_mm2_checks_reject_service_mean_off_by_ten_percent(factor: float) -> None:
    # power: the same procedure on a station whose mean check is 18 or 22 minutes instead of 20
    misses = mm2_misses(mm2_statistics(reference_world("mmc", scale_service=factor)))
    assert any(m.startswith("Wq") for m in misses), misses
    assert any(m.startswith("P(wait)") for m in misses), misses


# -- 3. M/D/1 and M/G/1 against Pollaczek-Khinchine ----------------------------------------------
MG1_SEEDS = range(201, 211)  # 10 replications
MG1_DAYS, MG1_WARMUP_DAYS = 40, 1  # 1,152 vehicles a day
MG1_LAMBDA, MG1_MEAN = 0.8, 1.0  # per minute, minutes (world md1)


def mg1_misses(world: World, second_moment: float) -> list[str]:
    waits = [post_warmup_waits(simulate_days(world, MG1_DAYS, seed), 0, MG1_WARMUP_DAYS) for seed in MG1_SEEDS]
    wq = pollaczek_khinchine_wq(MG1_LAMBDA, MG1_MEAN, second_moment)  # Pollaczek-Khinchine
    rho = MG1_LAMBDA * MG1_MEAN  # M/G/1: P(wait) = P(server busy) = rho (PASTA; utilisation)
    return miss(f"Wq (P-K = {wq:.4g})", wq, t_interval([w.mean() for w in waits])) + miss(
        f"P(wait) (rho = {rho})", rho, t_interval([np.mean(w > 0) for w in waits])
    )


def test_md1_matches_pollaczek_khinchine() -> None:
    # deterministic 1-minute checks: E[S^2] = 1, Wq = 2.0 minutes [calc] (REFERENCES.md, Kingman / P-K)
    check(mg1_misses(reference_world("md1"), second_moment=1.0))


@pytest.mark.parametrize(("dist", "cv"), [("gamma", 0.5), ("lognormal", 0.8)])
def test_mg1_matches_pollaczek_khinchine(dist: str, cv: float) -> None:
    # mean 1 minute, E[S^2] = mean^2 (1 + cv^2): gamma cv 0.5 -> Wq = 2.5; lognormal cv 0.8 -> Wq = 3.28 (P-K, calc)
    world = reference_world("md1", dist=dist, cv=cv)
    check(mg1_misses(world, second_moment=MG1_MEAN**2 * (1 + cv**2)))


@pytest.mark.parametrize("factor", [0.9, 1.1])
def test_md1_checks_reject_service_mean_off_by_ten_percent(factor: float) -> None:
    misses = mg1_misses(reference_world("md1", scale_service=factor), second_moment=1.0)
    assert any(m.startswith("Wq") for m in misses), misses


# -- 4. the tandem against ciw and against Erlang C per station (Burke) ----------------------------
TANDEM_SEEDS = range(301, 313)  # 12 replications of each simulator
TANDEM_DAYS, TANDEM_WARMUP_DAYS = 20, 1
TANDEM_LAMBDA = 0.5  # per minute (world: 720 vehicles a day)
TANDEM_MEANS = (3.0, 1.5)  # minutes; lanes 2 and 1 (world tandem)
TANDEM_LANES = (2, 1)
# Burke: the departures of a stable M/M/c queue are Poisson(lambda), so each station is an M/M/c queue
TANDEM_THEORY = [erlang_c(TANDEM_LAMBDA, 1 / m, c)["wq"] for m, c in zip(TANDEM_MEANS, TANDEM_LANES, strict=True)]


def undertow_tandem_means(world: World) -> np.ndarray:
    """(replications, stations) mean waits after the warm-up."""
    means = []
    for seed in TANDEM_SEEDS:
        results = simulate_days(world, TANDEM_DAYS, seed)
        means.append([post_warmup_waits(results, s, TANDEM_WARMUP_DAYS).mean() for s in range(2)])
    return np.array(means)


@pytest.fixture(scope="module")
def ciw_tandem_means() -> np.ndarray:
    """The same network in ciw: Poisson arrivals, exponential service, 2 then 1 servers, A -> B -> exit."""
    network = ciw.create_network(
        arrival_distributions=[ciw.dists.Exponential(rate=TANDEM_LAMBDA), None],
        service_distributions=[ciw.dists.Exponential(rate=1 / m) for m in TANDEM_MEANS],
        number_of_servers=list(TANDEM_LANES),
        routing=[[0.0, 1.0], [0.0, 0.0]],
    )
    t0, t1 = TANDEM_WARMUP_DAYS * MINUTES_PER_DAY, TANDEM_DAYS * MINUTES_PER_DAY
    means = []
    for seed in TANDEM_SEEDS:
        ciw.seed(seed)
        sim = ciw.Simulation(network)
        sim.simulate_until_max_time(t1 + 240.0)  # margin so that vehicles arriving before t1 have been served
        rows = [(r.node, r.arrival_date, r.waiting_time) for r in sim.get_all_records() if r.record_type == "service"]
        rec = np.array(rows)
        keep = (rec[:, 1] >= t0) & (rec[:, 1] < t1)
        means.append([rec[keep & (rec[:, 0] == node), 2].mean() for node in (1, 2)])
    return np.array(means)


def tandem_misses(undertow: np.ndarray, reference: np.ndarray) -> list[str]:
    misses: list[str] = []
    for s, name in enumerate(("station_a", "station_b")):
        # two-sample (Welch) interval over replications: Undertow minus ciw, expected 0
        misses += miss(f"{name} Wq Undertow - ciw", 0.0, welch_interval(undertow[:, s], reference[:, s]))
        # Erlang C per station by Burke's theorem: A is M/M/2 (Wq = 3.857 min), B is M/M/1 (Wq = 4.5 min)
        misses += miss(f"{name} Wq Undertow vs Erlang C (Burke)", TANDEM_THEORY[s], t_interval(undertow[:, s]))
    return misses


def test_ciw_reference_agrees_with_erlang_c(ciw_tandem_means: np.ndarray) -> None:
    # the reference simulator itself reproduces Erlang C + Burke, so disagreeing with it means something
    for s in range(2):
        check(miss("ciw Wq vs Erlang C (Burke)", TANDEM_THEORY[s], t_interval(ciw_tandem_means[:, s])))


def test_tandem_matches_ciw_and_burke(ciw_tandem_means: np.ndarray) -> None:
    assert TANDEM_THEORY[0] == pytest.approx(27 / 7)  # M/M/2, A = 1.5: P(wait) = 9/14, Wq = (9/14)/(1/6) (calc)
    assert TANDEM_THEORY[1] == pytest.approx(4.5)  # M/M/1, rho = 0.75: Wq = rho/(mu - lambda) (calc)
    check(tandem_misses(undertow_tandem_means(reference_world("tandem")), ciw_tandem_means))


@pytest.mark.parametrize("factor", [0.9, 1.1])
def test_tandem_checks_reject_service_mean_off_by_ten_percent(factor: float, ciw_tandem_means: np.ndarray) -> None:
    misses = tandem_misses(undertow_tandem_means(reference_world("tandem", scale_service=factor)), ciw_tandem_means)
    assert sum("ciw" in m for m in misses) == 2, misses


# -- 5. rosters: lanes that come and go by the hour ------------------------------------------------
def as_staffed(day_roster: np.ndarray) -> np.ndarray:
    """A 24-hour roster as serve_fifo's ``staffed`` argument: three days of the same pattern.

    Read either as a 72-hour horizon or as a 24-hour pattern that repeats, this is the same roster.
    """
    return np.tile(np.asarray(day_roster, dtype=np.int64), 3)


def staffed_at(t: np.ndarray, day_roster: np.ndarray, origin: float) -> np.ndarray:
    """Lanes on duty at absolute minutes t, for a 24-hour roster repeating from midnight ``origin``."""
    h = np.floor((np.asarray(t) - origin) / 60.0).astype(np.int64)
    return day_roster[h % 24]


def roster_misses(arrival, start, end, checked, day_roster, origin) -> list[str]:
    """Capacity, FIFO and causality of a serve_fifo output (checked vehicles in arrival order)."""
    out: list[str] = []
    a, s, e = arrival[checked], start[checked], end[checked]
    if np.any(s < a):
        out.append(f"{int(np.sum(s < a))} checks start before the vehicle arrives")
    if np.any(np.diff(s) < 0):
        out.append(f"FIFO broken: {int(np.sum(np.diff(s) < 0))} checks start before an earlier arrival's")
    if np.any(start[~checked] != arrival[~checked]) or np.any(end[~checked] != arrival[~checked]):
        out.append("an unchecked vehicle was delayed")
    if np.any(staffed_at(s, day_roster, origin) == 0):
        out.append("a check starts in an hour with nobody on duty")
    # checks in progress at t: started at or before t and not ended by t. The count only rises at a
    # start and the roster only falls at an hour boundary, so those instants are enough to look at.
    s_sorted, e_sorted = np.sort(s), np.sort(e)
    hours = origin + 60.0 * np.arange(0, math.ceil((e.max() - origin) / 60.0) + 1) if e.size else np.zeros(0)
    instants = np.concatenate([s, hours])
    busy = np.searchsorted(s_sorted, instants, side="right") - np.searchsorted(e_sorted, instants, side="right")
    over = busy > staffed_at(instants, day_roster, origin)
    if over.any():
        t = instants[np.argmax(over)]
        out.append(f"{int(over.sum())} instants with more checks than lanes on duty (first at minute {t:.1f})")
    return out


def lanes_used(arrival, service, checked, day_roster, origin, lanes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Replay serve_fifo one checked vehicle at a time to see which lane takes each check.

    Passing the FIFO floor (the previous start) in as the arrival reproduces the batch recursion exactly;
    the one entry of ``free`` that changes is the lane used.
    """
    free = np.full(lanes, -np.inf)
    floor = -np.inf
    idx = np.flatnonzero(checked)
    start, end, lane = np.empty(idx.size), np.empty(idx.size), np.empty(idx.size, dtype=np.int64)
    one = np.ones(1)
    staffed = as_staffed(day_roster)
    for k, i in enumerate(idx):
        before = free.copy()
        st, en, _, _ = serve_fifo(
            np.array([max(arrival[i], floor)]), service[i : i + 1], service[i : i + 1],
            np.zeros(1), one, one, 0, staffed, origin, free,
        )  # fmt: skip
        changed = np.flatnonzero(free != before)
        assert changed.size == 1
        start[k], end[k], lane[k], floor = st[0], en[0], changed[0], st[0]
    return start, end, lane


def off_duty_misses(start, end, lane, day_roster, origin) -> list[str]:
    """A check on a lane that is off duty at any moment of the check, or two checks at once on a lane."""
    out = []
    for s, e, ln in zip(start, end, lane, strict=True):
        h0 = int((s - origin) // 60.0)
        hours = np.arange(h0, max(h0, math.ceil((e - origin) / 60.0) - 1) + 1)
        off = day_roster[hours % 24] <= ln
        if off.any():
            out.append(f"check at minute {s:.1f}-{e:.1f} on lane {ln}, off duty in hour(s) {hours[off] % 24}")
    for ln in np.unique(lane):
        mine = np.argsort(start[lane == ln])
        if np.any(start[lane == ln][mine][1:] < end[lane == ln][mine][:-1]):
            out.append(f"lane {ln} runs two checks at once")
    return out


def check(misses: list[str]) -> None:
    assert not misses, "; ".join(misses)


@pytest.mark.parametrize("seed", range(8))
def test_serve_fifo_keeps_to_a_changing_roster(seed: int) -> None:
    rng = np.random.default_rng(seed)
    lanes, origin = 4, 1440.0 * 3
    day_roster = rng.integers(0, lanes + 1, size=24).astype(np.int64)  # 0-4 lanes on duty, hour by hour
    day_roster[9:15] = np.maximum(day_roster[9:15], 1)  # a core shift, so every check fits somewhere
    n = int(rng.poisson(24 * 5))  # about 5 vehicles an hour over one day
    arrival = origin + np.sort(rng.random(n) * MINUTES_PER_DAY)
    service = rng.lognormal(np.log(15.0), 0.7, n)  # long checks that do not fit short shifts happen
    u = rng.random(n)
    p = np.where(rng.random(n) < 0.5, 0.8, 1.0)  # some vehicles are not selected
    free = np.full(lanes, -np.inf)
    start, end, checked, busy = serve_fifo(arrival, service, service, u, p, p, 0, as_staffed(day_roster), origin, free)
    assert np.isfinite(start).all() and not busy.any()
    assert end.max() < origin + 2 * MINUTES_PER_DAY  # well inside the 3 days either reading of the roster gives
    np.testing.assert_allclose(end[checked] - start[checked], service[checked])
    check(roster_misses(arrival, start, end, checked, day_roster, origin))
    r_start, r_end, lane = lanes_used(arrival, service, checked, day_roster, origin, lanes)
    np.testing.assert_array_equal(r_start, start[checked])  # the replay is the same recursion
    np.testing.assert_array_equal(r_end, end[checked])
    check(off_duty_misses(r_start, r_end, lane, day_roster, origin))
    assert np.unique(lane).size > 1  # the test does exercise several lanes


def two_team_world() -> World:
    """One 3-lane station staffed by two overlapping teams (2 + 1 lanes); nobody on duty 21:00-06:00."""
    data = copy.deepcopy(read_yaml_mapping(REFERENCE / "mmc" / "world.yaml"))
    data["name"] = "Two-team roster test"
    data["traffic"]["vehicles_per_day"] = 60
    data["stations"][0]["lanes"] = 3
    data["roster"]["teams"] = [
        {"name": "early", "hours": [6, 15], "lanes": {"only_station": 2}},
        {"name": "late", "hours": [12, 21], "lanes": {"only_station": 1}},
    ]
    return parse_world(data, source="two-team roster (test)")


EXPECTED_ROSTER = np.array([0] * 6 + [2] * 6 + [3] * 3 + [1] * 6 + [0] * 3, dtype=np.int64)


def test_engine_keeps_to_a_two_team_roster() -> None:
    calls = []
    real = day_module.check_station
    signature = inspect.signature(real)

    def keep(*args):
        given = signature.bind(*args).arguments
        done = real(*args)
        # this world has no cargo or class factors: a check lasts its drawn duration
        service = given["service"][done.rows]
        calls.append((done.arrival, service, given["staffed"].copy(), given["origin"], (done.start, done.end, done.checked)))
        return done

    days = 10
    with mock.patch.object(day_module, "check_station", keep):
        simulate(two_team_world(), days, seed=7)
    assert len(calls) == days
    for k, (a, svc, staffed, origin, (st, en, chk)) in enumerate(calls):
        assert origin == k * MINUTES_PER_DAY
        np.testing.assert_array_equal(staffed[:24], EXPECTED_ROSTER)  # the two teams' lanes, hour by hour
        check(roster_misses(a, st, en, chk, EXPECTED_ROSTER, origin))  # within the day
        np.testing.assert_allclose(en[chk] - st[chk], svc[chk])
    # over the whole run: checks carry past midnight into the next day's hours
    arrival = np.concatenate([c[0] for c in calls])
    start, end, checked = (np.concatenate([c[4][k] for c in calls]) for k in range(3))
    check(roster_misses(arrival, start, end, checked, EXPECTED_ROSTER, 0.0))
    waited = start[checked] - arrival[checked]
    assert waited.max() > 6 * 60  # the night queue is real (vehicles arriving after 21:00 wait for 06:00)


def test_fifo_holds_across_midnight_with_a_roster() -> None:
    day_roster = np.array([2] + [1] * 23)  # 2 lanes, lane 1 on duty 00:00-01:00 only
    free = np.full(2, -np.inf)
    carry = FifoCarry.empty()  # the station's FIFO state, carried from day to day like ``free``
    ones = np.ones(2)
    day0 = serve_fifo(np.array([1380.0, 1381.0]), np.array([100.0, 90.0]), np.array([100.0, 90.0]),
                      np.zeros(2), ones, ones, 0, as_staffed(day_roster), 0.0, free, carry=carry)  # fmt: skip
    # the 90-minute check cannot fit lane 1's hour, so it waits for lane 0 (free at 1480)
    assert day0[0][1] == 1480.0
    day1 = serve_fifo(np.array([1441.0]), np.array([30.0]), np.array([30.0]),
                      np.zeros(1), ones[:1], ones[:1], 0, as_staffed(day_roster), 1440.0, free, carry=carry)  # fmt: skip
    # a vehicle that arrived at 1441 must not start before one that arrived at 1381 and is still queued
    assert day1[0][0] >= day0[0][1]


def test_a_late_vehicle_of_the_day_before_does_not_hold_back_one_that_arrived_first() -> None:
    """First-in-first-out across midnight runs by arrival, not by day (the definition of FIFO).

    Day 0's second vehicle reaches the station at 01:00 of day 1 (1500) and takes a
    free lane; day 1's vehicle arrived at 00:05 (1445), before it, and a third lane
    is free then, so it starts at once instead of queueing behind the later arrival.
    """
    staffed = as_staffed(np.full(24, 3))
    free, carry = np.full(3, -np.inf), FifoCarry.empty()
    one = np.ones(2)
    day0 = serve_fifo(np.array([1430.0, 1500.0]), np.array([100.0, 10.0]), np.array([100.0, 10.0]),
                      np.zeros(2), one, one, 0, staffed, 0.0, free, carry=carry)  # fmt: skip
    assert day0[0].tolist() == [1430.0, 1500.0]
    np.testing.assert_array_equal(carry.arrival, [1500.0])  # only checks starting after midnight are kept
    day1 = serve_fifo(np.array([1445.0]), np.array([5.0]), np.array([5.0]),
                      np.zeros(1), one[:1], one[:1], 0, staffed, 1440.0, free, carry=carry)  # fmt: skip
    # a single last-start floor would have held it until 1500; the other side (a vehicle that arrived after
    # a still-queued one of the day before waits for it) is test_fifo_holds_across_midnight_with_a_roster
    assert day1[0][0] == 1445.0


def test_the_queue_aware_rule_counts_vehicles_still_queued_from_the_day_before() -> None:
    """Queue length is what a vehicle finds on arrival (the definition), whichever day the others came on.

    One lane, 30-minute checks: day 0's five vehicles arriving at 23:50-23:54 start at
    1430, 1460, ..., 1550. At 1441 four of them are still waiting; with a threshold
    of 3 the station is busy, and a busy-only selection (p_normal 0, p_busy 1) checks
    the day-1 vehicle then; by 1600 they have all begun, and it is not busy.
    """
    staffed = as_staffed(np.full(24, 1))
    free, carry = np.full(1, -np.inf), FifoCarry.empty()
    service = np.full(5, 30.0)
    day0 = serve_fifo(np.arange(1430.0, 1435.0), service, service, np.zeros(5), np.ones(5), np.ones(5), 0,
                      staffed, 0.0, free, carry=carry)  # fmt: skip
    assert day0[0].tolist() == [1430.0, 1460.0, 1490.0, 1520.0, 1550.0]
    two = np.ones(2)
    start, _, checked, busy = serve_fifo(np.array([1441.0, 1600.0]), two, two, np.full(2, 0.5), np.zeros(2), two, 3,
                                         staffed, 1440.0, free, carry=carry)  # fmt: skip
    assert checked.tolist() == [True, False] and busy.tolist() == [True, False]
    assert start[0] == 1580.0  # behind the five that arrived before it
