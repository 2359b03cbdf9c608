"""Dotted paths into a world mapping: ``stations.gate_imaging.selection.fraction``.

A segment addresses a mapping key, a list item by its ``name`` (lists of named
sections such as stations, methods, teams) or a list item by index
(``stations[0]``). Paths are how interventions and experiment factors name the
values they change, and how calibrated unknowns are set or scaled; nothing in
a path is evaluated.
"""

from __future__ import annotations

import copy
import re
from collections.abc import Iterable
from typing import Any

_SEGMENT = re.compile(r"^(?P<key>[^\[\]]*)(?:\[(?P<index>\d+)\])?$")


class PathProblem(ValueError):
    """A path that does not lead to a value of the world."""


def _step(node: Any, segment: str, walked: str) -> tuple[Any, Any]:
    """The container and key/index one segment addresses below ``node``."""
    match = _SEGMENT.match(segment)
    if not match or (not match.group("key") and match.group("index") is None):
        raise PathProblem(f"'{walked}{segment}' is not a valid path segment")
    key, index = match.group("key"), match.group("index")
    if key:
        if isinstance(node, dict):
            if key not in node:
                options = ", ".join(map(str, node)) or "nothing"
                raise PathProblem(f"'{walked}{key}' does not exist (there: {options})")
            parent, slot = node, key
        elif isinstance(node, list):
            named = [i for i, item in enumerate(node) if isinstance(item, dict) and item.get("name") == key]
            if not named:
                names = ", ".join(str(item.get("name")) for item in node if isinstance(item, dict)) or "nothing"
                raise PathProblem(f"no item named '{key}' under '{walked.rstrip('.')}' (there: {names})")
            parent, slot = node, named[0]
        else:
            raise PathProblem(f"'{walked.rstrip('.')}' holds a value, not a section")
        node = parent[slot]
    else:
        parent, slot = None, None
    if index is not None:
        if not isinstance(node, list) or int(index) >= len(node):
            raise PathProblem(f"'{walked}{segment}' is out of range")
        parent, slot = node, int(index)
    return parent, slot


def _resolve(data: dict[str, Any], path: str, create_leaf: bool) -> tuple[Any, Any]:
    segments = path.split(".")
    if not path or any(not s for s in segments):
        raise PathProblem(f"'{path}' is not a dotted path")
    node: Any = data
    walked = ""
    for i, segment in enumerate(segments):
        last = i == len(segments) - 1
        if create_leaf and isinstance(node, dict) and "[" not in segment and segment not in node:
            # a section or key the file left at its default; the schema judges it after the change
            if last:
                return node, segment
            node[segment] = {}
        parent, slot = _step(node, segment, walked)
        if last:
            return parent, slot
        node = parent[slot]
        walked += segment + "."
    raise AssertionError("unreachable")


def get_path(data: dict[str, Any], path: str) -> Any:
    """The value at ``path``."""
    parent, slot = _resolve(data, path, create_leaf=False)
    return parent[slot]


def set_path(data: dict[str, Any], path: str, value: Any) -> dict[str, Any]:
    """A copy of ``data`` with ``value`` at ``path`` (missing mapping keys are added); ``data`` is left as it was.

    Only the sections on the path are copied; the rest is shared with ``data``, so neither may be changed in
    place afterwards (nothing here does). A whole-world deep copy per change had cost about 4 ms of the
    coordinator's time for each calibration candidate.
    """
    out = _copied_along(data, path)
    parent, slot = _resolve(out, path, create_leaf=True)
    parent[slot] = copy.deepcopy(value)
    return out


def _copied_along(data: dict[str, Any], path: str) -> dict[str, Any]:
    """``data`` with every section the path passes through copied (one level each), so a change at the path's
    end touches copies only; where the path does not resolve, :func:`_resolve` reports it on the copy."""
    root = dict(data)
    node: Any = root
    segments = path.split(".")
    for i, segment in enumerate(segments):
        match = _SEGMENT.match(segment)
        if match is None:
            return root
        key, index = match.group("key"), match.group("index")
        last = i == len(segments) - 1
        if key and not (last and index is None):
            if isinstance(node, dict) and key in node:
                slot: Any = key
            elif isinstance(node, list):
                named = [j for j, item in enumerate(node) if isinstance(item, dict) and item.get("name") == key]
                if not named:
                    return root
                slot = named[0]
            else:
                return root
            node[slot] = copy.copy(node[slot])
            node = node[slot]
        if index is not None and not last:
            if not isinstance(node, list) or int(index) >= len(node):
                return root
            node[int(index)] = copy.copy(node[int(index)])
            node = node[int(index)]
    return root


def apply_changes(data: dict[str, Any], changes: dict[str, Any]) -> dict[str, Any]:
    """Apply several path changes in order."""
    for path, value in changes.items():
        data = set_path(data, path, value)
    return data


def scaled(node: Any, factor: float) -> Any:
    """Every number in a value (a number, or mappings and lists of numbers) times ``factor``; flags stay flags."""
    if isinstance(node, bool):
        return node
    if isinstance(node, (int, float)):
        return node * factor
    if isinstance(node, dict):
        return {k: scaled(v, factor) for k, v in node.items()}
    if isinstance(node, list):
        return [scaled(v, factor) for v in node]
    return node


def holds_numbers(node: Any) -> bool:
    """True when a value is, or contains, a number a multiplier can scale (flags do not count)."""
    if isinstance(node, bool):
        return False
    if isinstance(node, (int, float)):
        return True
    if isinstance(node, dict):
        return any(holds_numbers(v) for v in node.values())
    if isinstance(node, list):
        return any(holds_numbers(v) for v in node)
    return False


def set_or_scale(data: dict[str, Any], path: str, value: float, multiply: bool) -> dict[str, Any]:
    """A copy of ``data`` with ``value`` at ``path``, or (``multiply``) every number at ``path`` times ``value``."""
    if multiply:
        return set_path(data, path, scaled(get_path(data, path), value))
    return set_path(data, path, value)


def apply_unknowns(data: dict[str, Any], unknowns: Iterable[tuple[str, float, bool]]) -> dict[str, Any]:
    """Apply several ``(path, value, multiply)`` in order (how calibrated unknowns enter a world)."""
    for path, value, multiply in unknowns:
        data = set_or_scale(data, path, value, multiply)
    return data
