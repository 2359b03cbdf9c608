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
from .fields import PATTERN_WORDS
from .paths import PathProblem, apply_changes
from .references import ReferenceProblem, check_references
from .schema import World

CLOCK_KEYS = ("time", "first", "last")  # keys whose values are clock times


class WorldFileError(InputError):
    """A file that cannot be used, with the key path at fault. ``str()`` is one line."""

    def __init__(self, file: str | Path, path: str, message: str) -> None:
        self.file = str(file)
        self.path = path
        self.message = " ".join(str(message).split())
        where = f"{self.file}: {path}: " if path else f"{self.file}: "
        super().__init__(where + self.message)


class _UniqueKeyLoader(yaml.SafeLoader):
    """SafeLoader used to compose the node tree; :func:`_check_nodes` vets it before construction."""


_MERGE_TAG = "tag:yaml.org,2002:merge"
_STANDARD_PREFIX = "tag:yaml.org,2002:"
# Only tags SafeLoader builds plain data for (str, int, float, bool, null, seq, map, timestamp, binary,
# set, omap, pairs); anything else, python/* included, is refused before construction.
_SAFE_TAGS = frozenset(tag for tag in _UniqueKeyLoader.yaml_constructors if tag is not None)


class _NodeProblem(Exception):
    """A problem found while walking the YAML node tree, with its key path."""

    def __init__(self, path: str, message: str) -> None:
        super().__init__(message)
        self.path = path
        self.message = message


def _join(path: str, key: Any) -> str:
    return f"{path}.{key}" if path else str(key)


def _shown_tag(tag: str) -> str:
    """A tag as the author wrote it: ``!!python/object/apply:os.system``, not its expanded URI."""
    return "!!" + tag[len(_STANDARD_PREFIX) :] if tag.startswith(_STANDARD_PREFIX) else tag


def _tag_problem(node: yaml.Node, path: str) -> _NodeProblem | None:
    if node.tag in _SAFE_TAGS:
        return None
    line = node.start_mark.line + 1
    return _NodeProblem(
        path, f"YAML tag {_shown_tag(node.tag)} is not allowed (line {line}): world files hold plain data only"
    )


def _check_nodes(loader: _UniqueKeyLoader, root: yaml.Node) -> None:
    """Refuse unknown tags, non-scalar or repeated keys and unreadable scalars, naming the key path.

    Runs on the composed node tree, before anything is constructed, so a tag that
    would build an object is refused without ever reaching a constructor. Nodes
    are visited in document order so the first problem in the file is reported,
    and each node once, so aliases (even recursive ones) cost nothing extra.
    """
    visited: set[int] = set()
    # A stack entry is a node to visit or a problem to raise once the walk reaches its place in the file.
    stack: list[tuple[yaml.Node, str] | _NodeProblem] = [(root, "")]
    while stack:  # iterative: a deeply nested file must not exhaust the Python stack
        entry = stack.pop()
        if isinstance(entry, _NodeProblem):
            raise entry
        node, path = entry
        if id(node) in visited:
            continue
        visited.add(id(node))
        problem = _tag_problem(node, path)
        if problem:
            raise problem
        if isinstance(node, yaml.ScalarNode):
            try:  # an explicit standard tag can still be unreadable, e.g. ``!!int ten``
                loader.construct_object(node)
            except Exception:
                line = node.start_mark.line + 1
                message = f"cannot read {node.value!r} as {_shown_tag(node.tag)} (line {line})"
                raise _NodeProblem(path, message) from None
        elif isinstance(node, yaml.SequenceNode):
            stack.extend(reversed([(child, f"{path}[{i}]") for i, child in enumerate(node.value)]))
        elif isinstance(node, yaml.MappingNode):
            stack.extend(reversed(_mapping_entries(loader, node, path)))


def _mapping_entries(
    loader: _UniqueKeyLoader, node: yaml.MappingNode, path: str
) -> list[tuple[yaml.Node, str] | _NodeProblem]:
    """A mapping's values to visit, in order; a bad or repeated key becomes a problem in its place."""
    entries: list[tuple[yaml.Node, str] | _NodeProblem] = []
    first_line: dict[Any, int] = {}
    for key_node, value_node in node.value:
        if key_node.tag == _MERGE_TAG:  # ``<<: *anchor`` merges keys; it is not a key itself
            entries.append((value_node, path))
            continue
        key_line = key_node.start_mark.line + 1
        problem = _tag_problem(key_node, path)
        if problem is None and not isinstance(key_node, yaml.ScalarNode):
            problem = _NodeProblem(path, f"expected a plain name as a key, got a {key_node.id} (line {key_line})")
        if problem is None:
            try:
                key = loader.construct_object(key_node)
            except Exception:
                problem = _NodeProblem(
                    path, f"cannot read the key {key_node.value!r} as {_shown_tag(key_node.tag)} (line {key_line})"
                )
        if problem is None and key in first_line:
            lines = f"lines {first_line[key]} and {key_line}"
            problem = _NodeProblem(_join(path, key), f"key '{key}' appears twice ({lines}); expected it once")
        if problem is not None:
            entries.append(problem)
            break  # nothing after the first bad key can be reported first
        first_line[key] = key_line
        entries.append((value_node, _join(path, key)))
    return entries


