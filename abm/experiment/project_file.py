"""Reading a project file (experiment, calibration, optimisation): safe YAML, its schema, one-line errors.

Shared by every file kind but the world's (:mod:`abm.world.loader`, whose
errors these follow): a schema problem becomes one line naming the file and
key, and a misspelt key is reported as unknown with the closest valid one.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from ..world import WorldFileError, read_yaml_mapping
from ..world.loader import schema_problem

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
    """The first schema problem of a project file as one line naming its key (as a world file's, through
    :func:`abm.world.loader.schema_problem`); a misspelt key is reported as unknown, with the closest valid key."""
    return error_type(source, *schema_problem(exc, model, data, present=True))


def shown(value: Any) -> str:
    """A value as it reads in a message."""
    text = json.dumps(value, default=str) if not isinstance(value, str) else f"'{value}'"
    return text if len(text) <= 40 else text[:37] + "..."
