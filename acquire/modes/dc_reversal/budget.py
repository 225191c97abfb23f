"""The noise budget of a DC-reversal protocol on a rig (acquire.plan.noise_budget's physics
with this mode's pattern, per_step and cycles; pure)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from acquire.inputs.resistance_check import is_longitudinal
from acquire.inputs.stack import StackGeometry
from acquire.plan.noise_budget import (
    ROOM_TEMPERATURE_K,
    ChannelNoise,
    NoiseBudget,
    PointNoise,
    cycles_for_target,
    johnson_density2,
    pattern_factors,
    point_errors,
    reading_sigma_V,
)
from acquire.plan.schedule import LoopPlan
from drivers.roles.voltmeter import DEFAULT_NOISE_DENSITY_V_PER_RTHZ, DEFAULT_NPLC

DEFAULT_MAINS_HZ = 50.0
MAX_SOLVED_ANGLES = 48


def _loop_values(plans: Sequence[LoopPlan], axis: str) -> tuple[float, ...]:
    return next((plan.values for plan in plans if plan.axis == axis), ())


def channel_noise(protocol: Any, rig: Any, temperature_K: float) -> list[ChannelNoise]:
    geometry = StackGeometry.from_sample(protocol.sample)
    resistance = geometry.resistance_ohm
    mains = rig.mains_frequency if rig is not None else DEFAULT_MAINS_HZ
    found = []
    for name in protocol.readings.channels:
        spec = rig.instruments.get(name) if rig is not None else None
        density = spec.noise_density_or_default if spec is not None else (
            DEFAULT_NOISE_DENSITY_V_PER_RTHZ)
        autozero = bool(spec.autozero) if spec is not None else False
        # The reading's own integration: what averages the noise (an autozero's zero is extra).
        integration = (spec.nplc_or_default if spec is not None else DEFAULT_NPLC) / mains
        longitudinal = is_longitudinal(name, spec)
        source = resistance if longitudinal else resistance * geometry.width_m / geometry.length_m
        sigma = reading_sigma_V(density, autozero, source, temperature_K, integration)
        found.append(ChannelNoise(
            name, longitudinal, density, spec is not None and spec.noise_density is not None,
            autozero, integration, source, johnson_density2(source, temperature_K) ** 0.5,
            sigma, sigma / protocol.readings.per_step ** 0.5))
    return found


def target_channel(protocol: Any, rig: Any) -> str:
    """The channel whose ratio precision-targeted cycles follow."""
    target = protocol.alternation.target
    if target is not None and target.channel is not None:
        return str(target.channel)
    channels = protocol.readings.channels
    instruments = rig.instruments if rig is not None else {}
    return next((name for name in channels if is_longitudinal(name, instruments.get(name))),
                channels[0])


def prior_cycle_variance_V2(protocol: Any, noise: ChannelNoise) -> float:
    """The budget's variance of one cycle's unidirectional part times I^2 (volts^2)."""
    factors = pattern_factors(protocol.alternation.polarities)
    return noise.step_sigma_V**2 * factors.unidirectional


def planned_cycles(protocol: Any, noise: ChannelNoise, current_A: float) -> int:
    alternation = protocol.alternation
    target = alternation.target
    if target is None:
        return int(alternation.cycles)
    resistance = StackGeometry.from_sample(protocol.sample).resistance_ohm
    return cycles_for_target(prior_cycle_variance_V2(protocol, noise), current_A, resistance,
                             target.target, target.min, target.max)


def _simulated_ratios(protocol: Any, rig: Any, source: Any, currents: Sequence[float],
                      plans: Sequence[LoopPlan], temperature_K: float) -> dict[float, float]:
    """The simulated device's largest |U/R| per current over the protocol's fields and a full
    turn of angle (the rehearsal's truth), for a rig with the simulated instruments."""
    if rig is None or "@sim" not in rig.visa_library or source is None:
        return {}
    from acquire.inputs.simulated_sample import simulated_sample

    sample = simulated_sample(protocol, dict(rig.simulation), source, None)
    fields = _loop_values(plans, "field") or (0.0,)
    angles = _loop_values(plans, "angle") or tuple(float(a) for a in range(0, 360, 15))
    # Each angle is a magnetisation solve: a few dozen find the largest ratio well enough.
    angles = angles[::max(1, len(angles) // MAX_SOLVED_ANGLES)]
    ratios: dict[float, float] = {}
    for field in {min(fields, key=abs), max(fields, key=abs)}:
        for angle in angles:
            sample.apply_field(field, angle)
            for current in currents:
                expected = sample.expected("longitudinal", current, temperature_K)
                ratio = abs(expected.unidirectional_ohm / expected.resistance_ohm)
                ratios[current] = max(ratios.get(current, 0.0), ratio)
    return ratios


def noise_budget(protocol: Any, rig: Any, plans: Sequence[LoopPlan],
                 rig_source: Any = None) -> NoiseBudget:
    """`rig` the Rig model (None: defaults); `rig_source` its file's source map (for the
    simulated device's expected ratio)."""
    temperatures = _loop_values(plans, "temperature")
    if temperatures:
        temperature = max(temperatures)
        note = f"Johnson noise at {temperature:g} K (the warmest of the temperature loop)"
    else:
        temperature = ROOM_TEMPERATURE_K
        note = f"Johnson noise at {temperature:g} K (no temperature loop)"
    factors = pattern_factors(protocol.alternation.polarities)
    channels = channel_noise(protocol, rig, temperature)
    resistance = StackGeometry.from_sample(protocol.sample).resistance_ohm
    currents = sorted({abs(value) for value in _loop_values(plans, "current")})
    by_name = {noise.channel: noise for noise in channels}
    steering = by_name[target_channel(protocol, rig)]
    points: list[PointNoise] = []
    for noise in channels:
        for current in currents:
            cycles = planned_cycles(protocol, steering, current)
            points.append(point_errors(noise, factors, current, cycles, resistance))
    target = protocol.alternation.target
    return NoiseBudget(
        temperature, note, factors, protocol.alternation.pattern,
        protocol.alternation.polarities, tuple(channels),
        tuple(points), len(_loop_values(plans, "angle")),
        _simulated_ratios(protocol, rig, rig_source, currents, plans, temperature),
        (target.min, target.max) if target is not None else None,
        target.target if target is not None else None,
    )
