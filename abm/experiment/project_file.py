"""Reading a project file (experiment, calibration, optimisation): safe YAML, its schema, one-line errors.

Shared by every file kind but the world's (:mod:`abm.world.loader`, whose
errors these follow): a schema problem becomes one line naming the file and
key, and a misspelt key is reported as unknown with the closest valid one.
"""

from __future__ import annotations

import difflib
import json
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from ..world import WorldFileError, read_yaml_mapping
from ..world.loader import allowed_keys, format_loc

Spec = TypeVar("Spec", bound=BaseModel)


def read_project_file(
    path: str | Path, model: type[Spec], error_type: type[WorldFileError]
) -> tuple[Path, dict[str, Any], Spec]:
    """Read a project file (experiment, calibration, optimisation) and validate it against ``model``.

    Returns the file's path, its raw mapping and the validated spec; a schema
    problem raises ``error_type`` in one line naming the key (:func:`schema_error`).
    """
    source = Path(path)
    data = read_yaml_mapping(source)
    try:
        return source, data, model.model_validate(data)
    except ValidationError as exc:
        raise schema_error(exc, data, source, model, error_type) from None


def schema_error(
    exc: ValidationError, data: Any, source: Path, model: type[BaseModel], error_type: type[WorldFileError]
) -> WorldFileError:
    """The first schema problem of a project file as one line naming its key.

    Shared by experiment, calibration and optimisation files; a misspelt key is
    reported as unknown, with the closest valid key as a hint.
    """
    errors = exc.errors()
    error = errors[0]
    if error["type"] == "missing":
        # A misspelt key shows up as "missing" plus an unknown sibling: the unknown key is the real news.
        parent = tuple(error["loc"][:-1])
        error = next((e for e in errors if e["type"] == "extra_forbidden" and tuple(e["loc"][:-1]) == parent), error)
    kind = error["type"]
    loc = present_location(tuple(error["loc"]), data, keep_last=kind in ("missing", "extra_forbidden"))
    path = format_loc(loc, data)
    if kind == "extra_forbidden":
        key = str(loc[-1])
        valid = allowed_keys(model, loc[:-1])
        close = difflib.get_close_matches(key, valid, n=1, cutoff=0.5)
        hint = f"; did you mean '{close[0]}'?" if close else (f"; valid keys: {', '.join(valid)}" if valid else "")
        return error_type(source, path, f"unknown key '{key}'{hint}")
    if kind == "missing":
        return error_type(source, path, "required key is missing")
    message = error["msg"].removeprefix("Value error, ")
    given = error.get("input")
    if " got " not in message and not isinstance(given, (dict, list)):
        message = f"{message}, got {shown(given)}"
    return error_type(source, path, message)


def present_location(loc: tuple[Any, ...], data: Any, keep_last: bool) -> tuple[Any, ...]:
    """The part of a pydantic location that exists in the data (dropping union-member tags)."""
    node, kept = data, []
    for i, item in enumerate(loc):
        if isinstance(node, dict) and item in node:
            node = node[item]
        elif isinstance(node, list) and isinstance(item, int) and 0 <= item < len(node):
            node = node[item]
        else:
            if keep_last and i == len(loc) - 1:
                kept.append(item)
            break
        kept.append(item)
    return tuple(kept)


def shown(value: Any) -> str:
    """A value as it reads in a message."""
    text = json.dumps(value, default=str) if not isinstance(value, str) else f"'{value}'"
    return text if len(text) <= 40 else text[:37] + "..."
