"""Load and validate protocol and rig files into models, or raise one clear InputError."""

from __future__ import annotations

import difflib
import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError

from acquire import loops as loop_values
from acquire import units
from acquire.errors import InputError, KeyPath
from acquire.protocol import AXES, Protocol
from acquire.rig import ALL_SETTINGS, ROLE_LIMIT_KEYS, ROLE_SETTINGS, ROLES, Rig
from acquire.yaml_source import LoadedDocument, SourceMap, load_document

# Union members show up in pydantic's error locations; they are not keys the user wrote.
_UNION_TAGS = set(AXES) | {"float", "str", "literal['auto']", "literal['hold']"}


@dataclass(frozen=True)
class LoadedProtocol:
    protocol: Protocol
    document: LoadedDocument
    path: Path
    loop_values: tuple[tuple[float, ...], ...]  # one pass of each loop, outermost first


@dataclass(frozen=True)
class LoadedRig:
    rig: Rig
    document: LoadedDocument
    path: Path
    # role-specific limits parsed by role: (name, key) -> SI value
    ranges: dict[tuple[str, str], float]


def did_you_mean(word: str, options: list[str] | tuple[str, ...]) -> str | None:
    """'did you mean 'x'?' naming every option that is equally close (e.g. 'stpe': stop, step)."""
    scores = {option: difflib.SequenceMatcher(None, word, option).ratio() for option in options}
    best = max(scores.values(), default=0.0)
    if best < 0.6:  # difflib.get_close_matches' default cutoff
        return None
    close = [option for option in options if scores[option] == best]
    return "did you mean " + " or ".join(repr(option) for option in close) + "?"


def _allowed_keys(model: type[BaseModel], loc: KeyPath) -> list[str]:
    """Field names (and aliases) of the sub-model at `loc`, for a did-you-mean."""
    current: Any = model
    named_entry = False  # the previous field is a mapping of names (instruments): skip the name
    for part in loc:
        if isinstance(part, int) or current is None:
            continue
        if named_entry:
            named_entry = False
            continue
        fields = getattr(current, "model_fields", None)
        if fields is None:
            return []
        if part in AXES and part not in fields:
            continue
        info = fields.get(part)
        if info is None:
            return []
        current = _inner_model(info.annotation, part)
        named_entry = typing.get_origin(info.annotation) is dict
    if current is None or not hasattr(current, "model_fields"):
        return []
    return [info.alias or name for name, info in current.model_fields.items()]


def _inner_model(annotation: Any, tag: str | int | None = None) -> Any:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for argument in typing.get_args(annotation):
        found = _inner_model(argument)
        if found is not None:
            return found
    return None


