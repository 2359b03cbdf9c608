"""What a plan will need, worked out before anything runs, and the plans refused for it.

A world of a billion lorries a day, a batch of ten million replications or a
run of a billion days passes every schema check and then grows until memory
runs out. Every command estimates its plan from the validated files: runs,
simulated vehicle-days, the records' disk and the peak memory of one worker
(a run holds its busiest day's vehicles, then keeps its records). A plan that
cannot fit this machine (one worker's memory, or the output disk) is refused
whatever is asked; one above the ceilings below is refused unless
``--allow-large`` says it is meant (a cluster can carry it).

The rates were measured on the 2-core reference machine on Kestrel Quay
(2026-12-04): about 350 MB per worker before any vehicle, 600 bytes per vehicle
of the busiest day, 120 bytes of memory and 2 bytes of disk per simulated
vehicle-day (records are aggregated per hour), and 64 kB of disk per run.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

BASE_MEMORY = 350e6  # bytes: the interpreter, numpy, numba's compiled engine
ACTIVE_BYTES = 600.0  # per vehicle of the busiest day, held while the day is simulated
RECORD_MEMORY = 120.0  # per simulated vehicle-day, kept until the run is written
RECORD_DISK = 2.0  # per simulated vehicle-day on disk
RUN_DISK = 64e3  # per run directory, whatever its length
# Ceilings past which --allow-large is needed (common practice, no source): about a day of this machine.
MAX_VEHICLE_DAYS = 2e10
MAX_RUNS = 100_000
MAX_WORKER_MEMORY = 8e9
SHOWN_VEHICLE_DAYS = 1e8  # plans above this say what they will need before they start


@dataclass(frozen=True)
class PlanSize:
    """Runs of ``days`` simulated days (warm-up included) each, on worlds of at most ``busiest_day`` vehicles."""

    runs: int
    days: int
    busiest_day: float

    @property
    def vehicle_days(self) -> float:
        return float(self.runs) * self.days * self.busiest_day

    @property
    def worker_memory(self) -> float:
        return BASE_MEMORY + ACTIVE_BYTES * self.busiest_day + RECORD_MEMORY * self.days * self.busiest_day

    @property
    def disk(self) -> float:
        return self.runs * (RUN_DISK + RECORD_DISK * self.days * self.busiest_day)

    def describe(self) -> str:
        return (f"plan: {self.runs:,} run{'s' if self.runs != 1 else ''} x {self.days:,} days of up to {self.busiest_day:,.0f} vehicles = about "
                f"{self.vehicle_days:.2g} vehicle-days; records about {_size(self.disk)}; peak memory about "
                f"{_size(self.worker_memory)} per worker")


def _size(n: float) -> str:
    for unit, scale in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6)):
        if n >= scale:
            return f"{n / scale:,.1f} {unit}"
    return f"{n / 1e3:,.0f} kB"


def busiest_day(world: dict[str, Any]) -> float:
    """Vehicles on a world's busiest weekday (``traffic.vehicles_per_day`` x the largest weekday factor)."""
    traffic = world.get("traffic", {})
    factors = traffic.get("weekday_factors") or [1.0]
    return float(traffic.get("vehicles_per_day", 0)) * max(float(f) for f in factors)


def physical_memory() -> float:
    """Bytes of memory on this machine (infinite where the system does not say)."""
    try:
        return float(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return float("inf")


def _free_disk(out: Path | None) -> float:
    if out is None:
        return float("inf")
    probe = out
    while not probe.exists() and probe != probe.parent:
        probe = probe.parent
    try:
        return float(shutil.disk_usage(probe).free)
    except OSError:
        return float("inf")


@dataclass(frozen=True)
class Keys:
    """Where the user sets each part of the plan, as messages should name it."""

    vehicles: str  # e.g. "traffic.vehicles_per_day"
    days: str  # e.g. "days" or "--days"
    runs: str  # e.g. "replications"
    vehicles_note: str = ""  # e.g. " (in the world file)", when the file refused is not the world's


def refuse(
    size: PlanSize, keys: Keys, out: Path | None, allow_large: bool, error: Callable[[str, str], Exception]
) -> None:
    """Raise ``error(key, message)`` when the plan must not start (see the module's docstring)."""
    problem = _refusal(size, keys, out, allow_large)
    if problem is not None:
        raise error(*problem)


def _refusal(size: PlanSize, keys: Keys, out: Path | None, allow_large: bool) -> tuple[str, str] | None:
    vehicles = keys.vehicles + keys.vehicles_note
    memory = physical_memory()
    if size.worker_memory > memory:
        active = ACTIVE_BYTES * size.busiest_day > RECORD_MEMORY * size.days * size.busiest_day
        key, shown = (keys.vehicles, vehicles) if active else (keys.days, keys.days)
        return key, (f"one run would need about {_size(size.worker_memory)} of memory, more than this machine's "
                     f"{_size(memory)}; lower {shown} ({size.describe()})")
    free = _free_disk(out)
    if size.disk > free:
        return keys.runs, (f"the records would need about {_size(size.disk)} of disk, more than the "
                           f"{_size(free)} free there; lower {keys.runs} or {keys.days} ({size.describe()})")
    if allow_large:
        return None
    hint = "or pass --allow-large if it is meant (e.g. on a cluster)"
    if size.runs > MAX_RUNS:
        return keys.runs, f"{size.runs:,} runs is more than {MAX_RUNS:,}; lower {keys.runs}, {hint}"
    if size.worker_memory > MAX_WORKER_MEMORY:
        return keys.vehicles, (f"one run would need about {_size(size.worker_memory)} of memory, more than "
                               f"{_size(MAX_WORKER_MEMORY)}; lower {vehicles} or {keys.days}, {hint}")
    if size.vehicle_days > MAX_VEHICLE_DAYS:
        return keys.days, (f"about {size.vehicle_days:.2g} simulated vehicle-days is more than "
                           f"{MAX_VEHICLE_DAYS:.0e}; lower {keys.days} or {keys.runs}, {hint}")
    return None