def _yaml_problem(exc: yaml.YAMLError, text: str) -> str:
    """One human line for a YAML syntax error."""
    if isinstance(exc, yaml.reader.ReaderError):
        where = text.count("\n", 0, exc.position) + 1
        char = exc.character if isinstance(exc.character, int) else ord(exc.character[:1] or "\0")
        return f"not valid YAML at line {where}: the control character U+{char:04X} is not allowed in a YAML text file"
    mark = getattr(exc, "problem_mark", None)
    line = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
    problem = getattr(exc, "problem", None) or "unreadable"
    context = getattr(exc, "context", None)
    if context and problem.startswith("but "):  # e.g. "expected a single document in the stream, but found ..."
        problem = f"{context}, {problem}"
    return f"not valid YAML{line}: {problem}"


def _kind(value: Any) -> str:
    """What a value is, in words, for 'got ...' messages."""
    if value is None:
        return "nothing (null)"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    shown = repr(value)
    return shown if len(shown) <= 40 else shown[:37] + "..."


def read_yaml_mapping(path: str | Path) -> dict[str, Any]:
    """Read a YAML file that must hold a mapping; raise WorldFileError otherwise."""
    path = Path(path)
    if path.exists() and not path.is_dir() and not path.is_file():  # a FIFO or a device would block or never end
        raise WorldFileError(path, "", "not a regular file; expected a YAML text file")
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise WorldFileError(path, "", "file not found") from None
    except IsADirectoryError:
        raise WorldFileError(path, "", "is a directory; expected a world YAML file") from None
    except PermissionError:
        raise WorldFileError(path, "", "permission denied; cannot read the file") from None
    except UnicodeDecodeError as exc:
        byte = exc.object[exc.start : exc.start + 1].hex()
        raise WorldFileError(
            path, "", f"not UTF-8 text (byte 0x{byte} at offset {exc.start}); expected a YAML text file"
        ) from None
    except OSError as exc:
        raise WorldFileError(path, "", f"cannot read the file: {exc.strerror or exc.__class__.__name__}") from None
    loader: _UniqueKeyLoader | None = None
    try:
        loader = _UniqueKeyLoader(text)  # the reader refuses control characters here, at construction
        root = loader.get_single_node()
        if root is not None:
            _check_nodes(loader, root)
        data = None if root is None else loader.construct_document(root)
    except _NodeProblem as exc:
        raise WorldFileError(path, exc.path, exc.message) from None
    except yaml.constructor.ConstructorError as exc:
        line = f" (line {exc.problem_mark.line + 1})" if exc.problem_mark else ""
        raise WorldFileError(path, "", f"{exc.problem or 'cannot build the data'}{line}") from None
    except yaml.YAMLError as exc:
        raise WorldFileError(path, "", _yaml_problem(exc, text)) from None
    except RecursionError:
        raise WorldFileError(path, "", "not valid YAML: nested too deeply for a world file") from None
    finally:
        if loader is not None:
            loader.dispose()
    if data is None:
        raise WorldFileError(path, "", "the file is empty; expected a mapping of sections")
    if not isinstance(data, dict):
        raise WorldFileError(path, "", f"expected a mapping of sections at the top, got {_kind(data)}")
    return data


def format_loc(loc: tuple[Any, ...], data: Any = None) -> str:
    """Turn a pydantic location into a key path like ``stations[2].selection.fraction``.

    Given the validated ``data``, integer mapping keys (``group_size: {1: ...}``)
    are written ``group_size.1`` rather than mistaken for list indices.
    """
    out = ""
    current = data
    for item in loc:
        if item == "[key]":  # pydantic's marker for "the key itself", not a key called "[key]"
            continue
        if isinstance(current, dict):
            out += ("." if out else "") + str(item)
        elif isinstance(item, int):
            out += f"[{item}]"
        else:
            out += ("." if out else "") + str(item)
        if isinstance(current, dict):
            current = current.get(item)
        elif isinstance(current, list) and isinstance(item, int) and 0 <= item < len(current):
            current = current[item]
        else:
            current = None
    return out


def _value_at(data: Any, loc: tuple[Any, ...]) -> Any:
    for item in loc:
        if isinstance(data, dict):
            data = data.get(item)
        elif isinstance(data, list) and isinstance(item, int) and 0 <= item < len(data):
            data = data[item]
        else:
            return None
    return data


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


