"""How a simulated quantity moves toward its target over time, in closed form.

Evaluated at any clock time without stepping, so a virtual clock may jump ahead by hours and
a readback is still exact: a field or an angle ramps linearly at its rate; a temperature
approaches its setpoint exponentially, no faster than the ramp rate.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass
class LinearRamp:
    """From `start` (at `start_time`) toward `target` at `rate` per second, then stays."""

    start: float
    start_time: float
    target: float
    rate: float

    def value(self, now: float) -> float:
        distance = self.target - self.start
        travelled = self.rate * max(0.0, now - self.start_time)
        if travelled >= abs(distance):
            return self.target
        return self.start + math.copysign(travelled, distance)

    def arrived(self, now: float) -> bool:
        return self.value(now) == self.target

    def retarget(self, now: float, target: float) -> None:
        self.start, self.start_time, self.target = self.value(now), now, target

    def set_rate(self, now: float, rate: float) -> None:
        self.start, self.start_time, self.rate = self.value(now), now, rate

    def stop(self, now: float) -> None:
        self.retarget(now, self.value(now))


@dataclass
class ThermalApproach:
    """dT/dt = (setpoint - T) / time_constant, clipped to +-rate.

    Far from the setpoint (|setpoint - T| > rate * time_constant) T moves at the ramp rate;
    inside that band it relaxes exponentially. The slope is continuous at the switch.
    """

    start: float
    start_time: float
    setpoint: float
    rate: float
    time_constant: float

    def value(self, now: float) -> float:
        elapsed = max(0.0, now - self.start_time)
        offset = self.start - self.setpoint
        band = self.rate * self.time_constant
        if abs(offset) > band:
            ramp_time = (abs(offset) - band) / self.rate
            if elapsed <= ramp_time:
                return self.start - math.copysign(self.rate * elapsed, offset)
            elapsed -= ramp_time
            offset = math.copysign(band, offset)
        return self.setpoint + offset * math.exp(-elapsed / self.time_constant)

    def retarget(self, now: float, setpoint: float) -> None:
        self.start, self.start_time, self.setpoint = self.value(now), now, setpoint

    def set_rate(self, now: float, rate: float) -> None:
        self.start, self.start_time, self.rate = self.value(now), now, rate
