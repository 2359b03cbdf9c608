"""A batch folder as a briefing reads it: the experiment, its factors and roles, the summary table.

:func:`load_batch` reads ``OUT/experiment.json`` and ``OUT/summary.parquet``
(see :mod:`abm.experiment.store`) and decides the roles factors play:

* the **behaviour** factor varies the behaviour model (``adversary.behaviour``,
  directly or inside a bundle);
* the **policy** factor is the one compared with a baseline: the factor named
  by ``--baseline`` (the factor holding that level), else the first factor of
  levels with a baseline in the experiment file, else the first factor of
  levels other than behaviour, with its first level as the baseline;
* every other factor (and behaviour) defines a **scenario**: points are
  compared with the baseline point of the same scenario.

With a baseline chosen here the comparison is rebuilt from the design, so a
``--baseline`` other than the file's gives pairs the file never named.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from ..errors import InputError
from ..experiment.store import EXPERIMENT_FILE, RUNS_DIR, SUMMARY_TABLE
from ..run_files import damage
from ..world.words import Words, words_from_data

BEHAVIOUR_PATH = "adversary.behaviour"


class BriefingInputError(InputError):
    """A folder that cannot be briefed: no batch, no completed run, an unknown baseline."""


@dataclass(frozen=True)
class FactorView:
    """One factor of the experiment as the briefing describes it."""

    label: str
    path: str | None
    levels: tuple[Any, ...] = ()  # level labels (empty for a sampled range)
    notes: Mapping[str, str] = field(default_factory=dict)  # bundle name -> its note
    display: Mapping[str, str] = field(default_factory=dict)  # bundle name -> its label: in the file
    baseline: Any = None
    low: float | None = None
    high: float | None = None
    changes_behaviour: bool = False

    @property
    def is_range(self) -> bool:
        return not self.levels


@dataclass(frozen=True)
class BatchView:
    """What a briefing needs to know about one batch folder."""

    out: Path
    name: str
    note: str
    experiment_file: str
    command: tuple[str, ...]
    design: str
    days: int
    warmup: int
    replications: int
    seed: int  # the experiment's root seed
    seeds: tuple[int, ...]  # one per replication, derived from the root seed
    world_name: str
    world: dict[str, Any]  # world.json of the baseline point's first run
    factors: tuple[FactorView, ...]
    summary: pd.DataFrame
    policy: str | None
    baseline: Any
    baseline_source: str  # how the baseline was chosen, in words
    behaviour: str | None
    compare_to: dict[int, int | None]
    points: pd.DataFrame  # one row per completed design point: point, factor labels, runs
    calibration: Mapping[str, Any] | None = None  # experiment.json's account of the posterior the unknowns came from

    @property
    def labels(self) -> list[str]:
        """Factor column names, in file order."""
        return [f.label for f in self.factors]

    @property
    def scenario_labels(self) -> list[str]:
        """Factors that define a scenario: every factor but the policy."""
        return [f.label for f in self.factors if f.label != self.policy]

    @property
    def runs(self) -> int:
        return len(self.summary)

    @property
    def words(self) -> Words:
        """The crossing's own words for its departures and place, from the baseline's world."""
        return words_from_data(self.world)

    @property
    def start_day(self) -> int:
        """First day the summary covers (after the warm-up)."""
        return self.warmup

    @property
    def end_day(self) -> int:
        """Last day the summary covers (inclusive)."""
        return self.warmup + self.days - 1

    def factor(self, label: str) -> FactorView:
        return next(f for f in self.factors if f.label == label)

    def run_dir(self, run_id: str) -> Path:
        return self.out / RUNS_DIR / run_id

    def point_world(self, point: int) -> dict[str, Any]:
        """The world a design point ran (world.json of its first completed run)."""
        rows = self.summary[self.summary["point"] == point].sort_values("replication")
        return json.loads((self.run_dir(str(rows["run_id"].iloc[0])) / "world.json").read_text(encoding="utf-8"))

    def scenario_of(self, point: int) -> tuple[Any, ...]:
        """The scenario values of a point (the same for a policy and its baseline)."""
        row = self.points.loc[point]
        return tuple(row[label] for label in self.scenario_labels)

    def scenario_name(self, point: int) -> str:
        """A scenario in words, e.g. "adaptive behaviour" or "attempt_chance = 0.4"."""
        parts = []
        for label in self.scenario_labels:
            value = self.points.loc[point, label]
            parts.append(f"{value} behaviour" if label == self.behaviour else f"{label} = {shown_value(value)}")
        return ", ".join(parts) if parts else "the scenario"

    def policy_key(self, point: int) -> str:
        """The policy level's identifier as the experiment file names it (or the point's name without a policy)."""
        if self.policy is None:
            return f"point {point}"
        return str(self.points.loc[point, self.policy])

    def policy_of(self, point: int) -> str:
        """The policy level's display label: its ``label:`` in the experiment file, else its name in words."""
        key = self.policy_key(point)
        return key if self.policy is None else self.policy_label(key)

    def policy_label(self, key: Any) -> str:
        """A policy level's display label from its identifier."""
        assert self.policy is not None
        return self.factor(self.policy).display.get(str(key)) or display_label(str(key))


