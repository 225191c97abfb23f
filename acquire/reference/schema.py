"""JSON Schemas of the protocol and rig files, for editors: the models' own schemas with every
default written as a user writes it ("0.02 s", not 0.02), so a default copied into a file is
accepted by `check`."""

from __future__ import annotations

import copy
from typing import Any

from pydantic.json_schema import models_json_schema

from acquire.modes import all_modes
from acquire.reference.fields import DIMENSION_OF_EXAMPLE
from drivers.rig import Rig

DRAFT = "https://json-schema.org/draft/2020-12/schema"
SCHEMA_NAMES = ("protocol", "rig")


def _quantity_unit(schema: dict[str, Any]) -> str | None:
    """The SI unit of a quantity's schema (a string with a dimension's example), or None."""
    for candidate in (schema, *schema.get("anyOf", [])):
        examples = candidate.get("examples") or [None]
        dimension = DIMENSION_OF_EXAMPLE.get(str(examples[0]))
        if candidate.get("type") == "string" and dimension is not None:
            return dimension.si_unit
    return None


def _resolved(schema: dict[str, Any], definitions: dict[str, Any]) -> dict[str, Any]:
    reference = schema.get("$ref")
    if reference:
        return definitions[reference.rsplit("/", 1)[-1]]
    return schema


def _written(value: Any, schema: dict[str, Any], definitions: dict[str, Any]) -> Any:
    """A default as the file writes it: quantities with their unit, sections key by key."""
    schema = _resolved(schema, definitions)
    unit = _quantity_unit(schema)
    if unit is not None and isinstance(value, (int, float)) and not isinstance(value, bool):
        return f"{value:g} {unit}"
    if isinstance(value, dict):
        properties = schema.get("properties", {})
        return {key: _written(item, properties.get(key, {}), definitions)
                for key, item in value.items()}
    return value


def _with_unit_defaults(schema: dict[str, Any], definitions: dict[str, Any]) -> None:
    for prop in schema.get("properties", {}).values():
        if "default" in prop:
            prop["default"] = _written(prop["default"], prop, definitions)


def _allow_extends(schema: dict[str, Any]) -> None:
    # A file may extend a base file (acquire.inputs.yaml_source); its required keys may then
    # all come from the base, so they are required only of a file without 'extends'.
    schema["properties"] = {
        "extends": {"type": "string", "description": "path of a base file, relative to this"},
        "extends_anywhere": {"type": "boolean", "description": "let `extends` leave this "
                             "file's folder (only in the file given on the command line)"},
        **schema["properties"],
    }
    required = schema.pop("required", [])
    schema["if"] = {"required": ["extends"]}
    schema["else"] = {"required": required}


def _unit_defaults_everywhere(schemas: list[dict[str, Any]], definitions: dict[str, Any]
                              ) -> None:
    for schema in [*schemas, *definitions.values()]:
        _with_unit_defaults(schema, definitions)


def rig_schema() -> dict[str, Any]:
    schema = copy.deepcopy(Rig.model_json_schema(by_alias=True))
    _unit_defaults_everywhere([schema], schema.get("$defs", {}))
    _allow_extends(schema)
    return {"$schema": DRAFT, **schema}


def protocol_schema() -> dict[str, Any]:
    """One schema per mode (the mode's protocol model), any of them, sharing definitions."""
    models = [(mode.protocol_model, "validation") for mode in all_modes()]
    keys, shared = models_json_schema(models, by_alias=True)  # type: ignore[arg-type]
    definitions: dict[str, Any] = copy.deepcopy(shared.get("$defs", {}))
    _unit_defaults_everywhere([], definitions)
    refs = []
    for model, _ in models:
        name = keys[(model, "validation")]["$ref"].rsplit("/", 1)[-1]
        _allow_extends(definitions[name])
        refs.append({"$ref": f"#/$defs/{name}"})
    if len(refs) == 1:
        # One mode: its model is the schema itself, as editors show it best.
        (name,) = (ref["$ref"].rsplit("/", 1)[-1] for ref in refs)
        top = definitions.pop(name)
        return {"$schema": DRAFT, **top, "$defs": definitions}
    return {"$schema": DRAFT, "title": "flipsweep protocol", "anyOf": refs,
            "$defs": definitions}


def schema_named(name: str) -> dict[str, Any]:
    return protocol_schema() if name == "protocol" else rig_schema()
