"""The typed schema of an experiment file.

An experiment names a world file, how long each run lasts, how many
replications each design point gets, a root seed, a design and its factors::

    kind: experiment              # optional marker (a top-level `world:` also marks one)
    name: Kestrel Quay policies (illustrative)
    world: world.yaml             # relative to the experiment file
    days: 30                      # days summarised, after the warm-up
    warmup_days: 7
    replications: 5
    seed: 20240611
    design: full_factorial        # | one_at_a_time | latin_hypercube | sobol
    factors:
      - name: policy              # a factor of named bundles of changes
        baseline: current
        levels:
          - {name: current, set: {}}
          - name: night_surge
            set: {roster.teams.night_shift.lanes.gate_imaging: 4}
      - path: adversary.attempt_chance   # a factor of values at one dotted path
        levels: [0.4, 0.6]
      # sampled designs give ranges instead of levels (whole-number bounds: whole-number values)
      # - path: stations.gate_imaging.selection.fraction
      #   range: [0.1, 0.5]
    calibration: ../outputs/kestrel-calibration   # optional: a folder written by `undertow calibrate`

With ``calibration:``, replication r of every design point takes the same
weighted draw from that calibration's posterior (``posterior.parquet``) and
writes it into the world as the calibration did (set at each prior's path, or
multiplied into it with ``multiply: true``) before the point's own changes, so
a factor that sets the same path wins (:mod:`abm.experiment.posterior`).

Every model forbids unknown keys. The rules between keys, and those that need
the world (paths, level values), are checked in :mod:`abm.experiment.design`
so each error can name its key.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import Field

from ..world.fields import Name, NumberOnly, Strict, unit

SAMPLED_DESIGNS = ("latin_hypercube", "sobol")


WholeNumber = Annotated[int, Field(ge=0), NumberOnly]
AtLeastOne = Annotated[int, Field(ge=1), NumberOnly]
Bound = Annotated[int | float, NumberOnly, unit("the path's unit")]


class Bundle(Strict):
    """A named level that changes several dotted paths of the world together (a policy bundle)."""

    name: Name = Field(description="the level's name in the run table and as a baseline")
    label: str = Field("", max_length=80, description="how briefings name the level (default: its name in words)")
    note: str = Field("", description="free text: what the bundle stands for")
    set: dict[str, Any] = Field(default_factory=dict, description="dotted path -> value; empty = the world as it is")


class Factor(Strict):
    """One thing the experiment varies.

    Either ``path`` with ``levels`` (values at that path) or ``range`` (sampled
    designs), or no path and ``levels`` that are named bundles. ``baseline``
    names the level other points are compared with (a value, or a bundle name).
    """

    name: Name | None = Field(None, description="column name; defaults to the path")
    path: str | None = Field(None, description="dotted path into the world, e.g. stations.gate_imaging.lanes")
    levels: list[Any] | None = Field(
        None, description="values at the path; without a path, named bundles (each a mapping with name and set)"
    )
    range: tuple[Bound, Bound] | None = Field(None, description="[low, high] for sampled designs")
    baseline: Any = Field(None, description="the level other points are compared with (a value or a bundle name)")

    @property
    def label(self) -> str:
        """The factor's column name."""
        return self.name or str(self.path)


class Experiment(Strict):
    """A whole experiment file."""

    kind: Literal["experiment"] = Field("experiment", description="marks the file (a top-level world: also does)")
    name: str = Field(min_length=1, max_length=200, description="the experiment's name, shown in every output")
    note: str = Field("", description="free text: what the experiment asks")
    world: str = Field(min_length=1, description="world file, relative to the experiment file")
    days: Annotated[AtLeastOne, unit("days")] = Field(description="days each run summarises, after the warm-up")
    warmup_days: Annotated[WholeNumber, unit("days")] = Field(
        0, description="days simulated first and left out of the summary"
    )
    replications: Annotated[AtLeastOne, unit("runs")] = Field(
        description="runs of each design point, each with its own seed (common to every point)"
    )
    seed: Annotated[WholeNumber, unit("seed")] = Field(
        description="root seed: replication seeds and sampled designs derive from it"
    )
    design: Literal["full_factorial", "one_at_a_time", "latin_hypercube", "sobol"] = Field(
        "full_factorial", description="every combination of levels; one factor at a time from the baselines; "
        "or samples of the factors' ranges"
    )
    samples: Annotated[AtLeastOne, unit("design points")] | None = Field(
        None, description="design points of a sampled design (sobol: a power of two)"
    )
    factors: list[Factor] = Field(default_factory=list, description="what the experiment varies")
    calibration: str | None = Field(
        None,
        min_length=1,
        description="calibration output folder whose posterior sets the unknowns, relative to this file",
    )

