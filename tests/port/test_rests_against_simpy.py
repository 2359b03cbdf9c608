"""Resting lanes: the compiled recursion against an independent SimPy model of the same station.

SimPy (a general-purpose discrete-event library, test-only dependency) runs the
station as events: a process per vehicle, a FIFO resource with one slot per
lane, and each lane's minutes worked kept beside it. The rule both follow is
the one in ``abm.port.queues`` and DEVELOPERS.md (dog-team fatigue): a lane that
has worked ``work_minutes`` or more when a check ends rests ``rest_minutes``
before its next check, and any gap that long between its checks counts as a
rest; checks start in arrival order, and a free lane takes the head of the
queue, the lowest-numbered lane when several are free. Every lane is on duty
all day, so the roster plays no part. Fed the same arrivals and durations, the
two must start every check at the same minute.
"""

from __future__ import annotations

import heapq
import math

import numpy as np
import pytest
import simpy

from abm.port.queues import serve_fifo

LANES, WORK, REST = 3, 40.0, 20.0


def simpy_starts(arrival: np.ndarray, service: np.ndarray, lanes: int, work: float, rest: float) -> np.ndarray:
    env = simpy.Environment()
    slots = simpy.Resource(env, capacity=lanes)  # a lane resting keeps its slot
    idle = list(range(lanes))  # a heap: the lowest free lane takes the next vehicle
    free = [-math.inf] * lanes  # end of each lane's last check or rest
    worked = [0.0] * lanes
    start = np.full(arrival.shape[0], np.nan)

    def rest_then_free(lane: int, request: simpy.Resource, minutes: float):
        yield env.timeout(minutes)
        free[lane] = env.now
        slots.release(request)
        heapq.heappush(idle, lane)

    def vehicle(i: int):
        request = slots.request()
        yield request
        lane = heapq.heappop(idle)
        start[i] = env.now
        done = 0.0 if env.now - free[lane] >= rest else worked[lane]
        yield env.timeout(service[i])
        free[lane] = env.now
        done += service[i]
        if done >= work:
            worked[lane] = 0.0
            env.process(rest_then_free(lane, request, rest))
        else:
            worked[lane] = done
            slots.release(request)
            heapq.heappush(idle, lane)

    def source():
        for i, t in enumerate(arrival.tolist()):
            yield env.timeout(t - env.now)
            env.process(vehicle(i))

    env.process(source())
    env.run()
    return start


@pytest.mark.parametrize("seed", range(3))
def test_resting_lanes_start_every_check_when_simpy_does(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 3000
    # a vehicle every 3 minutes for three lanes of 5-minute checks that rest a third of the time: load about
    # 0.83 with the rests, 0.56 without
    arrival = np.cumsum(rng.exponential(3.0, n))
    service = rng.lognormal(np.log(5.0) - 0.08, 0.4, n)
    ones = np.ones(n)
    start, end, checked, _ = serve_fifo(
        arrival, service, service, np.zeros(n), ones, ones, 0, np.full(24, LANES), 0.0, np.full(LANES, -np.inf),
        np.zeros(LANES), WORK, REST,
    )  # fmt: skip
    assert checked.all()
    np.testing.assert_allclose(start, simpy_starts(arrival, service, LANES, WORK, REST), rtol=0, atol=1e-9)
    np.testing.assert_allclose(end - start, service)
    # the rests matter here: without them the same vehicles wait several times less
    plain = serve_fifo(arrival, service, service, np.zeros(n), ones, ones, 0, np.full(24, LANES), 0.0, np.full(LANES, -np.inf))
    assert (start - arrival).mean() > 2 * (plain[0] - arrival).mean()
