"""Setting a value at a dotted path copies only what the path passes through and never changes the original."""

from __future__ import annotations

import copy
from pathlib import Path

import pytest

from abm.world import read_yaml_mapping
from abm.world.paths import PathProblem, _resolve, get_path, set_path

WORLD = Path(__file__).resolve().parents[2] / "worlds" / "kestrel_quay" / "world.yaml"

PATHS = [
    "adversary.arrivals_per_day",                      # a mapping key
    "stations.gate_imaging.selection.fraction",        # a list item by name, then keys
    "stations[0].lanes",                               # a list item by index
    "roster.teams.night_shift.lanes.gate_imaging",     # names and keys mixed
    "adversary.a_key_the_file_leaves_out",             # a key added where the file has none
    "adversary.new_section.new_key",                   # a section added too
]


def deep_copy_then_set(data, path, value):
    """The plain way: copy everything, then set (what set_path must be equivalent to)."""
    out = copy.deepcopy(data)
    parent, slot = _resolve(out, path, create_leaf=True)
    parent[slot] = value
    return out


@pytest.mark.parametrize("path", PATHS)
def test_set_path_equals_a_deep_copy_and_leaves_the_original_alone(path: str) -> None:
    world = read_yaml_mapping(WORLD)
    before = copy.deepcopy(world)
    changed = set_path(world, path, 0.123)
    assert changed == deep_copy_then_set(before, path, 0.123)
    assert world == before
    assert get_path(changed, path) == 0.123
    # A second change of the result leaves the first result alone, too.
    again = set_path(changed, path, 0.5)
    assert get_path(changed, path) == 0.123 and get_path(again, path) == 0.5 and world == before


def test_a_path_that_does_not_resolve_is_reported_and_changes_nothing() -> None:
    world = read_yaml_mapping(WORLD)
    before = copy.deepcopy(world)
    with pytest.raises(PathProblem, match="no item named 'nowhere'"):
        set_path(world, "stations.nowhere.lanes", 1)
    assert world == before
