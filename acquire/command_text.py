"""Limits checked on the numbers as the instruments will read them from the command text.

A template's precision rounds (`{value:.2g}` sends 1.26 mA as 0.0013 A), so a loop value that
respects a limit can still be sent past it. Every value a loop sends to the source, the magnet,
the rotator (with its backlash leg) and the temperature controller is rendered and read back.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

from acquire.errors import InputError
from acquire.load import LoadedProtocol, LoadedRig
from acquire.rig import DEFAULT_BACKLASH
from acquire.sample_geometry import SampleGeometry

ROUND_OFF = 1e-9  # relative slack for values computed in floating point


@dataclass(frozen=True)
class SentLimit:
    axis: str
    instrument: str
    template: str
    low: float | None
    high: float | None
    symmetric: bool  # current and field: the limit bounds the magnitude
    unit: str


def _smallest(*values: float | None) -> float | None:
    present = [value for value in values if value is not None]
    return min(present) if present else None


def _limits(loaded: LoadedProtocol, rig: LoadedRig) -> Iterable[SentLimit]:
    protocol, hardware = loaded.protocol, rig.rig
    source_name, source = hardware.one("current_source")  # type: ignore[misc]
    density = protocol.limits.current_density
    per_ampere = SampleGeometry.from_sample(protocol.sample).carrier_density_per_ampere
    yield SentLimit(
        "current", source_name, "set_current", None,
        _smallest(protocol.limits.current, source.limits.current,
                  density / per_ampere if density else None),
        True, "A",
    )
    if entry := hardware.one("field"):
        name, magnet = entry
        yield SentLimit("field", name, "set_target", None,
                        _smallest(magnet.limits.field, protocol.limits.field), True, "T")
    if entry := hardware.one("rotator"):
        name, _ = entry
        yield SentLimit("angle", name, "move", rig.ranges.get((name, "min")),
                        rig.ranges.get((name, "max")), False, "deg")
    if entry := hardware.one("temperature"):
        name, _ = entry
        yield SentLimit("temperature", name, "setpoint", rig.ranges.get((name, "min")),
                        _smallest(rig.ranges.get((name, "max")), protocol.limits.temperature_max),
                        False, "K")


def _legs(loaded: LoadedProtocol, rig: LoadedRig, limit: SentLimit, value: float) -> list[float]:
    if limit.axis != "angle":
        return [value]
    spec = rig.rig.instruments[limit.instrument]
    backlash = spec.backlash if spec.backlash is not None else DEFAULT_BACKLASH
    positive = (spec.approach or "positive") == "positive"
    return [value, value - backlash if positive else value + backlash]


def _breaks(limit: SentLimit, sent: float) -> bool:
    value = abs(sent) if limit.symmetric else sent
    high_broken = limit.high is not None and value > limit.high * (1 + ROUND_OFF) + 1e-300
    low_broken = limit.low is not None and value < limit.low - abs(limit.low) * ROUND_OFF
    return high_broken or low_broken


def check_command_text(
    loaded: LoadedProtocol, rig: LoadedRig, axis_values: dict[str, tuple[float, ...]]
) -> None:
    """Raise InputError naming the loop value whose command text crosses a limit."""
    from drivers.dialect import validate_dialects  # the dialects are the drivers' data

    dialects = validate_dialects(rig.rig)
    for limit in _limits(loaded, rig):
        dialect = dialects[limit.instrument]
        if not dialect.supports(limit.template) or not dialect.takes_value(limit.template):
            continue
        for value in axis_values.get(limit.axis, ()):
            for leg in _legs(loaded, rig, limit, value):
                for signed in (leg, -leg) if limit.symmetric else (leg,):
                    sent = dialect.sent_value(limit.template, signed)
                    if _breaks(limit, sent):
                        raise _error(loaded, limit, value, sent, dialect.commands[limit.template])


def _error(loaded: LoadedProtocol, limit: SentLimit, value: float, sent: float,
           template: str) -> InputError:
    from acquire.limits import _fail

    bound = limit.high if limit.high is not None else limit.low
    return _fail(
        loaded, limit.axis, value,
        f"{limit.axis} {value:g} {limit.unit} is sent as {sent!r} {limit.unit} by the "
        f"'{limit.template}' template {template!r} of {limit.instrument!r}, past the limit "
        f"{bound:g} {limit.unit}",
        "give that template more digits (e.g. {value:.9g}) or move the value off the limit",
    )
