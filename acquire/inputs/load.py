"""Load and validate protocol and rig files into models, or raise one clear InputError."""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from acquire.errors import InputError
from acquire.inputs import loops as loop_values
from acquire.inputs.protocol import CURRENT_AXIS
from acquire.inputs.pydantic_errors import did_you_mean, validate
from acquire.inputs.rig_checks import driver_problem, resource_problem, visa_library_problem
from acquire.inputs.simulated_sample import simulated_sample
from acquire.inputs.yaml_source import LoadedDocument, SourceMap, load_document
from acquire.modes import DEFAULT_MODE, mode_named, mode_names
from acquire.modes.base import AcquisitionMode
from drivers.dialect import dialect_for
from drivers.rig import Rig
from drivers.roles import all_roles, movable_axes, role_named, role_names, role_of_axis
from drivers.roles.base import Quantity
from drivers.roles.current_source import CURRENT


@dataclass(frozen=True)
class LoadedProtocol:
    protocol: Any  # the mode's protocol model (acquire.inputs.protocol.ProtocolBase)
    document: LoadedDocument
    path: Path
    loop_values: tuple[tuple[float, ...], ...]  # one pass of each loop, outermost first
    mode: AcquisitionMode

    def values_of(self, axis: str) -> tuple[float, ...]:
        index = self.loop_index(axis)
        return self.loop_values[index] if index is not None else ()

    def loop_index(self, axis: str) -> int | None:
        return next((i for i, loop in enumerate(self.protocol.loops) if loop.axis == axis),
                    None)


@dataclass(frozen=True)
class LoadedRig:
    rig: Rig
    document: LoadedDocument
    path: Path


def _mode_of(document: LoadedDocument) -> AcquisitionMode:
    name = document.data.get("mode", DEFAULT_MODE)
    if not isinstance(name, str) or name not in mode_names():
        raise document.source.error(
            f"unknown mode {name!r}", ("mode",),
            did_you_mean(str(name), mode_names()) or f"use one of {', '.join(mode_names())}",
        )
    return mode_named(name)


def _expand_loops(protocol: Any, source: SourceMap) -> tuple[tuple[float, ...], ...]:
    seen: dict[str, int] = {}
    result = []
    for index, loop in enumerate(protocol.loops):
        if loop.axis in seen:
            raise source.error(
                f"axis {loop.axis!r} is swept twice (also loops[{seen[loop.axis]}])",
                ("loops", index, "axis"), "merge the two loops into one",
            )
        seen[loop.axis] = index
        if loop.alternate_direction and index == 0:
            raise source.error(
                "'alternate_direction' needs an outer loop whose passes it alternates",
                ("loops", index, "alternate_direction"),
                "remove 'alternate_direction: true' from the outermost loop",
            )
        try:
            values = loop_values.expand(
                values=loop.values, start=loop.start, stop=loop.stop, step=loop.step,
                num=loop.num, spacing=loop.spacing, there_and_back=loop.return_,
                show=_quantity_of(loop.axis).shown,
            )
        except loop_values.LoopSpecError as error:
            raise source.error(error.problem, ("loops", index, error.key), error.fix) from None
        _check_axis_values(loop.axis, values, index, source, loop.values is not None)
        result.append(values)
    if CURRENT_AXIS not in seen:
        raise source.error(
            "no current loop", ("loops",), "add e.g. '- {axis: current, values: [1 mA]}'"
        )
    return tuple(result)


def _quantity_of(axis: str) -> Quantity:
    """How the axis's values are shown in messages (in the unit a person writes)."""
    if axis == CURRENT_AXIS:
        return CURRENT
    return next(moved.quantity for moved in movable_axes() if moved.name == axis)


def _check_axis_values(
    axis: str, values: tuple[float, ...], index: int, source: SourceMap, explicit: bool
) -> None:
    moved = next((a for a in movable_axes() if a.name == axis), None)
    for position, value in enumerate(values):
        key = ("loops", index, "values", position) if explicit else ("loops", index)
        if axis == CURRENT_AXIS and value <= 0:
            raise source.error(
                f"current amplitude {value:g} A must be positive", key,
                "the alternation pattern sets the sign; give amplitudes > 0",
            )
        problem = moved.value_problem(value) if moved is not None else None
        if problem is not None:
            raise source.error(problem[0], key, problem[1])


def _check_limits_section(protocol: Any, source: SourceMap) -> None:
    limits = protocol.limits
    if limits.current is None and limits.current_density is None and limits.power is None:
        raise source.error(
            "sets no current limit for the sample", ("limits",),
            "add 'current: 5 mA', 'current_density: 1e11 A/m^2' or 'power: 1 mW' under limits",
        )
    if isinstance(limits.current_density, dict):
        names = [layer.name for layer in protocol.sample.layers]
        for name in limits.current_density:
            if name not in names:
                raise source.error(
                    f"no layer is named {name!r}", ("limits", "current_density", name),
                    did_you_mean(name, names) or f"the layers are {', '.join(names)}",
                )


