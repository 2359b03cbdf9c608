"""Comparing two windows of records: within one run around an intervention day, or between two runs."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ...experiment.single import WORLD_FILE
from ...records import write_json
from ...world.schema import DisplacementAreas
from ..net_effect import net_effect
from ..policy_table import hazard_weighted_share
from .measures import _option_keys, _share_shift, _weighted
from .result import DIMENSIONS, TRUTH, BeforeAfter, DisplacementResult, Window
from .runs import DisplacementInputError, _Run, _in_window, _read_run


DISPLACEMENT_FILE = "displacement.json"


def _compare(
    design: str,
    label: str,
    first: _Run,
    second: _Run,
    before: Window,
    after: Window,
    areas: DisplacementAreas | None,
    areas_from: str,
    notes: list[str],
    paired: bool = False,
) -> DisplacementResult:
    """Every measure for two windows; ``first`` supplies the option space and hazards; ``paired`` days pair up."""
    att_b, att_a = _in_window(first.attempts, before), _in_window(second.attempts, after)
    for frame, window, side in ((att_b, before, "before"), (att_a, after, "after")):
        if frame["persons"].sum() == 0:
            raise DisplacementInputError(
                f"{window.run}: no attempts in {side} window (days {window.start_day}-{window.end_day - 1})"
            )
    shares = tuple(_share_shift(dim, _option_keys(first.world, dim), att_b, att_a) for dim in DIMENSIONS)
    weighted = _weighted(first.world, areas, att_b, att_a) if areas is not None else None

    def per_day(frame: pd.DataFrame, window: Window) -> float:
        return float(frame["persons"].sum()) / window.days

    def exits_per_day(run: _Run, window: Window) -> float:
        frame = _in_window(run.exits, window)
        return per_day(frame[frame["state"] == "displaced_out"], window)

    def daily(frame: pd.DataFrame, window: Window, count: str | None) -> np.ndarray:
        """Per day of the window: the sum of ``count`` (persons), or the number of rows when it is None."""
        values = frame[count] if count is not None else pd.Series(1, index=frame.index)
        per = values.groupby(frame["day"]).sum()
        return per.reindex(range(window.start_day, window.end_day), fill_value=0).to_numpy(float)

    crossed_b, crossed_a = att_b[att_b["outcome"] == "crossed"], att_a[att_a["outcome"] == "crossed"]
    # One encounter row is one person found, so the row count is persons.
    effect = net_effect(
        (daily(crossed_b, before, "persons"), daily(crossed_a, after, "persons")),
        (daily(_in_window(first.detections, before), before, None),
         daily(_in_window(second.detections, after), after, None)),
        paired=paired,
    )
    hazard = {p.name: p.hazard for p in first.world.boarding_points}
    depth_hazard = {d.name: d.hazard for d in first.world.depths}
    return DisplacementResult(
        design=design,
        label=label,
        before=before,
        after=after,
        shares=shares,
        weighted=weighted,
        areas_from=areas_from,
        crossings_vs_detections=effect,
        attempts_per_day=BeforeAfter("attempts_per_day", TRUTH, per_day(att_b, before), per_day(att_a, after)),
        displaced_out_per_day=BeforeAfter(
            "displaced_out_per_day", TRUTH, exits_per_day(first, before), exits_per_day(second, after)
        ),
        hazard_weighted_share=BeforeAfter(
            "hazard_weighted_share", TRUTH,
            hazard_weighted_share(att_b, hazard, depth_hazard), hazard_weighted_share(att_a, hazard, depth_hazard),
        ),
        notes=tuple(notes),
    )


# -- the public entry points ----------------------------------------------------------------------------
def displacement_within_run(
    run_dir: str | Path,
    day: int | None = None,
    areas: DisplacementAreas | None = None,
) -> DisplacementResult:
    """Compare the days before ``day`` with the days from it, in one run.

    ``day`` defaults to the first intervention day in the run's world.json.
    Days count from the start of the records; the before window starts after
    the run's warm-up (manifest ``warmup_days``), as the run's own summary does.
    ``areas`` (response / buffer / control) default to the world's
    ``displacement`` section; with neither, the WDQ is not computed.
    """
    run = _read_run(run_dir)
    world = run.world
    notes: list[str] = []
    if day is None:
        if not world.interventions:
            raise DisplacementInputError(
                f"{run.path / WORLD_FILE}: interventions: none defined, so there is no day to compare around"
            )
        day = min(i.day for i in world.interventions)
    start = run.warmup_days
    if not start < day < run.days:
        raise DisplacementInputError(
            f"{run.path}: day {day} leaves no days on one side (the run has days {start}-{run.days - 1} after warm-up)"
        )
    at_day = [i.name for i in world.interventions if i.day == day]
    later = [f"day {i.day}: {i.name}" for i in world.interventions if i.day > day]
    if later:
        notes.append(f"later interventions also fall in the after window ({'; '.join(later)})")
    label = f"Displacement within {run.path}: before vs from day {day}" + (f" ({', '.join(at_day)})" if at_day else "")
    areas, areas_from = _choose_areas(areas, [run])
    return _compare(
        "within_run", label, run, run, Window(str(run.path), start, day), Window(str(run.path), day, run.days),
        areas, areas_from, notes,
    )


def displacement_between_runs(
    run_a: str | Path,
    run_b: str | Path,
    warmup: int | None = None,
    areas: DisplacementAreas | None = None,
) -> DisplacementResult:
    """Compare a baseline run (A, "before") with a policy run (B, "after"), dropping ``warmup`` days of each.

    ``warmup`` None drops the runs' own warm-up (the longer of the two, from
    their manifests). Use the same seed for both (common random numbers): the
    days then pair up and the test is paired; a note says when the seeds differ.
    ``areas`` default to run B's world ``displacement`` section, then run A's.
    """
    first, second = _read_run(run_a), _read_run(run_b)
    if warmup is None:
        warmup = max(first.warmup_days, second.warmup_days)
    if warmup < 0:
        raise DisplacementInputError(f"--warmup: expected 0 or more days, got {warmup}")
    for run in (first, second):
        if warmup >= run.days:
            raise DisplacementInputError(f"{run.path}: a warm-up of {warmup} days leaves none of its {run.days} days; "
                                         f"give a shorter --warmup")
    notes: list[str] = []
    for run in (first, second):
        if run.warmup_days > warmup:
            notes.append(f"{run.path} ran a {run.warmup_days}-day warm-up that this comparison includes")
    if first.seed != second.seed:
        notes.append(f"seeds differ ({first.seed} vs {second.seed}): differences include chance, not only the policy")
    for what, label in (("point_names", "boarding points"), ("band_names", "time bands"), ("class_names", "classes")):
        if getattr(first.world, what) != getattr(second.world, what):
            notes.append(f"the runs' worlds differ in their {label}; shares use run A's option space")
    areas, areas_from = _choose_areas(areas, [second, first])
    label = f"Displacement between runs: baseline {first.path} vs policy {second.path}"
    paired = first.seed is not None and first.seed == second.seed and first.days == second.days
    return _compare(
        "between_runs", label, first, second, Window(str(first.path), warmup, first.days),
        Window(str(second.path), warmup, second.days), areas, areas_from, notes, paired,
    )


def _choose_areas(areas: DisplacementAreas | None, runs: list[_Run]) -> tuple[DisplacementAreas | None, str]:
    """The areas passed in, else the first run's world that defines them; and where they came from."""
    if areas is not None:
        return areas, "areas passed in"
    for run in runs:
        if run.world.displacement is not None:
            return run.world.displacement, f"areas from {run.path / WORLD_FILE}"
    return None, "no displacement areas in world.json and none passed in"


def write_displacement(run_dir: str | Path, day: int | None = None) -> DisplacementResult:
    """Compute :func:`displacement_within_run` and write ``RUN_DIR/displacement.json`` atomically."""
    result = displacement_within_run(run_dir, day)
    write_json(result.to_dict(), Path(run_dir) / DISPLACEMENT_FILE)
    return result