def _describe(error: dict[str, Any], model: type[BaseModel], data: Any = None) -> tuple[str, str]:
    loc = tuple(error["loc"])
    path = format_loc(loc, data)
    kind = error["type"]
    given = error.get("input")
    if kind == "extra_forbidden":
        key = str(loc[-1])
        valid = allowed_keys(model, loc[:-1])
        close = difflib.get_close_matches(key, valid, n=1, cutoff=0.5)
        hint = f"; did you mean '{close[0]}'?" if close else (f"; valid keys: {', '.join(valid)}" if valid else "")
        return path, f"unknown key '{key}'{hint}"
    if kind == "missing":
        if loc and isinstance(loc[-1], int) and isinstance(_value_at(data, loc[:-1]), list):
            # A short list or [start, end] pair, not a missing key.
            return format_loc(loc[:-1], data), f"too few values (no item [{loc[-1]}]), got {_value_at(data, loc[:-1])}"
        return path, "required key is missing"
    message = error["msg"]
    pattern = (error.get("ctx") or {}).get("pattern")
    if kind == "string_pattern_mismatch" and pattern in PATTERN_WORDS:
        message = f"expected {PATTERN_WORDS[pattern]}"
    if message.startswith("Value error, "):
        message = message[len("Value error, ") :]
    if loc and loc[-1] == "[key]":
        message = message.replace("Input should", "this key should", 1)
    if kind == "string_type" and isinstance(given, int) and not isinstance(given, bool) and path.rsplit(".", 1)[-1] in CLOCK_KEYS:
        # YAML 1.1 reads an unquoted 12:30 as the sexagesimal number 750.
        hours, minutes = divmod(given, 60)
        return path, (
            f"expected a quoted clock time like '{hours:02d}:{minutes:02d}', got the number {given} "
            f"(YAML reads an unquoted {hours}:{minutes:02d} as a number)"
        )
    # Say what was given: our own rule messages already do, and a whole section judged by a rule is noise.
    if kind == "value_error":
        if " got " not in message and not isinstance(given, (dict, list)):
            message = f"{message}, got {_kind(given)}"
    elif not isinstance(given, (dict, list)) or kind.endswith("_type"):
        message = f"{message}, got {_kind(given)}"
    return path, message


def schema_problem(
    exc: ValidationError, model: type[BaseModel], data: Any, present: bool = False
) -> tuple[str, str]:
    """The first schema problem of a file's data as (key path, message), for every file kind.

    A misspelt key shows up as "missing" plus an unknown sibling: the unknown key is the real news, so it is
    the one reported. ``present`` drops the parts of pydantic's location the data does not hold (a union
    member's tag), as project files' messages do.
    """
    errors = exc.errors()
    error = errors[0]
    if error["type"] == "missing":
        parent = tuple(error["loc"][:-1])
        error = next((e for e in errors if e["type"] == "extra_forbidden" and tuple(e["loc"][:-1]) == parent), error)
    if present:
        keep_last = error["type"] in ("missing", "extra_forbidden")
        error = dict(error, loc=present_location(tuple(error["loc"]), data, keep_last))
    return _describe(error, model, data)


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


def parse_world(data: dict[str, Any], source: str | Path = "<world>") -> World:
    """Validate a world given as a mapping; raise WorldFileError naming ``source``."""
    try:
        world = World.model_validate(data)
    except ValidationError as exc:
        raise WorldFileError(source, *schema_problem(exc, World, data)) from None
    try:
        check_references(world)
    except ReferenceProblem as exc:
        raise WorldFileError(source, exc.path, exc.message) from None
    for index in range(len(world.interventions)):
        try:
            changed = policy_after(world, index)
        except WorldFileError as exc:
            raise WorldFileError(source, f"interventions[{index}].set", f"after the change, {exc.path}: {exc.message}") from None
        except PathProblem as exc:
            raise WorldFileError(source, f"interventions[{index}].set", str(exc)) from None
        _same_shape(world, changed, source, index)
    return world


def policy_after(world: World, index: int) -> World:
    """The world as it stands once interventions 0..index (in file order) have taken effect."""
    data = world.model_dump(mode="python", exclude={"interventions"})
    for intervention in world.interventions[: index + 1]:
        data = apply_changes(data, intervention.set)
    return parse_world(data, "<intervention>")


def _same_shape(before: World, after: World, source: str | Path, index: int) -> None:
    """An intervention changes policy, not the crossing's geography or the option space."""
    for what in ("class_names", "band_names", "point_names", "station_names", "method_names"):
        if getattr(before, what) != getattr(after, what):
            label = what.replace("_names", "").replace("_", " ")
            raise WorldFileError(
                source, f"interventions[{index}].set", f"an intervention may not add, remove or rename any {label}"
            )
    if before.adversary.behaviour != after.adversary.behaviour:
        raise WorldFileError(
            source, f"interventions[{index}].set", "an intervention may not change adversary.behaviour (a run has one)"
        )


def load_world(path: str | Path) -> World:
    """Read and validate a world file."""
    return parse_world(read_yaml_mapping(path), path)


def file_hash(path: str | Path) -> str:
    """SHA-256 of a file's bytes, for run manifests."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()
