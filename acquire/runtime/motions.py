"""Moving one slow axis to a setpoint and waiting until it is there (runner-side: it sleeps).

A role declares how its axis moves (drivers.roles.base): a settle motion sets a target and
waits until the readback has stayed within tolerance for the hold time (field, temperature);
a positioner moves along its approach legs, waits while it moves, checks the position and
settles (rotator).
"""

from __future__ import annotations

from typing import Any

from acquire.runtime.clock import Clock
from acquire.runtime.instruments import Instruments
from acquire.runtime.waits import StabilityWait, WaitTimeout
from drivers.rig import Rig
from drivers.roles import role_of_axis
from drivers.roles.base import Axis, PositionerMotion, SettleMotion


class AxisMover:
    def __init__(self, axis: Axis, instruments: Instruments, rig: Rig, waiter: StabilityWait,
                 clock: Clock, wait: Any) -> None:
        self.axis = axis
        self.driver = instruments.required(role_of_axis(axis.name))
        entry = rig.one(role_of_axis(axis.name))
        assert entry is not None
        self.spec = entry[1]
        self.waiter = waiter
        self.clock = clock
        self.wait = wait  # the protocol's waits.<axis>
        self.present: float | None = None  # where a positioner is (None: unknown)

    def prepare(self) -> None:
        """At the start of a run: learn where a positioner is."""
        if isinstance(self.axis.motion, PositionerMotion):
            self.present = self.axis.motion.position(self.driver)

    def read(self) -> float:
        motion = self.axis.motion
        if isinstance(motion, SettleMotion):
            return motion.read(self.driver)
        return motion.position(self.driver)

    def shown(self, value: float) -> str:
        """A value in the axis's display unit, without the unit (activity lines)."""
        return f"{value * self.axis.quantity.shown_scale:.4g}"

    def move_to(self, target: float) -> None:
        motion, wait, name = self.axis.motion, self.wait, self.axis.name
        quantity = self.axis.quantity
        unit = quantity.shown_unit or quantity.si_unit
        if isinstance(motion, SettleMotion):
            motion.set(self.driver, target)
            self.waiter.until_stable(name, lambda: motion.read(self.driver), target,
                                     wait.tolerance, wait.hold, wait.timeout, self.shown, unit)
            return
        for leg in motion.legs(self.spec, self.present, target):
            motion.move(self.driver, leg)
            self.waiter.until_false(name, lambda: motion.moving(self.driver), wait.timeout, leg,
                                    self.shown, unit)
            self.present = leg
        position = motion.position(self.driver)
        if abs(position - target) > wait.tolerance:
            raise WaitTimeout(name, target, position, wait.timeout)
        self.clock.sleep(wait.settle)
