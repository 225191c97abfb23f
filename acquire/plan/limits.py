"""Limits checked before anything runs: the rig's hardware, the sample's own, and the numbers
as the command text will send them.

Every value any loop (or the finish) can send is compared with every limit that applies,
with the same rule the transport applies at run time (drivers.command_limits): the rig's
bounds per command template, tightened by the protocol's limits. A violation names the loop
value that breaks it.

The sample's own limits: `current` (amplitude; the peak for modes that say so),
`current_density` in every layer of the parallel-resistor model (one value for all layers, or
one per layer by name), and `power`, the peak power dissipated between the probes, I^2 R with
the model resistance. Each is also turned into a largest current (`current_high`) that the
run's guard and the transport hold every command to.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from acquire.errors import InputError, KeyPath
from acquire.inputs.load import LoadedProtocol, LoadedRig
from acquire.inputs.protocol import CURRENT_AXIS
from acquire.inputs.resistance_check import sheet_resistance_warning
from acquire.inputs.stack import StackGeometry
from drivers.command_limits import CommandLimits, past
from drivers.dialect import dialect_for
from drivers.errors import LimitError
from drivers.roles import movable_axes, role_named, role_of_axis
from drivers.roles.base import Axis, PositionerMotion, Quantity
from drivers.roles.current_source import CURRENT

SAMPLE_LIMIT = "the sample limit"


@dataclass(frozen=True)
class LimitReport:
    peak_current_A: float
    peak_density_by_layer: dict[str, float]
    expected_peak_voltage_V: float
    compliance_V: float | None
    warnings: tuple[str, ...]
    peak_power_W: float = 0.0  # I^2 R at the peak current, with the model resistance


@dataclass(frozen=True)
class Tightening:
    """A protocol limit on one template of one instrument, stricter than the rig may be."""

    instrument: str
    template: str
    high: float
    source: str


def _value_key(loaded: LoadedProtocol, axis: str, value: float) -> KeyPath:
    index = loaded.loop_index(axis)
    if index is None:
        return ("loops",)
    # Loop values are tidied to 12 digits (25 kOe -> 2.5 T), so match within that.
    for position, written in enumerate(loaded.protocol.loops[index].values or ()):
        if math.isclose(written, value, rel_tol=1e-10, abs_tol=1e-300):
            return ("loops", index, "values", position)
    return ("loops", index)


def _fail(loaded: LoadedProtocol, axis: str, value: float, problem: str, fix: str) -> InputError:
    return loaded.document.source.error(problem, _value_key(loaded, axis, value), fix)


def density_limits(protocol: Any) -> dict[str, float]:
    """Layer name -> the current density limit it is held to (a single value: every layer)."""
    limit = protocol.limits.current_density
    if limit is None:
        return {}
    if isinstance(limit, dict):
        return dict(limit)
    return {layer.name: float(limit) for layer in protocol.sample.layers}


def current_high(loaded: LoadedProtocol) -> float | None:
    """The largest instantaneous current the protocol's own limits allow, or None."""
    protocol = loaded.protocol
    limits = protocol.limits
    geometry = StackGeometry.from_sample(protocol.sample)
    per_ampere = geometry.densities(1.0)
    bounds = [limit / per_ampere[name] for name, limit in density_limits(protocol).items()
              if per_ampere[name] > 0]
    if limits.current is not None:
        bounds.append(limits.current)
    if limits.power is not None:
        bounds.append(math.sqrt(limits.power / geometry.resistance_ohm))
    return min(bounds) if bounds else None


def tightenings(loaded: LoadedProtocol, rig: LoadedRig) -> list[Tightening]:
    """The protocol's limits as bounds on the rig's command templates (what the runner
    applies to the drivers before anything is sent, and what `check` checks)."""
    found: list[Tightening] = []
    source_role = role_named(loaded.mode.excitation_role)
    high = current_high(loaded)
    entry = rig.rig.one(source_role)
    if entry is not None and high is not None:
        for limit in source_role.template_limits:
            if limit.quantity is CURRENT:
                found.append(Tightening(entry[0], limit.template, high, SAMPLE_LIMIT))
    for axis in movable_axes():
        bound = getattr(loaded.protocol.limits, axis.sample_limit or "", None)
        entry = rig.rig.one(role_of_axis(axis.name))
        if bound is not None and entry is not None:
            found.append(Tightening(entry[0], axis.template, bound, SAMPLE_LIMIT))
    return found


