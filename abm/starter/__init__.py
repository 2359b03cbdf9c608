"""Starter files: commented, valid, fictional worlds and experiments to begin from (``undertow new``).

The starter worlds are YAML files shipped beside this module, one per kind of
crossing (a ferry port, a rail freight terminal, a land border); each passes
``check`` and its load report shows no overload. An experiment is written for
a given world: today's roster against two changes built from that world's own
stations and teams, so its paths always exist. The shipped example worlds
(``abm/worlds``: the demo's Kestrel Quay with its agency extract, Stonechat Rail,
Corran Ridge) are package data too, read through :mod:`importlib.resources`, so
an installed wheel has them: :func:`copy_example` puts one where a user can
edit it, and the demo reads its own from there.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from contextlib import contextmanager
from importlib import resources
from pathlib import Path

from ..errors import InputError, refuse_unwritable
from ..atomic import write_atomically
from ..world import load_world
from ..world.schema import World

KINDS = ("ferry", "rail", "land")
EXAMPLES = ("kestrel_quay", "stonechat_rail", "corran_ridge")  # the shipped example worlds, one of each kind


@contextmanager
def shipped_worlds() -> Iterator[Path]:
    """The folder of shipped example worlds (``abm/worlds``), as a real path while the context lasts."""
    with resources.as_file(resources.files("abm") / "worlds") as folder:
        yield Path(folder)


def copy_example(name: str, out: Path) -> list[Path]:
    """Copy a shipped example world's folder (world, experiments, any extract) to a new folder ``out``."""
    if out.exists() or out.is_symlink():
        raise InputError(f"{out}: already exists; choose a new folder for the example (nothing was overwritten)")
    refuse_unwritable(out, "OUT")
    with shipped_worlds() as worlds:
        shutil.copytree(worlds / name, out, ignore=shutil.ignore_patterns("__pycache__"))
    return sorted(p for p in out.rglob("*") if p.is_file())


def world_text(kind: str) -> str:
    """The starter world of a kind of crossing, as commented YAML."""
    return resources.files(__package__).joinpath(f"world_{kind}.yaml").read_text(encoding="utf-8")


def _changes(world: World) -> list[tuple[str, str, str, dict[str, float]]]:
    """Policies to compare with today's roster: (name, label, note, world changes), from the world's own parts."""
    primary = [s for s in world.stations if s.role == "primary"]
    out = []
    sampled = next((s for s in primary if s.selection.rule == "fraction" and s.selection.fraction < 1), None)
    if sampled is not None:
        doubled = min(1.0, round(2 * sampled.selection.fraction, 3))
        out.append((f"more_{sampled.name}", f"More checks at {sampled.name}",
                    f"select {doubled:g} of vehicles at {sampled.name} instead of {sampled.selection.fraction:g}",
                    {f"stations.{sampled.name}.selection.fraction": doubled}))
    for station in primary:
        team = next((t for t in world.roster.teams if t.lanes.get(station.name)), None)
        if team is None:
            continue
        staffed = team.lanes[station.name] + 1
        changes = {f"roster.teams.{team.name}.lanes.{station.name}": staffed}
        if staffed > station.lanes:  # the roster cannot staff more lanes than the station has
            changes[f"stations.{station.name}.lanes"] = staffed
        out.append((f"extra_lane_{station.name}", f"Extra lane at {station.name}",
                    f"{team.name} staffs {staffed} lanes at {station.name}", changes))
        break
    return out


def experiment_text(world_path: Path, out: Path) -> str:
    """A commented experiment comparing ``world_path``'s roster with two changes, for a file at ``out``."""
    world = load_world(world_path)  # a bad world fails here in one line, naming the file and key
    relative = Path(os.path.relpath(world_path.resolve(), out.resolve().parent)).as_posix()
    lines = [
        f"# A starting experiment for {world.name}, written by `undertow new experiment`.",
        "# The policies below are examples built from the world's own stations and teams: replace",
        "# them with the changes you want to compare. Every key is described in docs/reference.md",
        "# (or `undertow schema experiment`); `undertow check THIS_FILE` validates it, and",
        "# `undertow batch THIS_FILE --out FOLDER` runs it. Results are model estimates, not counts.",
        "kind: experiment",
        f"name: {_quoted(world.name + ' policies (illustrative)')}",
        f"world: {_quoted(relative)}",
        "days: 28                 # operating days summarised per run",
        "warmup_days: 7           # days simulated first and left out, so queues and learning settle",
        "replications: 5          # runs per policy; 5 or more for intervals worth reading",
        "seed: 1                  # any whole number; the same seed gives the same runs",
        "design: full_factorial",
        "factors:",
        "  - name: policy",
        "    baseline: current",
        "    levels:",
        "      - name: current",
        "        label: Current roster",
        "        note: the world file as it stands",
        "        set: {}",
    ]
    for name, label, note, changes in _changes(world):
        lines += [f"      - name: {name}", f"        label: {_quoted(label)}", f"        note: {_quoted(note)}",
                  "        set:"]
        lines += [f"          {path}: {value:g}" for path, value in changes.items()]
    return "\n".join(lines) + "\n"


def _quoted(text: str) -> str:
    """``text`` as a double-quoted YAML scalar (names may hold colons or hashes)."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def write_new(out: Path, text: str, what: str) -> None:
    """Write a starter file to ``out``; refuse in one line when it exists (nothing is overwritten)."""
    if out.exists() or out.is_symlink():
        raise InputError(f"{out}: already exists; choose another file name for the new {what} (nothing was "
                         "overwritten)")
    if out.suffix.lower() not in (".yaml", ".yml"):
        raise InputError(f"{out}: a new {what} is a YAML file; give a name ending in .yaml")
    refuse_unwritable(out, "OUT")
    write_atomically(out, lambda tmp: tmp.write_text(text, encoding="utf-8"))
