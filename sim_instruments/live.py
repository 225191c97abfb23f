"""Bind pyvisa-sim devices to a SimulatedWorld: every template's property becomes live.

pyvisa-sim answers a getter with `Property.get_value()` and applies a setter with
`Property.set_value(parsed)`; replacing each device's Property objects (named after the
dialect's templates) with ones that call the world makes the replies follow the simulated
physics, while the bytes still travel through pyvisa-sim exactly as with static definitions.
The per-transaction work is one dict lookup and one closure call beyond pyvisa-sim's own.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pyvisa
from pyvisa.rname import to_canonical_name
from pyvisa_sim.component import NoResponse, Property

from drivers.command_limits import CommandLimits, past
from drivers.dialect import ERROR_QUERY, NUMBER_TOKEN, VALUE_FIELDS, Dialect, dialect_for
from drivers.rig import Rig
from drivers.roles import role_named
from sim_instruments.reply_text import ReplyWriter, reply_writer
from sim_instruments.world import SimulatedWorld

DATA_TYPE_ERROR = b'-104,"Data type error"'  # SCPI-99 vol. 1: not a number where one belongs
DATA_OUT_OF_RANGE = b'-222,"Data out of range"'  # SCPI-99 vol. 1

# A reader (query: () -> value), an action (fixed command: () -> None) or a setter
# (command with a value: (float) -> None); the dialect says which a template is.
Binding = Callable[..., object]


class LiveQuery(Property[str]):
    def __init__(self, name: str, read: Callable[[], object], write_reply: ReplyWriter) -> None:
        # Property.__init__ would parse specs; a live property has none.
        self.name, self.specs, self._value = name, None, None
        self._read, self._write_reply = read, write_reply

    def get_value(self) -> str:
        return self._write_reply(self._read())

    def set_value(self, string_value: Any) -> None:
        raise ValueError(f"{self.name} is read-only")


class LiveCommand(Property[str]):
    def __init__(self, name: str, apply: Callable[[Any], None]) -> None:
        self.name, self.specs, self._value = name, None, None
        self._apply = apply

    def get_value(self) -> None:
        return None

    def set_value(self, string_value: Any) -> None:
        self._apply(string_value)


class ErrorQueue:
    """Appends to and clears a pyvisa-sim device's SCPI error queue (if it has one)."""

    def __init__(self, device: Any, dialect: Dialect) -> None:
        self._queue = None
        if dialect.supports(ERROR_QUERY):
            self._queue = device._error_queues.get(dialect.commands[ERROR_QUERY].encode())

    def push(self, entry: bytes) -> None:
        if self._queue is not None:
            self._queue._queue.append(entry)

    def clear(self) -> None:
        if self._queue is not None:
            self._queue.clear()


def read_sent_number(text: object) -> float | None:
    """The number a real instrument reads from the value part of a command: one SCPI numeric
    token (SCPI-99 vol. 1, decimal numeric program data), exponent included; None if the text
    is anything else."""
    token = NUMBER_TOKEN.fullmatch(str(text).strip())
    return float(token.group()) if token is not None else None


def _value_command(
    apply: Callable[[float], object], scale: float, errors: ErrorQueue,
    refuse: Callable[[float], bool],
) -> Callable[[Any], None]:
    def set_from_text(text: Any) -> None:
        number = read_sent_number(text)
        if number is None:
            errors.push(DATA_TYPE_ERROR)
            return
        value = number / scale
        if refuse(value):
            errors.push(DATA_OUT_OF_RANGE)
            return
        try:
            apply(value)
        except ValueError:
            errors.push(DATA_OUT_OF_RANGE)

    return set_from_text


def _refusal(world: SimulatedWorld, name: str, template: str, limits: CommandLimits
             ) -> Callable[[float], bool]:
    """Like a real instrument's own protection: a value past the rig's hardware limit for
    this template is not carried out (SCPI -222), and the world records that it was sent."""
    bound = limits.get(template)
    if bound is None:
        return lambda value: False

    def refuse(value: float) -> bool:
        if past(value, bound.low, bound.high, bound.limit.symmetric):
            world.extremes.refused.append((name, template, value))
            return True
        return False

    return refuse


def _common_bindings(world: SimulatedWorld, name: str, errors: ErrorQueue) -> dict[str, Binding]:
    def reset() -> None:
        world.reset(name)
        errors.clear()

    return {"reset": reset, "clear_status": errors.clear}


def _live_property(
    template: str, binding: Binding, dialect: Dialect, errors: ErrorQueue,
    refuse: Callable[[float], bool],
) -> Property[str]:
    if dialect.is_query(template):
        return LiveQuery(template, binding, reply_writer(dialect.reply_specs[template]))
    field = dialect.value_fields[template]
    if field is None:
        def act(_parsed: Any) -> None:
            binding()

        return LiveCommand(template, act)
    return LiveCommand(template, _value_command(binding, VALUE_FIELDS[field], errors, refuse))


def _commands_never_reply(device: Any) -> None:
    """A message without '?' is a command, and a SCPI instrument answers no command, not even
    one it does not know (that goes to the error queue only). pyvisa-sim would answer it with
    the rejection reply, which the next query would then read instead of its own answer."""
    match = device._match

    def match_keeping_commands_silent(message: bytes) -> Any:
        response = match(message)
        if response is None and b"?" not in message:
            device.error_response("command_error")
            return NoResponse
        return response

    device._match = match_keeping_commands_silent


def couple(resource_manager: pyvisa.ResourceManager, world: SimulatedWorld, rig: Rig) -> None:
    """Replace the properties of each rig instrument's pyvisa-sim device by live ones."""
    devices = resource_manager.visalib.devices  # type: ignore[attr-defined]
    for name, spec in rig.instruments.items():
        device = devices[to_canonical_name(spec.resource)]
        dialect = dialect_for(name, spec)
        errors = ErrorQueue(device, dialect)
        limits = CommandLimits(role_named(spec.role).template_limits, spec)
        bindings = {**world.instruments[name].bindings(),
                    **_common_bindings(world, name, errors)}
        for template, binding in bindings.items():
            if template in device._properties:
                device._properties[template] = _live_property(
                    template, binding, dialect, errors, _refusal(world, name, template, limits))
        _commands_never_reply(device)