def command_limits(loaded: LoadedProtocol, rig: LoadedRig) -> dict[str, CommandLimits]:
    """Every instrument's bounds: its role's, from its rig entry, tightened by the protocol."""
    tables = {name: CommandLimits(role_named(spec.role).template_limits, spec)
              for name, spec in rig.rig.instruments.items()}
    for tightening in tightenings(loaded, rig):
        tables[tightening.instrument].tighten(
            tightening.template, high=tightening.high, source=tightening.source)
    return tables


def _finish_target(loaded: LoadedProtocol, axis: Axis) -> float | None:
    target = getattr(loaded.protocol.finish, axis.name, None)
    return float(target) if isinstance(target, float) else None


def _sent(loaded: LoadedProtocol, axis: str) -> Iterator[tuple[float, bool]]:
    """(value, from the finish section) for every setpoint of `axis` the run may send, each
    distinct value once (a there-and-back sweep sends each value twice; the check is the same)."""
    for value in dict.fromkeys(loaded.values_of(axis)):
        yield value, False
    if axis != CURRENT_AXIS:
        target = _finish_target(loaded, next(a for a in movable_axes() if a.name == axis))
        if target is not None:
            yield target, True


def _located_error(loaded: LoadedProtocol, axis: str, value: float, finish: bool,
                   problem: str, fix: str) -> InputError:
    if finish:
        return loaded.document.source.error(f"finish {problem}", ("finish", axis), fix)
    return _fail(loaded, axis, value, problem, fix)


def _check_sent(loaded: LoadedProtocol, rig: LoadedRig, tables: dict[str, CommandLimits],
                instrument: str, template: str, quantity: Quantity, legs: list[float],
                value: float, finish: bool, axis: str) -> None:
    bound = tables[instrument].get(template)
    if bound is None:
        return
    dialect = dialect_for(instrument, rig.rig.instruments[instrument])
    symmetric = bound.limit.symmetric
    for leg in legs:
        for signed in ((leg, -leg) if symmetric else (leg,)):
            leg_note = "" if leg == value else \
                f" (approached from {quantity.shown(leg)} for the backlash)"
            shown = quantity.shown(value)
            if past(signed, bound.low, bound.high, symmetric):
                verb = "exceeds" if symmetric else "is outside"
                raise _located_error(
                    loaded, axis, value, finish,
                    f"{axis} {shown}{leg_note} {verb} {bound.describe()} of {instrument!r}",
                    f"keep the {axis} within {bound.describe()}",
                )
            if not dialect.supports(template) or not dialect.takes_value(template):
                continue
            command = dialect.render(template, signed)
            try:
                sent = dialect.decode(template, command)
                tables[instrument].refuse_past(instrument, template, signed, sent, command)
            except (LimitError, ValueError):
                raise _located_error(
                    loaded, axis, value, finish,
                    f"{axis} {shown}{leg_note} is sent as {command!r} by the '{template}' "
                    f"template of {instrument!r}, past {bound.describe()}",
                    "give that template more digits (e.g. {value:.9g}) or move the value "
                    "off the limit",
                ) from None


