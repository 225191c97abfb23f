"""A simulated rotator: turns linearly toward its target at its speed."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from sim_instruments.motion import LinearRamp
from sim_instruments.world import SimulatedWorld, positive

DEFAULT_SPEED_DEG_PER_S = 10.0


class SimulatedRotator:
    def __init__(self, world: SimulatedWorld, name: str, spec: Any) -> None:
        self.world = world
        self.turn = LinearRamp(0.0, world.clock.now(), 0.0, spec.speed or DEFAULT_SPEED_DEG_PER_S)
        world.provide("angle_deg", lambda: self.turn.value(world.clock.now()))

    def move(self, degrees: float) -> None:
        self.turn.retarget(self.world.clock.now(), degrees)
        self.world.extremes.extent("angle_target_deg", degrees)

    def set_speed(self, deg_per_s: float) -> None:
        self.turn.set_rate(self.world.clock.now(), positive(deg_per_s, "rotator speed"))

    def angle_deg(self) -> float:
        degrees = self.turn.value(self.world.clock.now())
        self.world.extremes.extent("angle_read_deg", degrees)
        return degrees

    def moving(self) -> bool:
        return not self.turn.arrived(self.world.clock.now())

    def bindings(self) -> dict[str, Callable[..., object]]:
        return {"move": self.move, "position": self.angle_deg, "moving": self.moving,
                "home": lambda: self.move(0.0), "speed": self.set_speed}

    def reset(self) -> None:
        self.turn.stop(self.world.clock.now())

    def settings(self) -> dict[str, object]:
        return {"rotator_speed_deg_per_s": self.turn.rate}


def build(world: SimulatedWorld, name: str, spec: Any) -> SimulatedRotator:
    return SimulatedRotator(world, name, spec)
