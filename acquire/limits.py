"""Limits checked before anything runs: the rig's hardware and the sample's own.

Every value any loop can reach is compared with every limit that applies; a violation names
the loop value that breaks it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from acquire.errors import InputError
from acquire.load import LoadedProtocol, LoadedRig
from acquire.rig import DEFAULT_BACKLASH
from acquire.sample_geometry import SampleGeometry

COMPLIANCE_WARNING_FRACTION = 0.8  # common practice: keep headroom below the compliance voltage
# Derived values (density, voltage) carry float round-off: a value at the limit must pass.
ROUND_OFF = 1e-9


def _above(value: float, limit: float) -> bool:
    return value > limit * (1 + ROUND_OFF)


@dataclass(frozen=True)
class LimitReport:
    peak_current_A: float
    peak_density_by_layer: dict[str, float]
    expected_peak_voltage_V: float
    compliance_V: float | None
    warnings: tuple[str, ...]


def _loop_index(loaded: LoadedProtocol, axis: str) -> int | None:
    return next((i for i, loop in enumerate(loaded.protocol.loops) if loop.axis == axis), None)


def _value_key(loaded: LoadedProtocol, index: int, value: float) -> tuple[str | int, ...]:
    loop = loaded.protocol.loops[index]
    # Loop values are tidied to 12 digits (25 kOe -> 2.5 T), so match within that.
    for position, written in enumerate(loop.values or ()):
        if math.isclose(written, value, rel_tol=1e-10, abs_tol=1e-300):
            return ("loops", index, "values", position)
    return ("loops", index)


def _range_text(low: float | None, high: float | None, unit: str) -> str:
    low_text = "-inf" if low is None else f"{low:g}"
    high_text = "inf" if high is None else f"{high:g}"
    return f"{low_text}..{high_text} {unit}"


def _fail(loaded: LoadedProtocol, axis: str, value: float, problem: str, fix: str) -> InputError:
    index = _loop_index(loaded, axis)
    key = _value_key(loaded, index, value) if index is not None else ("loops",)
    return loaded.document.source.error(problem, key, fix)


def _values(loaded: LoadedProtocol, axis: str) -> tuple[float, ...]:
    index = _loop_index(loaded, axis)
    return loaded.loop_values[index] if index is not None else ()


def check_limits(loaded: LoadedProtocol, rig: LoadedRig | None) -> LimitReport:
    protocol = loaded.protocol
    geometry = SampleGeometry.from_sample(protocol.sample)
    warnings: list[str] = []
    currents = _values(loaded, "current")
    per_ampere = geometry.carrier_density_per_ampere
    for current in currents:
        if protocol.limits.current is not None and current > protocol.limits.current:
            raise _fail(
                loaded, "current", current,
                f"current {current * 1e3:g} mA exceeds the sample limit "
                f"{protocol.limits.current * 1e3:g} mA (limits.current)",
                "lower the current or, if the device allows it, raise limits.current",
            )
        density = current * per_ampere
        density_limit = protocol.limits.current_density
        if density_limit is not None and _above(density, density_limit):
            raise _fail(
                loaded, "current", current,
                f"current {current * 1e3:g} mA gives {density:.3g} A/m^2 in the "
                f"{geometry.carrier_name} layer, above limits.current_density "
                f"{protocol.limits.current_density:.3g} A/m^2",
                f"keep the current below {density_limit / per_ampere * 1e3:.3g} mA",
            )
    peak = max(currents)
    expected_voltage = peak * geometry.resistance_ohm
    compliance = None
    if rig is not None:
        compliance = _check_rig(loaded, rig, currents, expected_voltage, warnings)
    if protocol.limits.field is not None:
        for field in _values(loaded, "field"):
            if abs(field) > protocol.limits.field:
                raise _fail(
                    loaded, "field", field,
                    f"field {field:g} T exceeds the sample limit {protocol.limits.field:g} T",
                    "lower the field or raise limits.field",
                )
    if protocol.limits.temperature_max is not None:
        finish = protocol.finish.temperature
        if not isinstance(finish, str) and finish > protocol.limits.temperature_max:
            raise loaded.document.source.error(
                f"finish temperature {finish:g} K exceeds the sample limit "
                f"{protocol.limits.temperature_max:g} K",
                ("finish", "temperature"),
                "lower it",
            )
        for temperature in _values(loaded, "temperature"):
            if temperature > protocol.limits.temperature_max:
                raise _fail(
                    loaded, "temperature", temperature,
                    f"temperature {temperature:g} K exceeds the sample limit "
                    f"{protocol.limits.temperature_max:g} K", "lower it",
                )
    if rig is not None:
        from acquire.command_text import check_command_text

        finish = protocol.finish.temperature
        temperatures = _values(loaded, "temperature") + (() if finish == "hold" else (finish,))
        check_command_text(loaded, rig, {
            "current": currents, "field": _values(loaded, "field"),
            "angle": _values(loaded, "angle"), "temperature": temperatures,
        })
    return LimitReport(peak, geometry.densities(peak), expected_voltage, compliance,
                       tuple(warnings))


def _check_rig(
    loaded: LoadedProtocol,
    loaded_rig: LoadedRig,
    currents: tuple[float, ...],
    expected_voltage: float,
    warnings: list[str],
) -> float | None:
    rig = loaded_rig.rig
    source_name, source = rig.one("current_source")  # type: ignore[misc]
    for current in currents:
        assert source.limits.current is not None
        if current > source.limits.current:
            raise _fail(
                loaded, "current", current,
                f"current {current * 1e3:g} mA exceeds the rig's limit for {source_name!r} "
                f"({source.limits.current * 1e3:g} mA)", "lower the current",
            )
    if source.compliance is not None:
        if _above(expected_voltage, source.compliance):
            raise _fail(
                loaded, "current", max(currents),
                f"current {max(currents) * 1e3:g} mA needs about {expected_voltage:.3g} V across "
                f"the sample, above the compliance {source.compliance:g} V of {source_name!r}",
                "lower the current or raise the compliance (within the device's tolerance)",
            )
        if expected_voltage > COMPLIANCE_WARNING_FRACTION * source.compliance:
            warnings.append(
                f"expected peak voltage {expected_voltage:.3g} V is above "
                f"{COMPLIANCE_WARNING_FRACTION:.0%} of the compliance {source.compliance:g} V; "
                "contacts and leads add to it"
            )
    field_entry = rig.one("field")
    if field_entry:
        name, magnet = field_entry
        assert magnet.limits.field is not None
        for field in _values(loaded, "field"):
            if abs(field) > magnet.limits.field:
                raise _fail(
                    loaded, "field", field,
                    f"field {field:g} T exceeds the magnet limit {magnet.limits.field:g} T "
                    f"of {name!r}", "lower the field",
                )
    rotator_entry = rig.one("rotator")
    if rotator_entry:
        name, rotator = rotator_entry
        backlash = rotator.backlash if rotator.backlash is not None else DEFAULT_BACKLASH
        low = loaded_rig.ranges.get((name, "min"))
        high = loaded_rig.ranges.get((name, "max"))
        positive = (rotator.approach or "positive") == "positive"
        for angle in _values(loaded, "angle"):
            # The backlash approach overshoots the target on one side; that must fit too.
            reach_low = angle - backlash if positive else angle
            reach_high = angle if positive else angle + backlash
            if (low is not None and reach_low < low) or (high is not None and reach_high > high):
                raise _fail(
                    loaded, "angle", angle,
                    f"angle {angle:g} deg (with the {backlash:g} deg backlash approach) is "
                    f"outside the rotator range {_range_text(low, high, 'deg')} of {name!r}",
                    "shift the angles into the range",
                )
    temperature_entry = rig.one("temperature")
    if temperature_entry:
        name, _ = temperature_entry
        low = loaded_rig.ranges.get((name, "min"))
        high = loaded_rig.ranges.get((name, "max"))

        def outside(temperature: float) -> bool:
            return (low is not None and temperature < low) or (
                high is not None and temperature > high
            )

        for temperature in _values(loaded, "temperature"):
            if outside(temperature):
                raise _fail(
                    loaded,
                    "temperature",
                    temperature,
                    f"temperature {temperature:g} K is outside the range "
                    f"{_range_text(low, high, 'K')} of {name!r}",
                    "stay within the controller's limits",
                )
        finish = loaded.protocol.finish.temperature
        if not isinstance(finish, str) and outside(finish):
            raise loaded.document.source.error(
                f"finish temperature {finish:g} K is outside the range "
                f"{_range_text(low, high, 'K')} of {name!r}",
                ("finish", "temperature"),
                "stay within the controller's limits, or 'hold'",
            )
    return source.compliance
