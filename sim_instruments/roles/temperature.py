"""A simulated temperature controller: the bath approaches its setpoint (sim_instruments.motion
ThermalApproach), no faster than the ramp rate."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from sim_instruments.motion import ThermalApproach
from sim_instruments.world import SimulatedWorld, positive

DEFAULT_RATE_K_PER_S = 2.0 / 60.0
STATIC_REPLIES: dict[str, object] = {"temperature": 300.0}


class SimulatedTemperatureController:
    def __init__(self, world: SimulatedWorld, name: str, spec: Any) -> None:
        self.world = world
        start = world.start_temperature_K
        self.bath = ThermalApproach(start, world.clock.now(), start,
                                    spec.rate or DEFAULT_RATE_K_PER_S,
                                    world.temperature_time_constant_s)
        world.provide("temperature_K", self.temperature_K)

    def set_setpoint(self, kelvin: float) -> None:
        self.world.extremes.extent("temperature_setpoint_K", kelvin)
        self.bath.retarget(self.world.clock.now(), positive(kelvin, "temperature setpoint"))

    def set_rate(self, kelvin_per_s: float) -> None:
        self.bath.set_rate(self.world.clock.now(),
                           positive(kelvin_per_s, "temperature ramp rate"))

    def temperature_K(self) -> float:
        return self.bath.value(self.world.clock.now())

    def bindings(self) -> dict[str, Callable[..., object]]:
        return {"setpoint": self.set_setpoint, "temperature": self.temperature_K,
                "ramp_rate": self.set_rate}

    def reset(self) -> None:
        """A controller keeps regulating through *RST in this model."""

    def settings(self) -> dict[str, object]:
        return {"temperature_rate_K_per_s": self.bath.rate}


def build(world: SimulatedWorld, name: str, spec: Any) -> SimulatedTemperatureController:
    return SimulatedTemperatureController(world, name, spec)