def _clean_loc(loc: tuple[Any, ...], data: Any) -> KeyPath:
    cleaned: list[str | int] = []
    node = data
    for part in loc:
        key_exists = isinstance(node, dict) and part in node
        if not key_exists and isinstance(part, str) and (
            part in _UNION_TAGS or part.startswith(("function-", "literal["))
            or "[" in part
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


def _pydantic_error(
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
        allowed = _allowed_keys(model, path[:-1])
        fix = did_you_mean(str(key_name), allowed) or f"allowed keys: {', '.join(allowed)}"
        return source.error(f"unknown key {key_name!r}", path, fix)
    if kind == "missing":
        return source.error("is required but missing", path, f"add '{key_name}:'")
    if kind == "union_tag_invalid" or kind == "union_tag_not_found":
        return source.error(
            "needs 'axis:' with one of " + ", ".join(AXES), (*path, "axis"),
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


def _validate(model: type[BaseModel], document: LoadedDocument) -> Any:
    try:
        return model.model_validate(document.data)
    except ValidationError as error:
        raise _pydantic_error(error, model, document) from None


def _expand_loops(protocol: Protocol, source: SourceMap) -> tuple[tuple[float, ...], ...]:
    seen: dict[str, int] = {}
    result = []
    for index, loop in enumerate(protocol.loops):
        if loop.axis in seen:
            raise source.error(
                f"axis {loop.axis!r} is swept twice (also loops[{seen[loop.axis]}])",
                ("loops", index, "axis"), "merge the two loops into one",
            )
        seen[loop.axis] = index
        if loop.snake and index == 0:
            raise source.error(
                "'snake' needs an outer loop whose passes it alternates",
                ("loops", index, "snake"), "remove 'snake: true' from the outermost loop",
            )
        try:
            values = loop_values.expand(
                values=loop.values, start=loop.start, stop=loop.stop, step=loop.step,
                num=loop.num, spacing=loop.spacing, there_and_back=loop.return_,
            )
        except loop_values.LoopSpecError as error:
            raise source.error(error.problem, ("loops", index, error.key), error.fix) from None
        _check_axis_values(loop.axis, values, index, source, loop.values is not None)
        result.append(values)
    if "current" not in seen:
        raise source.error(
            "no current loop", ("loops",), "add e.g. '- {axis: current, values: [1 mA]}'"
        )
    return tuple(result)


def _check_axis_values(
    axis: str, values: tuple[float, ...], index: int, source: SourceMap, explicit: bool
) -> None:
    for position, value in enumerate(values):
        key: KeyPath = ("loops", index, "values", position) if explicit else ("loops", index)
        if axis == "current" and value <= 0:
            raise source.error(
                f"current amplitude {value:g} A must be positive", key,
                "the alternation pattern sets the sign; give amplitudes > 0",
            )
        if axis == "temperature" and value <= 0:
            raise source.error(
                f"temperature {value:g} K is not above absolute zero", key,
                "give temperatures in K above 0",
            )


def load_protocol(path: Path) -> LoadedProtocol:
    document = load_document(path)
    protocol: Protocol = _validate(Protocol, document)
    if protocol.limits.current is None and protocol.limits.current_density is None:
        raise document.source.error(
            "sets no current limit for the sample", ("limits",),
            "add 'current: 5 mA' or 'current_density: 1e11 A/m^2' under limits",
        )
    values = _expand_loops(protocol, document.source)
    return LoadedProtocol(protocol, document, path, values)


def _check_role_keys(rig: Rig, source: SourceMap) -> dict[tuple[str, str], float]:
    ranges: dict[tuple[str, str], float] = {}
    raw = source  # noqa: F841 - kept for readability of the error calls below
    for name, spec in rig.instruments.items():
        given = spec.model_fields_set
        for setting in sorted((given & ALL_SETTINGS) - ROLE_SETTINGS[spec.role]):
            raise source.error(
                f"'{setting}' does not apply to a {spec.role}",
                ("instruments", name, setting),
                f"a {spec.role} takes: {', '.join(sorted(ROLE_SETTINGS[spec.role])) or 'none'}",
            )
        for key in sorted(spec.limits.model_fields_set - ROLE_LIMIT_KEYS[spec.role]):
            raise source.error(
                f"limit '{key}' does not apply to a {spec.role}",
                ("instruments", name, "limits", key),
                f"a {spec.role} limits: {', '.join(sorted(ROLE_LIMIT_KEYS[spec.role])) or 'none'}",
            )
        dimension = units.ANGLE if spec.role == "rotator" else units.TEMPERATURE
        for key in ("min", "max"):
            text = getattr(spec.limits, key)
            if text is None:
                continue
            try:
                ranges[(name, key)] = units.to_si(text, dimension)
            except units.UnitError as error:
                raise source.error(str(error), ("instruments", name, "limits", key)) from None
        low, high = ranges.get((name, "min")), ranges.get((name, "max"))
        if low is not None and high is not None and low >= high:
            raise source.error(
                "min is not below max", ("instruments", name, "limits"), "swap them"
            )
        if spec.role == "current_source" and spec.limits.current is None:
            raise source.error(
                "the current source has no current limit", ("instruments", name, "limits"),
                "add 'limits: {current: 20 mA}' (the most this rig may ever source)",
            )
        if spec.role == "field" and spec.limits.field is None:
            raise source.error(
                "the field supply has no field limit", ("instruments", name, "limits"),
                "add 'limits: {field: 2 T, ramp_rate: 1 T/min}' from the magnet's manual",
            )
        if spec.role == "field" and spec.limits.ramp_rate is None:
            raise source.error(
                "the field supply has no ramp-rate limit", ("instruments", name, "limits"),
                "add 'ramp_rate: 1 T/min' (from the magnet's manual) under limits",
            )
        if (
            spec.role == "field" and spec.ramp_rate is not None
            and spec.limits.ramp_rate is not None and spec.ramp_rate > spec.limits.ramp_rate
        ):
            raise source.error(
                f"ramp_rate {spec.ramp_rate * 60:g} T/min exceeds the limit "
                f"{spec.limits.ramp_rate * 60:g} T/min", ("instruments", name, "ramp_rate"),
                "lower the ramp rate",
            )
    resources: dict[str, str] = {}
    for name, spec in rig.instruments.items():
        if spec.resource in resources:
            raise source.error(
                f"resource {spec.resource!r} is also used by {resources[spec.resource]!r}",
                ("instruments", name, "resource"), "give each instrument its own address",
            )
        resources[spec.resource] = name
    if not rig.by_role("current_source"):
        raise source.error("has no current_source", ("instruments",), "add one")
    if len(rig.by_role("current_source")) > 1:
        raise source.error(
            "has more than one current_source", ("instruments",), "keep one current source"
        )
    for role in ("field", "rotator", "temperature"):
        if len(rig.by_role(role)) > 1:
            raise source.error(f"has more than one {role} instrument", ("instruments",), "keep one")
    return ranges


def load_rig(path: Path) -> LoadedRig:
    document = load_document(path)
    instruments = document.data.get("instruments")
    if isinstance(instruments, dict):
        for name, spec in instruments.items():
            role = spec.get("role") if isinstance(spec, dict) else None
            if isinstance(role, str) and role not in ROLES:
                raise document.source.error(
                    f"unknown role {role!r}",
                    ("instruments", name, "role"),
                    did_you_mean(role, ROLES) or f"use one of {', '.join(ROLES)}",
                )
    rig: Rig = _validate(Rig, document)
    ranges = _check_role_keys(rig, document.source)
    from drivers.dialect import validate_dialects  # the dialects are the drivers' data

    validate_dialects(rig, document.source)
    return LoadedRig(rig, document, path, ranges)


def check_pair(protocol: LoadedProtocol, rig: LoadedRig) -> None:
    """Does the rig have what the protocol needs? (Limits are checked in acquire.limits.)"""
    source = protocol.document.source
    voltmeters = rig.rig.by_role("voltmeter")
    for index, channel in enumerate(protocol.protocol.readings.channels):
        if channel not in rig.rig.instruments:
            raise source.error(
                f"channel {channel!r} is not an instrument of rig {rig.rig.name!r}",
                ("readings", "channels", index),
                did_you_mean(channel, list(voltmeters))
                or f"the rig's voltmeters are: {', '.join(voltmeters) or 'none'}",
            )
        if rig.rig.instruments[channel].role != "voltmeter":
            raise source.error(
                f"channel {channel!r} is a {rig.rig.instruments[channel].role}, not a voltmeter",
                ("readings", "channels", index), "list voltmeters only",
            )
    needs = {"field": "field", "angle": "rotator", "temperature": "temperature"}
    for index, loop in enumerate(protocol.protocol.loops):
        role = needs.get(loop.axis)
        if role and not rig.rig.by_role(role):
            raise source.error(
                f"sweeps {loop.axis} but rig {rig.rig.name!r} has no {role} instrument",
                ("loops", index, "axis"), f"add a {role} to the rig or remove this loop",
            )
    if rig.rig.simulation:
        # Settings for simulated runs: a typo there should fail now, not at the rehearsal.
        from sim_instruments.for_protocol import sample_for

        sample_for(protocol, rig, seed=None)
    if protocol.protocol.finish.temperature != "hold" and not rig.rig.by_role("temperature"):
        raise source.error(
            "sets a finish temperature but the rig has no temperature instrument",
            ("finish", "temperature"), "use 'temperature: hold'",
        )
