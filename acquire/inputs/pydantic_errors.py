"""Pydantic's validation errors as one clear InputError: the key the user wrote, its file and
line, what is wrong and the fix."""

from __future__ import annotations

import difflib
import typing
from typing import Any

from pydantic import BaseModel, ValidationError

from acquire.errors import InputError, KeyPath
from acquire.inputs.protocol import axis_names
from acquire.inputs.yaml_source import LoadedDocument, SourceMap
from drivers.roles import all_roles, role_names


def did_you_mean(word: str, options: list[str] | tuple[str, ...]) -> str | None:
    """'did you mean 'x'?' naming every option that is equally close (e.g. 'stpe': stop, step)."""
    scores = {option: difflib.SequenceMatcher(None, word, option).ratio() for option in options}
    best = max(scores.values(), default=0.0)
    if best < 0.6:  # difflib.get_close_matches' default cutoff
        return None
    close = [option for option in options if scores[option] == best]
    return "did you mean " + " or ".join(repr(option) for option in close) + "?"


def _union_tags() -> set[str]:
    # Union members show up in pydantic's error locations; they are not keys the user wrote.
    return {*axis_names(), *role_names(), "float", "str", "literal['auto']", "literal['hold']",
            "cycle_count", "cycle_target"}


def _strip(annotation: Any) -> Any:
    """Annotated[X, ...] -> X; X | None -> X."""
    while typing.get_origin(annotation) is typing.Annotated:
        annotation = typing.get_args(annotation)[0]
    arguments = [arg for arg in typing.get_args(annotation) if arg is not type(None)]
    if type(None) in typing.get_args(annotation) and len(arguments) == 1:
        return _strip(arguments[0])
    return annotation


def _models_in(annotation: Any) -> list[type[BaseModel]]:
    annotation = _strip(annotation)
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    return [model for arg in typing.get_args(annotation) for model in _models_in(arg)]


def _resolve(annotation: Any, node: Any) -> type[BaseModel] | None:
    """The model `node` is validated against: a union's member chosen by its tag field."""
    models = _models_in(annotation)
    if isinstance(node, dict):
        for model in models:
            for tag in ("axis", "role", "mode"):
                field = model.model_fields.get(tag)
                if field is not None and node.get(tag) in typing.get_args(field.annotation):
                    return model
    return models[0] if models else None


def _allowed_keys(model: type[BaseModel], loc: KeyPath, data: Any) -> list[str]:
    """Field names (and aliases) of the sub-model at `loc`, for a did-you-mean."""
    resolved = _model_at(model, loc, data)
    if resolved is None:
        return []
    return [info.alias or name for name, info in resolved.model_fields.items()]


def _yes_no_keys(model: type[BaseModel], loc: KeyPath, data: Any) -> str | None:
    """The true/false keys of the sub-model at `loc` with their meaning: what a user who wrote
    an unknown key with a true/false value most likely wanted (a key of another program)."""
    resolved = _model_at(model, loc, data)
    if resolved is None:
        return None
    keys = [f"'{info.alias or name}: true' ({info.description or name})"
            for name, info in resolved.model_fields.items() if info.annotation is bool]
    return "the true/false keys here are " + "; ".join(keys) if keys else None


def _model_at(model: type[BaseModel], loc: KeyPath, data: Any) -> type[BaseModel] | None:
    """The sub-model validating the node at `loc` (a union's member chosen by its tag)."""
    annotation: Any = model
    node = data
    for part in loc:
        if typing.get_origin(_strip(annotation)) in (list, dict):
            # an item of a list, or an entry of a mapping of names (instruments)
            annotation = typing.get_args(_strip(annotation))[-1]
        else:
            resolved = _resolve(annotation, node)
            if resolved is None or part not in resolved.model_fields:
                return None
            annotation = resolved.model_fields[str(part)].annotation
        node = _written(node, (part,), None)
    return _resolve(annotation, node)


def _clean_loc(loc: tuple[Any, ...], data: Any) -> KeyPath:
    tags = _union_tags()
    cleaned: list[str | int] = []
    node = data
    for part in loc:
        key_exists = isinstance(node, dict) and part in node
        if not key_exists and isinstance(part, str) and (
            part in tags or part.startswith(("function-", "literal[")) or "[" in part
        ):
            continue
        cleaned.append(part)
        if isinstance(node, dict):
            node = node.get(part)
        elif isinstance(node, list) and isinstance(part, int) and part < len(node):
            node = node[part]
        else:
            node = None
    return tuple(cleaned)


