"""The schedule: a pure function from a validated protocol to ordered steps.

Points are numbered 0, 1, 2, ... in the order they are measured, so the same protocol always
gives the same numbering (resume relies on it). Steps are generated lazily: a night of many
thousands of points never sits in memory as a list.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from math import prod

from acquire.protocol import Protocol

MOVABLE_AXES = ("temperature", "field", "angle")


@dataclass(frozen=True, slots=True)
class LoopPlan:
    axis: str
    values: tuple[float, ...]
    snake: bool = False


@dataclass(frozen=True, slots=True)
class Point:
    number: int
    temperature_K: float | None
    field_T: float | None
    angle_deg: float | None
    current_A: float
    sweep: int  # which pass of the innermost loop this point belongs to

    def setpoint(self, axis: str) -> float | None:
        return {
            "temperature": self.temperature_K,
            "field": self.field_T,
            "angle": self.angle_deg,
            "current": self.current_A,
        }[axis]


@dataclass(frozen=True, slots=True)
class Move:
    """Bring a slow axis to a new setpoint and wait as the protocol says, before a point."""

    axis: str
    value: float
    before_point: int


@dataclass(frozen=True, slots=True)
class Measure:
    """Run the alternation at one point. `mode` leaves room for other acquisition modes."""

    point: Point
    mode: str = "dc_reversal"


Step = Move | Measure


def plans_from(protocol: Protocol, loop_values: Sequence[tuple[float, ...]]) -> list[LoopPlan]:
    return [
        LoopPlan(loop.axis, values, loop.snake)
        for loop, values in zip(protocol.loops, loop_values)
    ]


def count_points(plans: Sequence[LoopPlan]) -> int:
    return prod(len(plan.values) for plan in plans)


def iterate_points(plans: Sequence[LoopPlan]) -> Iterator[Point]:
    """Points in measurement order. A snake loop runs backwards on odd passes."""
    sizes = [len(plan.values) for plan in plans]
    inner_pass_size = sizes[-1] if sizes else 1
    total = prod(sizes)
    setpoints: dict[str, float | None] = {"temperature": None, "field": None, "angle": None}
    for number in range(total):
        remainder = number
        digits = [0] * len(plans)
        for depth in range(len(plans) - 1, -1, -1):
            remainder, digits[depth] = divmod(remainder, sizes[depth])
        current = 0.0
        outer_index = 0  # flat index of the enclosing loops' combination = this loop's pass
        for depth, plan in enumerate(plans):
            index = digits[depth]
            if plan.snake and outer_index % 2 == 1:
                index = sizes[depth] - 1 - index
            value = plan.values[index]
            if plan.axis == "current":
                current = value
            else:
                setpoints[plan.axis] = value
            outer_index = outer_index * sizes[depth] + digits[depth]
        yield Point(
            number=number,
            temperature_K=setpoints["temperature"],
            field_T=setpoints["field"],
            angle_deg=setpoints["angle"],
            current_A=current,
            sweep=number // inner_pass_size,
        )


def iterate_steps(plans: Sequence[LoopPlan], start_point: int = 0) -> Iterator[Step]:
    """Moves (outermost axis first) followed by the Measure, for every point from `start_point`.

    When starting part-way (resume), the first point re-establishes every slow axis.
    """
    axes_in_order = [plan.axis for plan in plans if plan.axis in MOVABLE_AXES]
    previous: dict[str, float | None] = {}
    for point in iterate_points(plans):
        if point.number < start_point:
            continue
        for axis in axes_in_order:
            value = point.setpoint(axis)
            if value is not None and previous.get(axis) != value:
                yield Move(axis, value, point.number)
                previous[axis] = value
        yield Measure(point)
