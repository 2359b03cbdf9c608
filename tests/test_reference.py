"""The file reference: every key described with a unit and range, the generated page in step, `undertow schema`.

docs/reference.md is generated from the schemas (``make reference``); these
tests fail when the page and the schemas differ, when a key has no
description or a number no unit, and when a shipped file of a kind is not
what that kind's JSON Schema describes.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
import yaml

from abm import cli
from abm.reference import DIALECT, FILE_KINDS, PAGE, REGENERATE, json_schema, model_of, models_of, reference_page

ROOT = Path(__file__).resolve().parent.parent


def _numeric(prop: dict[str, Any]) -> bool:
    """Whether a property holds numbers anywhere below it (not inside another model)."""
    if prop.get("type") in ("number", "integer"):
        return True
    nested = [*prop.get("anyOf", []), *prop.get("prefixItems", []), *prop.get("patternProperties", {}).values()]
    for key in ("items", "additionalProperties"):
        if isinstance(prop.get(key), dict):
            nested.append(prop[key])
    return any(_numeric(p) for p in nested)


def _has_unit(prop: dict[str, Any]) -> bool:
    return "unit" in json.dumps({k: v for k, v in prop.items() if k != "description"})


@pytest.mark.parametrize("kind", list(FILE_KINDS))
def test_every_key_has_a_description_and_every_number_a_unit(kind: str) -> None:
    root = model_of(kind)
    schema = json_schema(kind)
    problems = []
    for name, model in models_of(root).items():
        if not (model.__dict__.get("__doc__") or "").strip():
            problems.append(f"{name}: no docstring")
        node = schema if model is root else schema["$defs"][name]
        for key, prop in node["properties"].items():
            if not (model.model_fields[key].description or "").strip():
                problems.append(f"{name}.{key}: no description")
            if _numeric(prop) and not _has_unit(prop):
                problems.append(f"{name}.{key}: a number without a unit")
    assert not problems, "\n".join(problems)


def test_the_page_is_generated_from_the_schemas() -> None:
    expected = reference_page()
    current = PAGE.read_text(encoding="utf-8") if PAGE.exists() else ""
    assert current == expected, f"{PAGE} differs from the schemas; regenerate it with {REGENERATE}"


def test_the_page_shows_ranges_units_and_defaults() -> None:
    page = reference_page()
    rows = {line.split(" | ")[0].strip("| `"): line for line in page.splitlines() if line.startswith("| `")}
    assert "| exactly 24 items; each: 0 ≤ x ≤ 1e9 | relative weight |" in rows["hourly_profile"]
    assert "| required | 0 ≤ x ≤ 1 | chance |" in rows["attempt_chance"]
    assert "| `[{\"name\": \"normal\", \"hazard\": 0.0}]` | at least 1 item |" in rows["depths"]
    assert "one of `smc`, `rejection`" in page and "| 0 < x < 1 | probability |" in page
    for kind in FILE_KINDS.values():
        assert f"\n## {kind.heading}\n" in page
    headings = [line for line in page.splitlines() if line.startswith("### ")]
    assert len(headings) == len(set(headings)), "a model name twice: its anchor would be ambiguous"


def _shipped(kind: str) -> list[Path]:
    files = sorted(p for p in (ROOT / "worlds").rglob("*.yaml"))
    return [p for p in files if cli._file_kind(str(p)) == kind]


def _resolve(schema: dict[str, Any], root: dict[str, Any]) -> dict[str, Any]:
    while "$ref" in schema:
        schema = root["$defs"][schema["$ref"].rsplit("/", 1)[-1]]
    return schema


def _key_problems(data: Any, schema: dict[str, Any], root: dict[str, Any], where: str = "") -> list[str]:
    """Keys a file has that the schema does not allow, and required keys it lacks, at every depth.

    A small stand-in for a JSON-Schema validator (none is a dependency): it
    follows $ref, anyOf, items, prefixItems and mapping values.
    """
    schema = _resolve(schema, root)
    if "anyOf" in schema:
        wanted = "object" if isinstance(data, dict) else "array" if isinstance(data, list) else None
        branches = [_resolve(b, root) for b in schema["anyOf"]]
        fitting = [b for b in branches if b.get("type") == wanted]
        return _key_problems(data, fitting[0], root, where) if fitting else []
    problems = []
    if isinstance(data, dict) and "properties" in schema:
        props = schema["properties"]
        problems += [f"{where}{key}: not in the schema" for key in data if key not in props]
        problems += [f"{where}{key}: required, missing" for key in schema.get("required", []) if key not in data]
        for key, value in data.items():
            if key in props:
                problems += _key_problems(value, props[key], root, f"{where}{key}.")
    elif isinstance(data, dict):
        values = [*schema.get("patternProperties", {}).values()]
        if isinstance(schema.get("additionalProperties"), dict):
            values.append(schema["additionalProperties"])
        for key, value in data.items():
            for value_schema in values[:1]:
                problems += _key_problems(value, value_schema, root, f"{where}{key}.")
    elif isinstance(data, list):
        prefix = schema.get("prefixItems", [])
        for i, item in enumerate(data):
            item_schema = prefix[i] if i < len(prefix) else schema.get("items")
            if isinstance(item_schema, dict):
                problems += _key_problems(item, item_schema, root, f"{where.rstrip('.')}[{i}].")
    return problems


def _validate(data: dict[str, Any], schema: dict[str, Any]) -> list[str]:
    """A JSON-Schema validator's complaints when one is installed, else the key check."""
    try:
        import jsonschema
    except ImportError:
        return _key_problems(data, schema, schema)
    plain = json.loads(json.dumps(data, default=str))  # YAML's integer keys (group sizes) as JSON's strings
    return [error.message for error in jsonschema.Draft202012Validator(schema).iter_errors(plain)]


@pytest.mark.parametrize("kind", list(FILE_KINDS))
def test_schema_command_prints_a_json_schema_the_shipped_files_meet(
    kind: str, capsys: pytest.CaptureFixture[str]
) -> None:
    assert cli.main(["schema", kind]) == 0
    schema = json.loads(capsys.readouterr().out)
    assert schema["$schema"] == DIALECT
    assert schema["title"] == f"Undertow {kind} file"
    assert schema["additionalProperties"] is False
    files = _shipped(kind)
    assert files, f"no shipped {kind} file to check the schema with"
    for path in files:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
        assert _validate(data, schema) == [], path


def test_the_key_check_finds_a_misspelt_nested_key_and_a_missing_one() -> None:
    schema = json_schema("world")
    data = yaml.safe_load((ROOT / "worlds" / "kestrel_quay" / "world.yaml").read_text(encoding="utf-8"))
    data["stations"][1]["selection"]["fractoin"] = 0.5
    del data["adversary"]["attempt_chance"]
    problems = _key_problems(data, schema, schema)
    assert problems == ["stations[1].selection.fractoin: not in the schema", "adversary.attempt_chance: required, missing"]


def test_schema_of_an_unknown_kind_is_one_line_and_exit_code_2(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as stop:
        cli.main(["schema", "timetable"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "invalid choice: 'timetable'" in err