def check_limits(loaded: LoadedProtocol, rig: LoadedRig | None) -> LimitReport:
    protocol = loaded.protocol
    mode = loaded.mode
    geometry = StackGeometry.from_sample(protocol.sample)
    warnings: list[str] = []
    amplitudes = tuple(dict.fromkeys(loaded.values_of(CURRENT_AXIS)))  # each distinct once
    for amplitude in amplitudes:
        _check_sample_current(loaded, geometry, amplitude)
    peak = max(mode.peak_current(protocol, amplitude) for amplitude in amplitudes)
    expected_voltage = peak * geometry.resistance_ohm
    compliance = None
    if rig is not None:
        tables = command_limits(loaded, rig)
        source_role = role_named(mode.excitation_role)
        name, spec = rig.rig.one(source_role)  # type: ignore[misc]
        for amplitude in amplitudes:
            current = mode.peak_current(protocol, amplitude)
            for limit in source_role.template_limits:
                bound = tables[name].get(limit.template)
                if bound is not None and past(current, bound.low, rig_high(spec, limit), True):
                    raise _fail(
                        loaded, CURRENT_AXIS, amplitude,
                        f"current {CURRENT.shown(current)} exceeds the rig's limit for "
                        f"{name!r} ({CURRENT.shown(rig_high(spec, limit) or 0.0)})",
                        "lower the current",
                    )
        load = source_role.check_load(spec, peak, expected_voltage)
        if load.problem is not None:
            raise _fail(loaded, CURRENT_AXIS, max(amplitudes), *load.problem)
        warnings.extend(load.warnings)
        compliance = load.compliance_V
    _check_sample_axes(loaded)
    sheet_warning = sheet_resistance_warning(protocol)
    if sheet_warning is not None:
        warnings.append(sheet_warning)
    if rig is not None:
        for amplitude in amplitudes:
            current = mode.peak_current(protocol, amplitude)
            for limit in source_role.template_limits:
                _check_sent(loaded, rig, tables, name, limit.template, CURRENT, [current],
                            amplitude, False, CURRENT_AXIS)
        _check_rig_axes(loaded, rig, tables)
    return LimitReport(peak, geometry.densities(peak), expected_voltage, compliance,
                       tuple(warnings), peak**2 * geometry.resistance_ohm)


def _check_sample_current(loaded: LoadedProtocol, geometry: StackGeometry,
                          amplitude: float) -> None:
    protocol = loaded.protocol
    limits = protocol.limits
    current = loaded.mode.peak_current(protocol, amplitude)
    shown = CURRENT.shown(current)
    if limits.current is not None and past(current, None, limits.current, True):
        raise _fail(
            loaded, CURRENT_AXIS, amplitude,
            f"current {shown} exceeds the sample limit {CURRENT.shown(limits.current)} "
            "(limits.current)",
            "lower the current or, if the device allows it, raise limits.current",
        )
    densities = geometry.densities(current)
    every_layer = not isinstance(limits.current_density, dict)
    for name, limit in density_limits(protocol).items():
        if past(densities[name], None, limit, True):
            scope = " (one value: it applies to every layer)" if every_layer else ""
            highest = limit / (densities[name] / current)
            raise _fail(
                loaded, CURRENT_AXIS, amplitude,
                f"current {shown} gives {densities[name]:.3g} A/m^2 in the {name} layer, "
                f"above limits.current_density {limit:.3g} A/m^2{scope}",
                f"keep the current below {highest * 1e3:.3g} mA",
            )
    if limits.power is not None:
        resistance = geometry.resistance_ohm
        power = current**2 * resistance
        if past(power, None, limits.power, False):
            raise _fail(
                loaded, CURRENT_AXIS, amplitude,
                f"current {shown} dissipates {power * 1e3:.3g} mW in the channel (I^2 R with "
                f"the model's {resistance:.4g} ohm), above limits.power "
                f"{limits.power * 1e3:.3g} mW",
                f"keep the current below {math.sqrt(limits.power / resistance) * 1e3:.3g} mA",
            )


def rig_high(spec: Any, limit: Any) -> float | None:
    return limit.bounds(spec)[1]


def _check_sample_axes(loaded: LoadedProtocol) -> None:
    for axis in movable_axes():
        bound = getattr(loaded.protocol.limits, axis.sample_limit or "", None)
        if bound is None:
            continue
        for value, finish in _sent(loaded, axis.name):
            if past(value, None, bound, True):
                raise _located_error(
                    loaded, axis.name, value, finish,
                    f"{axis.name} {axis.quantity.shown(value)} exceeds the sample limit "
                    f"{axis.quantity.shown(bound)}",
                    f"lower it or raise limits.{axis.sample_limit}",
                )


def _check_rig_axes(loaded: LoadedProtocol, rig: LoadedRig,
                    tables: dict[str, CommandLimits]) -> None:
    for axis in movable_axes():
        entry = rig.rig.one(role_of_axis(axis.name))
        if entry is None:
            continue
        name, spec = entry
        for value, finish in _sent(loaded, axis.name):
            legs = axis.reach(spec, value) if isinstance(axis.motion, PositionerMotion) \
                else [value]
            ordered = sorted(legs, key=lambda leg: leg != value)  # the value itself first
            _check_sent(loaded, rig, tables, name, axis.template, axis.quantity, ordered,
                        value, finish, axis.name)
