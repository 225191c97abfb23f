"""A simulated current source: level and output into the sample, with compliance."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from sim_instruments.world import SimulatedWorld, positive

DEFAULT_COMPLIANCE_V = 10.0
# The load's resistance rises with the current it heats it by only a few percent at a
# current the compliance allows, so the fixed point converges in a few steps.
COMPLIANCE_ITERATIONS = 5


@dataclass
class SourceState:
    level_A: float = 0.0
    output: bool = False
    compliance_V: float = DEFAULT_COMPLIANCE_V
    tripped: bool = False
    load_ohm: float = 0.0  # the sample's resistance when the level was last set


class SimulatedCurrentSource:
    def __init__(self, world: SimulatedWorld, name: str, spec: Any) -> None:
        self.world = world
        self.name = name
        self.configured_compliance_V = spec.compliance or DEFAULT_COMPLIANCE_V
        self.state = SourceState(compliance_V=self.configured_compliance_V)
        world.provide("current_A", self.applied_current)

    @property
    def level_A(self) -> float:
        return self.state.level_A

    @property
    def output(self) -> bool:
        return self.state.output

    def set_current(self, amperes: float) -> None:
        self.world.extremes.magnitude("current_A", amperes)
        if not math.isfinite(amperes):
            raise ValueError(f"current must be finite, got {amperes!r}")
        self.state.level_A = amperes
        self._update_compliance()

    def set_output(self, on: bool) -> None:
        self.state.output = on
        self._update_compliance()

    def set_compliance(self, volts: float) -> None:
        self.state.compliance_V = positive(volts, "compliance")
        self._update_compliance()

    def _update_compliance(self) -> None:
        source = self.state
        if not source.output or source.level_A == 0.0:
            source.tripped = False
            return
        load = self.world.load_ohm(source.level_A)
        source.tripped = abs(source.level_A) * load > source.compliance_V
        if source.tripped:
            # In compliance the current is what the compliance voltage drives through a load
            # that itself depends on the current (Joule heating): a few fixed-point steps.
            for _ in range(COMPLIANCE_ITERATIONS):
                load = self.world.load_ohm(source.compliance_V / load)
        source.load_ohm = load

    def applied_current(self) -> float:
        source = self.state
        if not source.output:
            return 0.0
        if source.tripped:
            # In compliance the source holds the voltage: the current is what it drives.
            return math.copysign(source.compliance_V / source.load_ohm, source.level_A)
        return source.level_A

    def programmed_current(self) -> float:
        return self.state.level_A

    def compliance_tripped(self) -> bool:
        return self.state.tripped

    def bindings(self) -> dict[str, Callable[..., object]]:
        return {
            "source_current_mode": lambda: None,
            "set_current": self.set_current,
            "read_current": self.programmed_current,
            "output_on": lambda: self.set_output(True),
            "output_off": lambda: self.set_output(False),
            "output_state": lambda: self.state.output,
            "compliance": self.set_compliance,
            "tripped": self.compliance_tripped,
        }

    def reset(self) -> None:
        self.state = SourceState()

    def settings(self) -> dict[str, object]:
        return {}


def build(world: SimulatedWorld, name: str, spec: Any) -> SimulatedCurrentSource:
    return SimulatedCurrentSource(world, name, spec)