def _check_point_count(protocol: Any, values: tuple[tuple[float, ...], ...],
                       source: SourceMap) -> None:
    points = math.prod(len(one_pass) for one_pass in values)
    if points > protocol.max_points:
        raise source.error(
            f"the loops give {points:,} points, more than max_points {protocol.max_points:,}",
            ("loops",),
            "check the steps for a unit slip; if that many points are intended, "
            f"add 'max_points: {points}' at the top of the protocol",
        )


def load_protocol(path: Path) -> LoadedProtocol:
    document = load_document(path)
    mode = _mode_of(document)
    protocol = validate(mode.protocol_model, document)
    _check_limits_section(protocol, document.source)
    values = _expand_loops(protocol, document.source)
    _check_point_count(protocol, values, document.source)
    loaded = LoadedProtocol(protocol, document, path, values, mode)
    mode.check(loaded)
    return loaded


def _located(source: SourceMap, error: InputError, prefix: tuple[str | int, ...] = ()
             ) -> InputError:
    return source.error(error.problem, (*prefix, *error.key), error.fix)


def _check_instruments(rig: Rig, source: SourceMap) -> None:
    for name, spec in rig.instruments.items():
        try:
            role_named(spec.role).check(spec)
        except InputError as error:
            raise _located(source, error, ("instruments", name)) from None
        problem = resource_problem(spec.resource)
        if problem is not None:
            raise source.error(problem[0], ("instruments", name, "resource"), problem[1])
        problem = driver_problem(spec.driver) if spec.driver is not None else None
        if problem is not None:
            raise source.error(problem[0], ("instruments", name, "driver"), problem[1])
    resources: dict[str, str] = {}
    for name, spec in rig.instruments.items():
        if spec.resource in resources:
            raise source.error(
                f"resource {spec.resource!r} is also used by {resources[spec.resource]!r}",
                ("instruments", name, "resource"), "give each instrument its own address",
            )
        resources[spec.resource] = name
    for role in all_roles():
        count = len(rig.of_role(role))
        if role.required and count == 0:
            raise source.error(f"has no {role.name}", ("instruments",), "add one")
        if role.at_most_one and count > 1:
            article = "" if role.required else " instrument"
            raise source.error(
                f"has more than one {role.name}{article}", ("instruments",),
                f"keep one {role.name.replace('_', ' ')}" if role.required else "keep one",
            )
    for name, spec in rig.instruments.items():
        try:
            dialect_for(name, spec)
        except InputError as error:
            raise _located(source, error) from None


def load_rig(path: Path) -> LoadedRig:
    document = load_document(path)
    instruments = document.data.get("instruments")
    if isinstance(instruments, dict):
        for name, spec in instruments.items():
            role = spec.get("role") if isinstance(spec, dict) else None
            if isinstance(role, str) and role not in role_names():
                raise document.source.error(
                    f"unknown role {role!r}",
                    ("instruments", name, "role"),
                    did_you_mean(role, role_names()) or f"use one of {', '.join(role_names())}",
                )
    rig: Rig = validate(Rig, document)
    problem = visa_library_problem(rig.visa_library, path.parent)
    if problem is not None:
        raise document.source.error(problem[0], ("visa_library",), problem[1])
    _check_instruments(rig, document.source)
    return LoadedRig(rig, document, path)


def check_pair(protocol: LoadedProtocol, rig: LoadedRig) -> None:
    """Does the rig have what the protocol needs? (Limits are checked in acquire.plan.limits.)"""
    source = protocol.document.source
    mode = protocol.mode
    wanted = mode.channel_role
    candidates = rig.rig.of_role(role_named(wanted))
    for index, channel in enumerate(mode.channels(protocol.protocol)):
        if channel not in rig.rig.instruments:
            raise source.error(
                f"channel {channel!r} is not an instrument of rig {rig.rig.name!r}",
                ("readings", "channels", index),
                did_you_mean(channel, list(candidates))
                or f"the rig's {wanted}s are: {', '.join(candidates) or 'none'}",
            )
        if rig.rig.instruments[channel].role != wanted:
            raise source.error(
                f"channel {channel!r} is a {rig.rig.instruments[channel].role}, not a {wanted}",
                ("readings", "channels", index), f"list {wanted}s only",
            )
    movable = {axis.name for axis in movable_axes()}
    for index, loop in enumerate(protocol.protocol.loops):
        if loop.axis in movable and not rig.rig.of_role(role_of_axis(loop.axis)):
            role = role_of_axis(loop.axis).name
            raise source.error(
                f"sweeps {loop.axis} but rig {rig.rig.name!r} has no {role} instrument",
                ("loops", index, "axis"), f"add a {role} to the rig or remove this loop",
            )
    if rig.rig.simulation:
        # Settings for simulated runs: a typo there should fail now, not at the rehearsal.
        simulated_sample(protocol.protocol, dict(rig.rig.simulation), rig.document.source, None)
    finish = protocol.protocol.finish
    for axis in movable:
        target = getattr(finish, axis, None)
        if isinstance(target, float) and not rig.rig.of_role(role_of_axis(axis)):
            raise source.error(
                f"sets a finish {axis} but the rig has no {role_of_axis(axis).name} instrument",
                ("finish", axis), f"use '{axis}: hold'",
            )