def display_label(name: str) -> str:
    """An identifier in words for people: "night_surge" -> "Night surge"."""
    words = str(name).replace("_", " ").strip()
    return words[:1].upper() + words[1:]


def shown_value(value: Any) -> str:
    """A factor value as text: whole numbers as such, other numbers to three significant figures."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return str(value)
    return str(int(value)) if float(value).is_integer() else f"{value:.3g}"


def _level_text(value: Any) -> str:
    """A factor level as text; numbers read back from Parquet are numpy scalars, which json cannot write."""
    if isinstance(value, str):
        return value
    return json.dumps(value.item() if hasattr(value, "item") else value)


def _factor_views(record: Mapping[str, Any]) -> list[FactorView]:
    specs = record["experiment"].get("factors", [])
    views = []
    for planned, spec in zip(record["factors"], specs, strict=True):
        levels = tuple(planned.get("levels") or ())
        notes: dict[str, str] = {}
        display: dict[str, str] = {}
        behaviour = planned.get("path") == BEHAVIOUR_PATH
        for raw in spec.get("levels") or ():
            if isinstance(raw, dict):
                notes[str(raw.get("name"))] = str(raw.get("note") or "")
                if raw.get("label"):
                    display[str(raw.get("name"))] = str(raw["label"])
                behaviour = behaviour or BEHAVIOUR_PATH in (raw.get("set") or {})
        low, high = planned.get("range") or (None, None)
        views.append(
            FactorView(
                label=planned["label"], path=planned.get("path"), levels=levels, notes=notes, display=display,
                baseline=planned.get("baseline"), low=low, high=high, changes_behaviour=behaviour,
            )
        )
    return views


def _choose_policy(
    factors: list[FactorView], behaviour: str | None, asked: str | None
) -> tuple[str | None, Any, str]:
    """(policy factor, baseline level, how it was chosen) following the module's rules."""
    candidates = [f for f in factors if not f.is_range and f.label != behaviour]
    if asked is not None:
        for factor in candidates + [f for f in factors if f.label == behaviour]:
            for level in factor.levels:
                if asked in (str(level), _level_text(level)):
                    return factor.label, level, f"chosen with --baseline {asked}"
        shown = "; ".join(f"{f.label}: {', '.join(_level_text(v) for v in f.levels)}" for f in factors if f.levels)
        raise BriefingInputError(f"--baseline {asked}: no factor has that level (levels: {shown or 'none'})")
    for factor in candidates:
        if factor.baseline is not None:
            return factor.label, factor.baseline, "the experiment file's baseline"
    if candidates:
        first = candidates[0]
        return first.label, first.levels[0], "the first level (the experiment file names no baseline)"
    return None, None, "none: the design compares no policies"


def _same(a: Any, b: Any) -> bool:
    """Level equality as the summary stores it (text levels may come back as text, numbers as numbers)."""
    if isinstance(a, bool) or isinstance(b, bool):
        return type(a) is type(b) and a == b
    return a == b or _level_text(a) == _level_text(b)


