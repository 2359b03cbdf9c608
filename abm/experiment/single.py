"""One run: a world, a number of days and a seed, written to a run directory.

Layout of a run directory::

    manifest.json     world hash, seed, days, package versions, command
    world.json        the validated world the run used (defaults filled in)
    truth/*.parquet   simulated truth (attempts, arrivals, exits)
    observed/*.parquet  what an agency holds (see abm.observed)
    daily.parquet     daily KPIs (truth_ columns from truth)
    methods.parquet   checks per day, method and cargo type
    queues.parquet    each station's waits, queue length and lane use per day and hour
    queue_hours.parquet  the same per station and hour of the day over the summarised days
    departures.parquet   each departure's vehicles booked, left and missed
    summary.json      the run's headline figures, each labelled truth or observed

The directory is written under a temporary name and renamed when complete, so a
run directory that exists is always whole.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..atomic import staged_folder
from ..errors import InputError
from ..model import PortModel
from ..records import QUEUE_HOURS_FILE, RecordBook, write_json, write_parquet, write_records
from ..run_files import record_files
from ..world.schema import World

WORLD_FILE = "world.json"

# Which record set each summary figure comes from.
SUMMARY_SOURCES: dict[str, str] = {
    "attempts": "truth",
    "interdictions": "observed",
    "detections": "observed",
    "crossings": "truth",
    "crossings_after_last_check": "truth",
    "persons": "truth",
    "no_vehicle": "truth",
    "displaced_out": "truth",
    "gave_up": "truth",
    "arrived": "truth",
    "in_system_at_end": "truth",
    "vehicles": "observed",
    "checks": "observed",
    "alarms": "observed",
    "false_alarms": "observed",
    "staff_hours": "observed",
    "time_in_port_p50_min": "observed",
    "time_in_port_p95_min": "observed",
    "missed_departure_share": "observed",
}

# What people read for each figure; placeholders take the crossing's own words (abm.world.words.Words.fill).
SUMMARY_LABELS: dict[str, str] = {
    "days": "Days simulated",
    "attempts": "Attempts (person-attempts)",
    "interdictions": "Stopped at boarding points (persons)",
    "detections": "Found in checks (persons)",
    "crossings": "Crossed unfound (persons)",
    "crossings_after_last_check": "... of them boarded after the last check",
    "persons": "People who tried",
    "no_vehicle": "Attempts with no vehicle to board",
    "displaced_out": "Left for routes outside the model",
    "gave_up": "Gave up",
    "arrived": "Arrived in the area",
    "in_system_at_end": "Still trying at the end",
    "vehicles": "Vehicles",
    "checks": "Checks",
    "alarms": "Alarms",
    "false_alarms": "False alarms (nobody found)",
    "staff_hours": "Staff-hours",
    "time_in_port_p50_min": "{Time_at_site}, median (minutes)",
    "time_in_port_p95_min": "{Time_at_site}, 95th percentile (minutes)",
    "missed_departure_share": "{Missed} (% of vehicles)",
}
METHOD_LABELS = {"checks": "checks", "alarms": "alarms", "false_alarms": "false alarms", "found": "persons found",
                 "sensitivity": "sensitivity"}

# Per-method figures, as method_<name>_<figure>: counts are vehicles checked, found counts persons.
METHOD_SUMMARY_SOURCES: dict[str, str] = {
    "checks": "observed",
    "alarms": "observed",
    "false_alarms": "observed",  # alarms after which nothing was found
    "found": "observed",  # persons detected by the method
    "sensitivity": "truth",  # occupied vehicles checked in which people were found / occupied vehicles checked
}

PACKAGES = ("undertow", "mesa", "numpy", "pandas", "scipy", "pyarrow", "numba", "pydantic")


class RunDirectoryExists(InputError):
    """The output directory already holds something; runs never overwrite."""


def refuse_existing(out: Path) -> None:
    """Raise RunDirectoryExists when ``out`` exists: a run never writes over anything."""
    if out.exists():
        raise RunDirectoryExists(f"{out}: already exists; choose another output directory (nothing was overwritten)")


def package_versions() -> dict[str, str]:
    """Installed versions of the packages a run depends on."""
    versions = {"python": sys.version.split()[0]}
    for name in PACKAGES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def summarise(book: RecordBook, days: int, warmup: int = 0) -> dict[str, Any]:
    """The headline figures of a finished run (people counts are persons).

    With ``warmup`` > 0 the figures cover only days ``warmup`` onward (``days``
    of them); the records themselves keep every day.
    """
    truth = book.truth_tables()
    attempts, exits, arrivals = truth["attempts"], truth["exits"], truth["arrivals"]
    daily = book.daily_table()
    tip, missed = book.time_in_port(), book.missed()
    if warmup:
        attempts = attempts[attempts["day"] >= warmup]
        exits = exits[exits["day"] >= warmup]
        arrivals = arrivals[arrivals["day"] >= warmup]
        # Per-vehicle arrays are concatenated day by day, so the warm-up's vehicles come first.
        skipped = int(daily.loc[daily["day"] < warmup, "vehicles"].sum()) if len(daily) else 0
        tip, missed = tip[skipped:], missed[skipped:]
        daily = daily[daily["day"] >= warmup]

    def persons(outcome: str) -> int:
        return int(attempts.loc[attempts["outcome"] == outcome, "persons"].sum())

    def exited(state: str) -> int:
        return int(exits.loc[exits["state"] == state, "persons"].sum())

    finite = tip[np.isfinite(tip)]
    after_last = [p.name for p in book.layout.world.boarding_points if p.before_station == "departure"]
    summary: dict[str, Any] = {
        "days": days,
        "attempts": int(attempts["persons"].sum()),
        "interdictions": persons("interdicted"),
        "detections": persons("detected"),
        "crossings": persons("crossed"),
        # boarded after every station: no check could have found them, so no record can show them
        "crossings_after_last_check": int(
            attempts.loc[(attempts["outcome"] == "crossed") & attempts["point"].isin(after_last), "persons"].sum()
        ),
        # distinct persons who tried in the window (a group keeps its size across its attempts)
        "persons": int(attempts.groupby("agent_id")["persons"].max().sum()) if len(attempts) else 0,
        "no_vehicle": persons("no_vehicle"),
        "displaced_out": exited("displaced_out"),
        "gave_up": exited("gave_up"),
        "arrived": int(arrivals["persons"].sum()),
        "in_system_at_end": int(daily["truth_in_system"].iloc[-1]) if len(daily) else 0,
        "vehicles": int(daily["vehicles"].sum()) if len(daily) else 0,
        "checks": int(daily["checks"].sum()) if len(daily) else 0,
        "alarms": int(daily["alarms"].sum()) if len(daily) else 0,
        "false_alarms": int(daily["false_alarms"].sum()) if len(daily) else 0,
        "staff_hours": float(daily["staff_hours"].sum()) if len(daily) else 0.0,
        "time_in_port_p50_min": float(np.percentile(finite, 50)) if finite.size else None,
        "time_in_port_p95_min": float(np.percentile(finite, 95)) if finite.size else None,
        # a crossing without departures (a land border) has no departures to miss
        "missed_departure_share": float(missed.mean()) if missed.size and book.layout.world.departures else None,
    }
    method_sources = _add_method_figures(summary, book, attempts, warmup)
    if warmup:
        summary["warmup_days"] = warmup
    summary["sources"] = {key: SUMMARY_SOURCES[key] for key in summary if key in SUMMARY_SOURCES}
    summary["sources"].update(method_sources)
    return summary


def _add_method_figures(
    summary: dict[str, Any], book: RecordBook, attempts: pd.DataFrame, warmup: int
) -> dict[str, str]:
    """Add method_<name>_<figure> to ``summary`` (days from ``warmup`` on); return their sources."""
    methods = book.methods_table()
    methods = methods[methods["day"] >= warmup]
    totals = methods.groupby("method").sum(numeric_only=True)
    found = attempts[attempts["outcome"] == "detected"].groupby("method")["persons"].sum()
    sources = {}
    for name in book.layout.world.method_names:
        row = totals.loc[name] if name in totals.index else None
        occupied = int(row["truth_occupied_checks"]) if row is not None else 0
        figures = {
            "checks": int(row["checks"]) if row is not None else 0,
            "alarms": int(row["alarms"]) if row is not None else 0,
            "false_alarms": int(row["false_alarms"]) if row is not None else 0,
            "found": int(found.get(name, 0)),
            "sensitivity": int(row["truth_found"]) / occupied if occupied else None,
        }
        for figure, value in figures.items():
            key = f"method_{name}_{figure}"
            summary[key] = value
            sources[key] = METHOD_SUMMARY_SOURCES[figure]
    return sources


def simulate(world: World, days: int, seed: int, progress: Callable[[int], None] | None = None) -> PortModel:
    """Run the model for ``days`` operating days; ``progress`` is called after each day."""
    model = PortModel(world, seed=seed)
    for _ in range(days):
        model.step()
        if progress is not None:
            progress(1)
    return model


def run_to_directory(
    world: World,
    world_hash: str,
    days: int,
    seed: int,
    out: Path,
    command: list[str] | None = None,
    progress: Callable[[int], None] | None = None,
    warmup: int = 0,
    manifest_extra: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Simulate and write a complete run directory atomically; returns the summary.

    ``warmup`` days are simulated before the ``days`` the summary covers (the
    records keep them all); ``manifest_extra`` adds keys to the manifest, e.g.
    which experiment run this is.
    """
    refuse_existing(Path(out))
    model = simulate(world, warmup + days, seed, progress)
    return write_run(model, world, world_hash, days, seed, out, command, warmup, manifest_extra)


