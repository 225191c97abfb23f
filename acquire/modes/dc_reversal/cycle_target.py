"""Precision-targeted cycles: as many cycles at a point as its unidirectional ratio needs.

The stopping rule (pure; the measurement asks it before each point):

    N = ceil(s^2 / (I R target)^2), kept within [min, max]

where s^2 is the variance of one cycle's unidirectional part times I^2 (volts squared, a
property of the voltmeter and the sample, not of the current), pooled over the most recent
points of the target channel until it has POOLED_DOF degrees of freedom (the noise budget's
prediction fills in for what the first points lack), and R that channel's resistance at the
last point (the sample model's before the first).

N is fixed before the point's first reading and uses no reading of the point itself. A rule
that stops when the point's own standard error reaches the target stops early exactly when its
own scatter happens to be small, and so quotes errors that are too small. Here, given N, the
point's noise is that of a fixed-N point: its mean is unbiased and its standard error is the
usual one, with N - 1 degrees of freedom. The target is met on average (as well as the pooled
variance predicts the next point's); points.csv records the cycles each point used
(`n_cycles`), so the reach of the target can be checked afterwards.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

from pydantic import Field, model_validator

from acquire.inputs.protocol import Strict
from acquire.modes.dc_reversal.reduction import t_coverage_factor
from acquire.plan.noise_budget import cycles_for_target
from drivers.quantities import Ratio

POOLED_DOF = 30  # degrees of freedom pooled: the variance then known to ~26 % (sqrt(2/30))


class CycleTarget(Strict):
    """As many cycles at each point as the unidirectional ratio's standard error needs to reach
    `target`. Before each point: N = ceil(s^2 / (I R target)^2) within [min, max], with s^2
    the variance of one cycle's unidirectional part times I^2 pooled over the latest points of
    `channel` (30 degrees of freedom; the noise budget of `estimate` fills in what the first
    points lack), R its last resistance. N uses no reading of the point itself, so the point's mean
    stays unbiased and its error honest (N - 1 degrees of freedom); points.csv's n_cycles
    says what each point used."""

    target: Ratio = Field(gt=0, description="standard error of unidirectional_ratio to reach, "
                          "like '0.05 ppm'")
    min: int = Field(default=3, ge=2, le=10000, description="fewest cycles at a point")
    max: int = Field(default=40, ge=2, le=10000, description="most cycles at a point")
    channel: str | None = Field(
        default=None, description="the channel whose ratio sets the cycles (the first "
        "longitudinal channel when unset)")

    @model_validator(mode="after")
    def ordered(self) -> CycleTarget:
        if self.min > self.max:
            raise ValueError(f"min {self.min} is above max {self.max}; min <= max")
        return self


@dataclass
class CyclePlanner:
    """The rule above, fed with each stored point of the target channel."""

    target: CycleTarget
    prior_variance_V2: float  # the noise budget's s^2
    prior_resistance_ohm: float  # the sample model's R
    history: deque[tuple[float, int]] = field(default_factory=deque)  # (s^2, dof) per point
    resistance_ohm: float | None = None

    def cycles(self, current_A: float) -> int:
        variance = self.pooled_variance_V2()
        resistance = self.resistance_ohm or self.prior_resistance_ohm
        return cycles_for_target(variance, abs(current_A), resistance, self.target.target,
                                 self.target.min, self.target.max)

    def pooled_variance_V2(self) -> float:
        # Until the points give POOLED_DOF degrees of freedom, the budget fills the rest.
        dof = sum(dof for _, dof in self.history)
        missing = max(0, POOLED_DOF - dof)
        total = sum(variance * dof for variance, dof in self.history)
        return (total + missing * self.prior_variance_V2) / (dof + missing)

    def record(self, current_A: float, n_cycles: int, unidirectional_err_ohm: float,
               resistance_ohm: float) -> None:
        """A stored point: its per-cycle variance of U (standard error^2 * n), in volts^2.
        points.csv quotes the 68.3 % Student's t half-width: the t factor comes off first."""
        if n_cycles < 2 or not math.isfinite(unidirectional_err_ohm):
            return
        standard_error = unidirectional_err_ohm / float(t_coverage_factor(n_cycles - 1))
        self.history.append((standard_error**2 * n_cycles * current_A**2, n_cycles - 1))
        while sum(dof for _, dof in self.history) - self.history[0][1] >= POOLED_DOF:
            self.history.popleft()
        if math.isfinite(resistance_ohm) and resistance_ohm > 0:
            self.resistance_ohm = resistance_ohm
