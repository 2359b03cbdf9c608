"""The reference of every file kind the tool reads: its JSON Schema and the generated page docs/reference.md.

Each kind (``kind:`` of a YAML file) has one pydantic model, the schema that
``undertow check`` validates with. :func:`json_schema` is that model's JSON
Schema (draft 2020-12, printed by ``undertow schema KIND``), with the defaults
the models compute (``default_factory``) filled in; :func:`reference_page`
renders the same schemas as Markdown, one section per kind and one table per
model. ``python -m abm.reference`` (``make reference``) writes the page, and
``tests/test_reference.py`` fails when the page and the schemas differ.
"""

from __future__ import annotations

import importlib
import inspect
import json
import re
import sys
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, get_args

if TYPE_CHECKING:
    from pydantic import BaseModel

DIALECT = "https://json-schema.org/draft/2020-12/schema"
PAGE = Path(__file__).resolve().parent.parent / "docs" / "reference.md"
TABLES_PAGE = PAGE.with_name("tables.md")
REGENERATE = "make reference (python -m abm.reference)"


@dataclass(frozen=True)
class FileKind:
    """One kind of file: the model that validates it and how a file is known to be one."""

    kind: str
    model: str  # "module:Class"
    heading: str
    marked: str  # how `undertow check` tells a file of this kind


# In the order `undertow check` names them; `abm.cli` takes its kinds from here.
FILE_KINDS: dict[str, FileKind] = {
    k.kind: k
    for k in (
        FileKind("world", "abm.world.schema:World", "World files",
                 "A file without `kind:` and without a top-level `world:` key is a world."),
        FileKind("experiment", "abm.experiment.schema:Experiment", "Experiment files",
                 "`kind: experiment`, or a top-level `world:` key without `kind:`."),
        FileKind("calibration", "abm.calibration.config:Calibration", "Calibration files", "`kind: calibration`."),
        FileKind("optimisation", "abm.analysis.policy_search.optimisation_file:Optimisation", "Optimisation files",
                 "`kind: optimisation`."),
    )
}


def model_of(kind: str) -> type[BaseModel]:
    """The pydantic model of a file kind."""
    module, name = FILE_KINDS[kind].model.split(":")
    return getattr(importlib.import_module(module), name)


def models_of(root: type[BaseModel]) -> dict[str, type[BaseModel]]:
    """Every model a root model reaches through its fields, by class name (its name in ``$defs``)."""
    from pydantic import BaseModel

    def nested(annotation: Any) -> Iterator[type[BaseModel]]:
        if isinstance(annotation, type) and issubclass(annotation, BaseModel):
            yield annotation
        for arg in get_args(annotation):
            yield from nested(arg)

    found: dict[str, type[BaseModel]] = {}
    waiting = [root]
    while waiting:
        model = waiting.pop()
        if model.__name__ in found:
            if found[model.__name__] is not model:
                raise ValueError(f"two models named {model.__name__} in the {root.__name__} schema")
            continue
        found[model.__name__] = model
        for field in model.model_fields.values():
            waiting.extend(nested(field.annotation))
    return found


def json_schema(kind: str) -> dict[str, Any]:
    """The JSON Schema of a file kind, with the defaults pydantic leaves out (those made by a factory)."""
    from pydantic_core import to_jsonable_python

    root = model_of(kind)
    schema = root.model_json_schema()
    for name, model in models_of(root).items():
        target = schema if model is root else schema["$defs"][name]
        for key, field in model.model_fields.items():
            if field.default_factory is not None and not field.default_factory_takes_validated_data:
                target["properties"][key]["default"] = to_jsonable_python(field.default_factory())  # type: ignore[call-arg]
    head = {"$schema": DIALECT, "title": f"Undertow {kind} file", "description": schema.get("description", "")}
    return head | {key: value for key, value in schema.items() if key not in head}


def schema_text(kind: str) -> str:
    """:func:`json_schema` as indented JSON text."""
    return json.dumps(json_schema(kind), indent=2, ensure_ascii=False)


# -- the page ------------------------------------------------------------------------------------

INTRO = """\
# File reference

<!-- Generated from the schemas by `make reference` (python -m abm.reference); do not edit by hand. -->

Every key of every file the tool reads (world, experiment, calibration and optimisation files, all YAML) with
its type, default, allowed values, unit and meaning. The page is generated from the schemas `undertow check`
validates with, so it says what the tool enforces; `undertow schema KIND` prints the same schema as JSON Schema
(draft 2020-12) for editors that complete and validate YAML. Each key's unit is also its `unit` in the JSON Schema.

How to read the tables: a key with a default may be left out, a `required` one may not, and no other key is
allowed. In *allowed*, `x` is the key's value, each item of a list or each value of a mapping. Chances and shares
lie between 0 and 1; a relative path in a file is relative to that file. Rules that span several
keys (a name defined in another section, shares that sum to 1, route order) are in the descriptions, and
`undertow check` names the key that breaks one. `undertow check` also prints a world's load report
([load_report.md](load_report.md)).

{contents}
"""