def write_run(
    model: PortModel,
    world: World,
    world_hash: str,
    days: int,
    seed: int,
    out: Path,
    command: list[str] | None = None,
    warmup: int = 0,
    manifest_extra: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Write a simulated model's run directory atomically (arguments as for :func:`run_to_directory`); returns
    the summary."""
    out = Path(out)
    refuse_existing(out)
    with staged_folder(out) as staging:  # a name of this call's own: never a folder the user (or another writer) made
        write_records(model.records, staging)
        # pooled over the days the summary covers, so its percentiles leave the warm-up out as the summary does
        write_parquet(model.records.queue_hours_table(warmup, warmup + days - 1), staging / QUEUE_HOURS_FILE,
                      "queue_hours")
        summary = summarise(model.records, days, warmup)
        write_json(summary, staging / "summary.json")
        write_json(world.model_dump(mode="json"), staging / WORLD_FILE)
        manifest: dict[str, Any] = {
            "world_name": world.name,
            "world_sha256": world_hash,
            "seed": seed,
            "days": days,
            "packages": package_versions(),
            "command": command or [],
        }
        if warmup:
            manifest["warmup_days"] = warmup
        manifest.update(manifest_extra or {})
        write_json(manifest, staging / "manifest.json")
        record_files(staging)  # last: what a complete run holds, for checking it later
    return summary
