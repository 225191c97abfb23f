"""Reading the pydantic models of the input files as documentation: every key with what it
takes (its unit), its default and its meaning, section by section.

The JSON Schema of a quantity type carries its dimension's example ("20 ms"); that is how a
key's unit is found (drivers.quantities), so a new quantity type needs nothing here.
"""

from __future__ import annotations

import types
import typing
from dataclasses import dataclass
from typing import Any

import annotated_types
from pydantic import BaseModel, WithJsonSchema
from pydantic.fields import FieldInfo
from pydantic_core import PydanticUndefined

from drivers import units

DIMENSION_OF_EXAMPLE: dict[str, units.Dimension] = {
    dimension.example: dimension for dimension in units.ALL_DIMENSIONS
}
assert len(DIMENSION_OF_EXAMPLE) == len(units.ALL_DIMENSIONS), "dimension examples must differ"


@dataclass(frozen=True)
class KeyDoc:
    key: str  # as written in the file ("return", not "return_")
    takes: str  # what the value is: "time (s), e.g. `20 ms`", "one of `xy`, `zx`"
    default: str  # "required", "none", or the default as a user would write it
    meaning: str


@dataclass(frozen=True)
class SectionDoc:
    path: str  # "alternation", "sample.layers[]", "loops[] (axis: field)"
    summary: str  # the model's docstring, or ""
    keys: tuple[KeyDoc, ...]


def dimension_in(schema: WithJsonSchema) -> units.Dimension | None:
    examples = (schema.json_schema or {}).get("examples") or [None]
    return DIMENSION_OF_EXAMPLE.get(str(examples[0]))


def _union_members(annotation: Any) -> tuple[Any, ...] | None:
    origin = typing.get_origin(annotation)
    if origin is typing.Union or origin is types.UnionType:
        return typing.get_args(annotation)
    return None


def quantity_of(annotation: Any) -> units.Dimension | None:
    """The dimension of a quantity type anywhere in `annotation` (a union's member, a list's
    item), or None."""
    if typing.get_origin(annotation) is typing.Annotated:
        for meta in annotation.__metadata__:
            if isinstance(meta, WithJsonSchema) and (found := dimension_in(meta)) is not None:
                return found
        return quantity_of(typing.get_args(annotation)[0])
    return next((found for arg in typing.get_args(annotation)
                 if (found := quantity_of(arg)) is not None), None)


def models_in(annotation: Any) -> list[type[BaseModel]]:
    """The models a field holds: itself, a list's items, a union's members, a mapping's values."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    return [model for arg in typing.get_args(annotation) for model in models_in(arg)]


def _constraints(metadata: list[Any]) -> str:
    words = []
    for meta in metadata:
        if isinstance(meta, annotated_types.Gt):
            words.append(f"> {meta.gt}")
        elif isinstance(meta, annotated_types.Ge):
            words.append(f">= {meta.ge}")
        elif isinstance(meta, annotated_types.Lt):
            words.append(f"< {meta.lt}")
        elif isinstance(meta, annotated_types.Le):
            words.append(f"<= {meta.le}")
        elif isinstance(meta, annotated_types.MinLen) and meta.min_length == 1:
            words.append("not empty")
        elif isinstance(meta, annotated_types.MinLen) and meta.min_length > 1:
            words.append(f"at least {meta.min_length} long")
    return ", ".join(words)


def describe(annotation: Any) -> str:
    """What a value of this type is, as a user writes it."""
    if typing.get_origin(annotation) is typing.Annotated:
        for meta in annotation.__metadata__:
            if isinstance(meta, WithJsonSchema) and (dimension := dimension_in(meta)):
                return f"{dimension.name} ({dimension.si_unit}), e.g. `{dimension.example}`"
        inner = describe(typing.get_args(annotation)[0])
        limits = _constraints(list(annotation.__metadata__))
        return f"{inner}, {limits}" if limits else inner
    members = _union_members(annotation)
    if members is not None:
        shown = [describe(arg) for arg in members if arg is not type(None)]
        return " or ".join(dict.fromkeys(shown))
    origin = typing.get_origin(annotation)
    if origin is typing.Literal:
        return "one of " + ", ".join(f"`{value}`" for value in typing.get_args(annotation))
    if origin is list:
        return f"list of {describe(typing.get_args(annotation)[0])}"
    if origin is dict:
        return f"mapping of names to {describe(typing.get_args(annotation)[-1])}"
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return "section"
    if annotation is Any:
        return "any value"
    return {bool: "true or false", int: "whole number", float: "number", str: "text"}.get(
        annotation, getattr(annotation, "__name__", str(annotation)))


def full_annotation(info: FieldInfo) -> Any:
    """The field's type with the constraints pydantic moved into `metadata` put back."""
    if info.metadata:
        parts = (info.annotation, *info.metadata)
        return typing.Annotated[parts]
    return info.annotation