def reference_page() -> str:
    """The whole of docs/reference.md."""
    contents = " · ".join(f"[{k.heading}](#{_anchor(k.heading)})" for k in FILE_KINDS.values())
    parts = [INTRO.format(contents=contents)]
    for kind in FILE_KINDS.values():
        parts.append(_kind_section(kind))
    return "\n".join(parts).rstrip("\n") + "\n"


def _kind_section(kind: FileKind) -> str:
    schema = json_schema(kind.kind)
    root = model_of(kind.kind)
    models = models_of(root)
    defs = schema.get("$defs", {})
    places: dict[str, list[str]] = {root.__name__: []}
    order = [root.__name__]

    def visit(node: dict[str, Any], prefix: str) -> None:
        for key, prop in node.get("properties", {}).items():
            for ref, suffix in _refs(prop):
                places.setdefault(ref, []).append(f"{prefix}{key}{suffix}")
                if ref not in order:
                    order.append(ref)
                    visit(defs[ref], f"{prefix}{key}{suffix}.")

    visit(schema, "")
    lines = [f"## {kind.heading}", "", f"{kind.marked} `undertow schema {kind.kind}` prints its JSON Schema.", ""]
    for name in order:
        node = schema if name == root.__name__ else defs[name]
        where = ", ".join(f"`{p}`" for p in places[name]) or "the top level of the file"
        lines += [f"### {name}", "", f"Where: {where}.", ""]
        lines += [*_paragraphs(models[name]), ""]
        lines += ["| key | type | default | allowed | unit | description |", "| --- | --- | --- | --- | --- | --- |"]
        required = set(node.get("required", []))
        for key, prop in node["properties"].items():
            cells = [f"`{key}`", _type(prop), _default(prop, key in required), _allowed(prop) or "—",
                     _unit(prop) or "—", prop.get("description", "")]
            lines.append("| " + " | ".join(_cell(c) for c in cells) + " |")
        lines.append("")
    return "\n".join(lines)


def _refs(prop: dict[str, Any], suffix: str = "") -> Iterator[tuple[str, str]]:
    """The models a property holds, each with where it sits below the key (``[]`` an item, ``.<name>`` a value)."""
    if "$ref" in prop:
        yield prop["$ref"].rsplit("/", 1)[-1], suffix
    for branch in prop.get("anyOf", []):
        yield from _refs(branch, suffix)
    if isinstance(prop.get("items"), dict):
        yield from _refs(prop["items"], suffix + "[]")
    for value in _mapping_values(prop):
        yield from _refs(value, suffix + ".<name>")


def _mapping_values(prop: dict[str, Any]) -> list[dict[str, Any]]:
    values = list(prop.get("patternProperties", {}).values())
    if isinstance(prop.get("additionalProperties"), dict):
        values.append(prop["additionalProperties"])
    return values


def _paragraphs(model: type[BaseModel]) -> list[str]:
    """A model's own docstring as Markdown paragraphs, one line each (a line starting '- ' is no list item)."""
    text = inspect.cleandoc(model.__dict__.get("__doc__") or "")
    text = re.sub(r":\w+:`~?([^`]+)`", r"`\1`", text).replace("``", "`")
    paragraphs = [" ".join(p.split()) for p in text.split("\n\n") if p.strip()]
    return [line for p in paragraphs for line in (p, "")][:-1]


def _anchor(heading: str) -> str:
    """The anchor a Markdown renderer gives a heading (lower case, spaces to hyphens, punctuation dropped)."""
    return re.sub(r"[^a-z0-9_\- ]", "", heading.lower()).replace(" ", "-")


def _cell(text: str) -> str:
    return " ".join(text.split()).replace("|", "\\|")


def _number(value: float) -> str:
    if float(value).is_integer():
        whole = int(value)
        return f"{whole:.0e}".replace("e+0", "e").replace("e+", "e") if abs(whole) >= 10**6 else str(whole)
    return f"{value:g}"


def _type(prop: dict[str, Any]) -> str:
    """A property's type in words; a model links to its table."""
    if "$ref" in prop:
        name = prop["$ref"].rsplit("/", 1)[-1]
        return f"[{name}](#{_anchor(name)})"
    if "anyOf" in prop:
        branches = [b for b in prop["anyOf"] if b.get("type") != "null"]
        words = list(dict.fromkeys(_type(b) for b in branches))
        if set(words) == {"whole number", "number"}:
            words = ["number"]
        nullable = len(branches) < len(prop["anyOf"])
        return " or ".join(words + (["null"] if nullable else []))
    kind = prop.get("type")
    if "enum" in prop or "const" in prop or kind == "string":
        return "text"
    if kind == "array":
        if "prefixItems" in prop:
            return "[" + ", ".join(_type(item) for item in prop["prefixItems"]) + "]"
        return f"list of {_type(prop['items'])}" if "items" in prop else "list"
    if kind == "object":
        values = _mapping_values(prop)
        if not values:
            return "mapping of key to any"
        key = "name" if "patternProperties" in prop else "key"
        return f"mapping of {key} to {_type(values[0])}"
    return {"number": "number", "integer": "whole number", "boolean": "true or false"}.get(kind or "", "any")