def _comparators(points: pd.DataFrame, labels: list[str], policy: str | None, baseline: Any) -> dict[int, int | None]:
    """Each point against the point of the same scenario whose policy is the baseline (None for baselines)."""
    if policy is None:
        return {int(p): None for p in points.index}
    others = [label for label in labels if label != policy]
    bases = [int(q) for q, row in points.iterrows() if _same(row[policy], baseline)]
    out: dict[int, int | None] = {}
    for point, row in points.iterrows():
        if int(point) in bases:
            out[int(point)] = None
            continue
        match = [q for q in bases if all(_same(points.loc[q, o], row[o]) for o in others)]
        out[int(point)] = match[0] if match else None
    return out


def load_batch(out: str | Path, baseline: str | None = None) -> BatchView:
    """Read a batch folder for a briefing; raise BriefingInputError when it holds nothing to brief."""
    out = Path(out)
    record_path, summary_path = out / EXPERIMENT_FILE, out / SUMMARY_TABLE
    if not record_path.is_file():
        raise BriefingInputError(f"{out}: no {EXPERIMENT_FILE}; is it a batch folder written by undertow batch?")
    if not summary_path.is_file():
        raise BriefingInputError(f"{out}: no {SUMMARY_TABLE}; finish the batch (undertow batch ... --resume) first")
    try:
        record = json.loads(record_path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise BriefingInputError(f"{record_path}: damaged (not readable JSON: {exc.__class__.__name__}); the batch "
                                 "cannot be briefed") from None
    try:
        summary = pd.read_parquet(summary_path)
    except (OSError, ValueError) as exc:
        raise BriefingInputError(f"{summary_path}: damaged ({' '.join(str(exc).split())[:120]}); rebuild it with "
                                 f"undertow batch EXPERIMENT --out {out} --resume") from None
    if summary.empty:
        raise BriefingInputError(f"{summary_path}: no completed run to brief")
    for run_id in summary["run_id"]:
        problem = damage(out / RUNS_DIR / str(run_id))
        if problem is not None:
            raise BriefingInputError(f"{problem}; a run of this batch is damaged: undertow batch EXPERIMENT --out "
                                     f"{out} --resume runs it again")
    spec = record["experiment"]
    factors = _factor_views(record)
    behaviour = next((f.label for f in factors if f.changes_behaviour), None)
    policy, base_level, how = _choose_policy(factors, behaviour, baseline)
    labels = [f.label for f in factors]
    grouped = summary.groupby("point", sort=True)
    points = grouped[labels].first() if labels else pd.DataFrame(index=sorted(summary["point"].unique()))
    points["runs"] = grouped.size()
    points.index = points.index.astype(int)
    compare_to = _comparators(points, labels, policy, base_level)
    first = summary.sort_values(["point", "replication"])
    if policy is not None:
        base_points = [p for p, c in compare_to.items() if c is None]
        first = first[first["point"].isin(base_points)]
    run_dir = out / RUNS_DIR / str(first["run_id"].iloc[0])
    world = json.loads((run_dir / "world.json").read_text(encoding="utf-8"))
    return BatchView(
        out=out,
        name=str(spec.get("name", "")),
        note=str(spec.get("note", "")),
        experiment_file=str(record.get("experiment_file", "")),
        command=tuple(record.get("command") or ()),
        design=str(spec.get("design", "full_factorial")),
        days=int(spec["days"]),
        warmup=int(spec.get("warmup_days", 0)),
        replications=int(spec["replications"]),
        seed=int(spec["seed"]),
        seeds=tuple(int(s) for s in record.get("seeds", ())),
        world_name=str(world.get("name", "")),
        world=world,
        factors=tuple(factors),
        summary=summary,
        policy=policy,
        baseline=base_level,
        baseline_source=how,
        behaviour=behaviour,
        compare_to=compare_to,
        points=points,
        calibration=record.get("calibration"),
    )
