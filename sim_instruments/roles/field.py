"""A simulated field supply: the field ramps linearly toward its target at the ramp rate."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from sim_instruments.motion import LinearRamp
from sim_instruments.world import SimulatedWorld, positive

DEFAULT_RATE_T_PER_S = 1.0 / 60.0


class SimulatedFieldSupply:
    def __init__(self, world: SimulatedWorld, name: str, spec: Any) -> None:
        self.world = world
        rate = spec.ramp_rate or spec.limits.ramp_rate or DEFAULT_RATE_T_PER_S
        self.ramp = LinearRamp(0.0, world.clock.now(), 0.0, rate)
        world.provide("field_T", lambda: self.ramp.value(world.clock.now()))

    def set_target(self, tesla: float) -> None:
        self.ramp.retarget(self.world.clock.now(), tesla)
        self.world.extremes.magnitude("field_target_T", tesla)

    def set_rate(self, tesla_per_s: float) -> None:
        self.world.extremes.magnitude("field_rate_T_per_s", tesla_per_s)
        self.ramp.set_rate(self.world.clock.now(), positive(tesla_per_s, "field ramp rate"))

    def field_T(self) -> float:
        tesla = self.ramp.value(self.world.clock.now())
        self.world.extremes.magnitude("field_read_T", tesla)
        return tesla

    def bindings(self) -> dict[str, Callable[..., object]]:
        return {"set_target": self.set_target, "ramp_rate": self.set_rate, "field": self.field_T}

    def reset(self) -> None:
        self.ramp.stop(self.world.clock.now())  # a ramp stops where it is

    def settings(self) -> dict[str, object]:
        return {"field_ramp_rate_T_per_s": self.ramp.rate}


def build(world: SimulatedWorld, name: str, spec: Any) -> SimulatedFieldSupply:
    return SimulatedFieldSupply(world, name, spec)