def _other_roles_key(path: KeyPath, data: Any) -> InputError | None:
    """A setting or limit that belongs to another role: say so, and what this role takes."""
    if path[:1] != ("instruments",) or len(path) not in (3, 4):
        return None
    entry = data.get("instruments", {}).get(path[1]) if isinstance(data, dict) else None
    role = next((r for r in all_roles() if isinstance(entry, dict) and r.name == entry.get(
        "role")), None)
    if role is None:
        return None
    key = path[-1]
    if len(path) == 3 and any(key in other.setting_keys for other in all_roles()):
        takes = ", ".join(sorted(role.setting_keys)) or "none"
        return InputError(f"'{key}' does not apply to a {role.name}", key=path,
                          fix=f"a {role.name} takes: {takes}")
    if len(path) == 4 and path[2] == "limits" and any(
            key in other.limit_keys for other in all_roles()):
        limits = ", ".join(sorted(role.limit_keys)) or "none"
        return InputError(f"limit '{key}' does not apply to a {role.name}", key=path,
                          fix=f"a {role.name} limits: {limits}")
    return None


def pydantic_error(
    error: ValidationError, model: type[BaseModel], document: LoadedDocument
) -> InputError:
    errors = error.errors()
    # A misspelt key also makes the real one "missing": report the misspelling, the cause.
    first = next((e for e in errors if e["type"] == "extra_forbidden"), errors[0])
    path = _clean_loc(first["loc"], document.data)
    # A value that may be a word or a quantity ('hold' or '300 K') fails both; the quantity's
    # message says more, and the words go in the fix.
    here = [e for e in errors if _clean_loc(e["loc"], document.data) == path]
    words = [str(e.get("ctx", {}).get("expected")) for e in here if e["type"] == "literal_error"]
    if words:
        first = next((e for e in here if e["type"] == "value_error"), first)
    kind = first["type"]
    message = str(first["msg"]).removeprefix("Value error, ")
    source: SourceMap = document.source
    key_name = path[-1] if path else ""
    value = first.get("input")
    if kind == "extra_forbidden":
        other = _other_roles_key(path, document.data)
        if other is not None:
            return source.error(other.problem, other.key, other.fix)
        allowed = _allowed_keys(model, path[:-1], document.data)
        yes_no = _yes_no_keys(model, path[:-1], document.data) if isinstance(value, bool) else None
        fix = (did_you_mean(str(key_name), allowed) or yes_no
               or f"allowed keys: {', '.join(allowed)}")
        return source.error(f"unknown key {key_name!r}", path, fix)
    if kind == "missing":
        return source.error("is required but missing", path, f"add '{key_name}:'")
    if kind in ("union_tag_invalid", "union_tag_not_found"):
        if path[:1] == ("instruments",):
            return source.error("is required but missing", (*path, "role"), "add 'role:'")
        return source.error(
            "needs 'axis:' with one of " + ", ".join(axis_names()), (*path, "axis"),
            "e.g. 'axis: angle'",
        )
    if kind == "literal_error":
        return source.error(message, path, "use one of the values listed")
    if kind in ("too_short",) and isinstance(key_name, str):
        return source.error("is empty", path, f"give at least one entry under '{key_name}'")
    if kind in ("dict_type", "model_type", "model_attributes_type"):
        example = "{axis: field, values: [0.2 T]}" if path[:1] == ("loops",) else "{key: value}"
        return source.error(
            f"must be a mapping of keys to values (got {value!r})", path,
            f"write 'key: value' pairs, e.g. '{example}'",
        )
    written = _written(document.data, path, value)  # as the user wrote it, not in SI
    shown = f" (got {written!r})" if not isinstance(written, (dict, list)) else ""
    if message.startswith(repr(value)) or f"read {value!r}" in message:
        shown = ""  # a unit error already quotes the value
    fix = _TYPE_FIXES.get(kind, "")
    if kind == "value_error" and words:
        fix = "or write " + " or ".join(words)
    elif kind == "string_type" and isinstance(value, (int, float)):
        fix = f"put it in quotes: '{value}'"
    elif kind == "list_type" and isinstance(value, dict):
        fix = "write a list: one item per entry, each starting with '- '"
    elif kind == "list_type":
        fix = f"write a list in brackets, e.g. '[{value}]'"
    return source.error(f"{message}{shown}", path, fix)


_TYPE_FIXES = {
    "int_parsing": "write a whole number, e.g. '4'",
    "int_from_float": "write a whole number, e.g. '4'",
    "int_type": "write a whole number, e.g. '4'",
    "float_parsing": "write a plain number, e.g. '1'",
    "float_type": "write a plain number, e.g. '1'",
    "bool_parsing": "write true or false",
    "bool_type": "write true or false",
    "list_type": "write a list in brackets, e.g. '[a, b]'",
    "string_type": "write text",
}


def _written(data: Any, path: KeyPath, default: Any) -> Any:
    for part in path:
        in_dict = isinstance(data, dict) and part in data
        in_list = isinstance(data, list) and isinstance(part, int) and part < len(data)
        if not (in_dict or in_list):
            return default
        data = data[part]
    return data


def validate(model: type[BaseModel], document: LoadedDocument) -> Any:
    try:
        return model.model_validate(document.data)
    except ValidationError as error:
        raise pydantic_error(error, model, document) from None