def _default(prop: dict[str, Any], required: bool) -> str:
    if required:
        return "required"
    if "default" not in prop:
        return "—"
    if "$ref" in prop:
        return "each key's default"
    return f"`{json.dumps(prop['default'], ensure_ascii=False)}`"


def _allowed(prop: dict[str, Any]) -> str:
    """What values a property allows, in words: choices, bounds, lengths, item and value rules."""
    from .world.fields import PATTERN_WORDS

    if "$ref" in prop:
        return ""
    if "anyOf" in prop:
        parts = [_allowed(b) for b in prop["anyOf"] if b.get("type") != "null"]
        return "; ".join(dict.fromkeys(p for p in parts if p))
    if "const" in prop:
        return f"`{prop['const']}`"
    if "enum" in prop:
        return "one of " + ", ".join(f"`{value}`" for value in prop["enum"])
    clauses = []
    low = ("≥", prop["minimum"]) if "minimum" in prop else (">", prop.get("exclusiveMinimum"))
    high = ("≤", prop["maximum"]) if "maximum" in prop else ("<", prop.get("exclusiveMaximum"))
    if low[1] is not None and high[1] is not None:
        clauses.append(f"{_number(low[1])} {'≤' if low[0] == '≥' else '<'} x {high[0]} {_number(high[1])}")
    elif low[1] is not None or high[1] is not None:
        sign, bound = low if low[1] is not None else high
        clauses.append(f"x {sign} {_number(bound)}")
    if "pattern" in prop:
        clauses.append(PATTERN_WORDS.get(prop["pattern"], f"matching `{prop['pattern']}`"))
    clauses += _sizes(prop)
    if isinstance(prop.get("items"), dict) and (inner := _allowed(prop["items"])):
        clauses.append(f"each: {inner}")
    if "prefixItems" in prop:
        inner_parts = list(dict.fromkeys(_allowed(item) for item in prop["prefixItems"]))
        if any(inner_parts):
            clauses.append(f"each: {inner_parts[0]}" if len(inner_parts) == 1 else "items: " + ", ".join(inner_parts))
    for pattern in prop.get("patternProperties", {}):
        clauses.append(f"keys: {PATTERN_WORDS.get(pattern, f'matching `{pattern}`')}")
    for value in _mapping_values(prop):
        if inner := _allowed(value):
            clauses.append(f"each value: {inner}")
    return "; ".join(clauses)


def _sizes(prop: dict[str, Any]) -> list[str]:
    """Length rules: characters of text, items of a list, entries of a mapping."""
    for low_key, high_key, one, many in (("minLength", "maxLength", "character", "characters"),
                                         ("minItems", "maxItems", "item", "items"),
                                         ("minProperties", "maxProperties", "entry", "entries")):
        low, high = prop.get(low_key), prop.get(high_key)
        what = one if (high if high is not None else low) == 1 else many
        if low is not None and low == high:
            return [f"exactly {low} {what}"]
        if low is not None and high is not None:
            return [f"{low} to {high} {what}"]
        if low is not None:
            return [f"at least {low} {what}"]
        if high is not None:
            return [f"at most {high} {what}"]
    return []


def _unit(prop: dict[str, Any]) -> str:
    """The unit of a property's numbers, wherever below the key it is given (not inside a model)."""
    if "unit" in prop:
        return str(prop["unit"])
    nested = [*prop.get("anyOf", []), *prop.get("prefixItems", []), *_mapping_values(prop)]
    if isinstance(prop.get("items"), dict):
        nested.append(prop["items"])
    return next((u for u in map(_unit, nested) if u), "")


def pages() -> dict[Path, str]:
    """Every generated page: the file reference (from the schemas) and the tables (from the data contract)."""
    from .tables.page import tables_page

    return {PAGE: reference_page(), TABLES_PAGE: tables_page()}


def main(argv: list[str] | None = None) -> int:
    """Write the generated pages (``--check``: only say whether they are up to date)."""
    args = sys.argv[1:] if argv is None else argv
    stale = 0
    for path, text in pages().items():
        if "--check" in args:
            if (path.read_text(encoding="utf-8") if path.exists() else "") != text:
                print(f"{path}: differs from the code it is made from; regenerate it with {REGENERATE}",
                      file=sys.stderr)
                stale = 1
            continue
        path.write_text(text, encoding="utf-8")
        print(f"wrote {path}")
    return stale


if __name__ == "__main__":
    sys.exit(main())