def shown_default(info: FieldInfo) -> str:
    if info.is_required():
        return "required"
    value = info.get_default(call_default_factory=True)
    if value is None or value is PydanticUndefined:
        return "none"
    if isinstance(value, BaseModel):
        return "see the section"
    if isinstance(value, bool):
        return f"`{str(value).lower()}`"
    dimension = quantity_of(full_annotation(info))
    if dimension is not None and isinstance(value, (int, float)):
        return f"`{value:g} {dimension.si_unit}`"
    if isinstance(value, (dict, list)) and not value:
        return "`{}`" if isinstance(value, dict) else "`[]`"
    if isinstance(value, str):
        if any(character < " " for character in value):
            return f"`{value!r}`"  # a line ending: shown escaped, as a YAML string writes it
        return f"`{value}`" if value else "empty"
    return f"`{value}`"


def key_name(name: str, info: FieldInfo) -> str:
    return info.alias or name


def section_docs(model: type[BaseModel], path: str, skip: frozenset[str] = frozenset()
                 ) -> list[SectionDoc]:
    """The model's own section, then each sub-section it holds, in the order of its keys."""
    keys: list[KeyDoc] = []
    below: list[SectionDoc] = []
    for name, info in model.model_fields.items():
        if name in skip:
            continue
        key = key_name(name, info)
        annotation = full_annotation(info)
        models = models_in(info.annotation)
        meaning = info.description or ""
        if models:
            meaning = meaning or _first_sentence(models[0].__doc__)
            where = f"{path}.{key}" if path else key
            if typing.get_origin(info.annotation) is dict:
                where += ".<name>"
            elif typing.get_origin(info.annotation) is list or _is_list(info.annotation):
                where += "[]"
            takes = _section_kind(info.annotation, where)
            keys.append(KeyDoc(key, takes, shown_default(info), meaning))
            for sub in models:
                below.extend(section_docs(sub, _member_path(where, sub, len(models))))
            continue
        keys.append(KeyDoc(key, describe(annotation), shown_default(info), meaning))
    summary = " ".join((model.__doc__ or "").split()) if model.__doc__ else ""
    return [SectionDoc(path, summary, tuple(keys)), *below]


def _is_list(annotation: Any) -> bool:
    members = _union_members(annotation)
    return bool(members) and any(typing.get_origin(arg) is list for arg in members or ())


def _section_kind(annotation: Any, where: str) -> str:
    if typing.get_origin(annotation) is dict:
        return f"mapping of names to entries (see `{where}`)"
    if typing.get_origin(annotation) is list or _is_list(annotation):
        return f"list of entries (see `{where}`)"
    return f"section (see `{where}`)"


def _first_sentence(doc: str | None) -> str:
    text = " ".join((doc or "").split())
    return text.split(": ")[0].split(". ")[0].rstrip(".")


def _member_path(where: str, model: type[BaseModel], count: int) -> str:
    """A union's member is told apart by its tag field's value (axis, role, mode)."""
    if count == 1:
        return where
    for tag in ("axis", "role", "mode"):
        field = model.model_fields.get(tag)
        if field is not None and typing.get_origin(field.annotation) is typing.Literal:
            return f"{where} ({tag}: {typing.get_args(field.annotation)[0]})"
    return f"{where} ({model.__name__})"
