"""Load and validate world files: YAML in, a frozen :class:`World` out, or one clear error.

Nothing in a file is evaluated as code: YAML is read with a safe loader that
also rejects duplicate keys, and every problem becomes a :class:`WorldFileError`
whose text is a single line ``FILE: KEY.PATH: what was expected``.
"""

from __future__ import annotations

import difflib
import hashlib
import types
import typing
from pathlib import Path
from typing import Any

import yaml
from pydantic import BaseModel, ValidationError

from ..errors import InputError
from .references import ReferenceProblem, check_references
from .schema import World


class WorldFileError(InputError):
    """A file that cannot be used, with the key path at fault. ``str()`` is one line."""

    def __init__(self, file: str | Path, path: str, message: str) -> None:
        self.file = str(file)
        self.path = path
        self.message = " ".join(str(message).split())
        where = f"{self.file}: {path}: " if path else f"{self.file}: "
        super().__init__(where + self.message)


class _UniqueKeyLoader(yaml.SafeLoader):
    """SafeLoader that refuses a mapping with the same key twice."""

    def construct_mapping(self, node: yaml.MappingNode, deep: bool = False) -> dict:
        seen: set[Any] = set()
        for key_node, _ in node.value:
            key = self.construct_object(key_node, deep=deep)
            if key in seen:
                line = key_node.start_mark.line + 1
                raise yaml.constructor.ConstructorError(None, None, f"key '{key}' appears twice (line {line})")
            seen.add(key)
        return super().construct_mapping(node, deep=deep)


def read_yaml_mapping(path: str | Path) -> dict[str, Any]:
    """Read a YAML file that must hold a mapping; raise WorldFileError otherwise."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise WorldFileError(path, "", "file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise WorldFileError(path, "", f"cannot read the file ({exc.__class__.__name__})") from None
    try:
        data = yaml.load(text, Loader=_UniqueKeyLoader)  # noqa: S506 - a SafeLoader subclass
    except yaml.constructor.ConstructorError as exc:
        problem = exc.problem or str(exc)
        if "constructor for the tag" in problem:
            tag = problem.split("tag", 1)[1].strip(" '")
            problem = f"YAML tag {tag} is not allowed: world files hold plain data only"
        line = f" (line {exc.problem_mark.line + 1})" if exc.problem_mark else ""
        raise WorldFileError(path, "", problem + line) from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or "unreadable"
        raise WorldFileError(path, "", f"not valid YAML{line}: {problem}") from None
    if data is None:
        raise WorldFileError(path, "", "the file is empty; expected a mapping of sections")
    if not isinstance(data, dict):
        raise WorldFileError(path, "", f"expected a mapping of sections at the top, got {type(data).__name__}")
    return data


def format_loc(loc: tuple[Any, ...]) -> str:
    """Turn a pydantic location into a key path like ``stations[2].selection.fraction``."""
    out = ""
    for item in loc:
        if isinstance(item, int):
            out += f"[{item}]"
        else:
            out += ("." if out else "") + str(item)
    return out


def _unwrap(annotation: Any) -> list[Any]:
    """The candidate inner types of an annotation (Optional, Annotated, unions)."""
    origin = typing.get_origin(annotation)
    if origin is typing.Annotated:
        return _unwrap(typing.get_args(annotation)[0])
    if origin in (typing.Union, types.UnionType):
        return [t for arg in typing.get_args(annotation) for t in _unwrap(arg)]
    return [annotation]


def allowed_keys(model: type[BaseModel], loc: tuple[Any, ...]) -> list[str]:
    """Field names valid at ``loc`` (the location of the offending key, without the key)."""
    current: list[Any] = [model]
    for item in loc:
        following: list[Any] = []
        for candidate in current:
            origin = typing.get_origin(candidate)
            if isinstance(candidate, type) and issubclass(candidate, BaseModel):
                if isinstance(item, str) and item in candidate.model_fields:
                    following += _unwrap(candidate.model_fields[item].annotation)
            elif origin in (list, tuple) and isinstance(item, int):
                following += _unwrap(typing.get_args(candidate)[0])
            elif origin is dict:
                following += _unwrap(typing.get_args(candidate)[1])
        current = following
    for candidate in current:
        if isinstance(candidate, type) and issubclass(candidate, BaseModel):
            return list(candidate.model_fields)
    return []


def _describe(error: dict[str, Any], model: type[BaseModel]) -> tuple[str, str]:
    loc = tuple(error["loc"])
    path = format_loc(loc)
    kind = error["type"]
    given = error.get("input")
    if kind == "extra_forbidden":
        key = str(loc[-1])
        valid = allowed_keys(model, loc[:-1])
        close = difflib.get_close_matches(key, valid, n=1, cutoff=0.5)
        hint = f"; did you mean '{close[0]}'?" if close else (f"; valid keys: {', '.join(valid)}" if valid else "")
        return path, f"unknown key '{key}'{hint}"
    if kind == "missing":
        return path, "required key is missing"
    message = error["msg"]
    if message.startswith("Value error, "):
        message = message[len("Value error, ") :]
    if given is not None and not isinstance(given, (dict, list)):
        shown = repr(given) if len(repr(given)) <= 40 else repr(given)[:37] + "..."
        message = f"{message}, got {shown}"
    if kind == "string_type" and isinstance(given, int) and path.endswith(".time"):
        message += " (quote clock times, e.g. '06:30')"
    return path, message


def parse_world(data: dict[str, Any], source: str | Path = "<world>") -> World:
    """Validate a world given as a mapping; raise WorldFileError naming ``source``."""
    try:
        world = World.model_validate(data)
    except ValidationError as exc:
        path, message = _describe(exc.errors()[0], World)
        raise WorldFileError(source, path, message) from None
    try:
        check_references(world)
    except ReferenceProblem as exc:
        raise WorldFileError(source, exc.path, exc.message) from None
    return world


def load_world(path: str | Path) -> World:
    """Read and validate a world file."""
    return parse_world(read_yaml_mapping(path), path)


def file_hash(path: str | Path) -> str:
    """SHA-256 of a file's bytes, for run manifests."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()
