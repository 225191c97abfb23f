"""The schedule: a pure function from a validated protocol to ordered steps.

Points are numbered 0, 1, 2, ... in the order they are measured, so the same protocol always
gives the same numbering (resume relies on it). Steps are generated lazily: a night of many
thousands of points never sits in memory as a list.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from functools import cache
from math import prod
from typing import Any

from acquire.inputs.protocol import CURRENT_AXIS
from drivers.roles import movable_axes


@cache
def movable_axis_names() -> tuple[str, ...]:
    """The axes moved between points, in the tables' column order."""
    return tuple(axis.name for axis in movable_axes())


@dataclass(frozen=True, slots=True)
class LoopPlan:
    axis: str
    values: tuple[float, ...]
    alternate_direction: bool = False  # reversed on odd passes of the outer loops


@dataclass(frozen=True, slots=True)
class Point:
    number: int
    setpoints: tuple[float | None, ...]  # one per movable axis, column order; None: not swept
    current_A: float
    sweep: int  # which pass of the innermost loop this point belongs to

    def setpoint(self, axis: str) -> float | None:
        if axis == CURRENT_AXIS:
            return self.current_A
        return self.setpoints[movable_axis_names().index(axis)]


@dataclass(frozen=True, slots=True)
class Move:
    """Bring a slow axis to a new setpoint and wait as the protocol says, before a point."""

    axis: str
    value: float
    before_point: int


@dataclass(frozen=True, slots=True)
class Measure:
    """Measure one point in the protocol's acquisition mode."""

    point: Point
    mode: str


Step = Move | Measure


def plans_from(protocol: Any, loop_values: Sequence[tuple[float, ...]]) -> list[LoopPlan]:
    return [
        LoopPlan(loop.axis, values, loop.alternate_direction)
        for loop, values in zip(protocol.loops, loop_values)
    ]


def count_points(plans: Sequence[LoopPlan]) -> int:
    return prod(len(plan.values) for plan in plans)


def iterate_points(plans: Sequence[LoopPlan]) -> Iterator[Point]:
    """Points in measurement order. A loop with `alternate_direction` runs backwards on odd
    passes of the loops outside it."""
    sizes = [len(plan.values) for plan in plans]
    inner_pass_size = sizes[-1] if sizes else 1
    total = prod(sizes)
    axes = movable_axis_names()
    slot = {name: index for index, name in enumerate(axes)}
    setpoints: list[float | None] = [None] * len(axes)
    for number in range(total):
        remainder = number
        digits = [0] * len(plans)
        for depth in range(len(plans) - 1, -1, -1):
            remainder, digits[depth] = divmod(remainder, sizes[depth])
        current = 0.0
        outer_index = 0  # flat index of the enclosing loops' combination = this loop's pass
        for depth, plan in enumerate(plans):
            index = digits[depth]
            if plan.alternate_direction and outer_index % 2 == 1:
                index = sizes[depth] - 1 - index
            value = plan.values[index]
            if plan.axis == CURRENT_AXIS:
                current = value
            else:
                setpoints[slot[plan.axis]] = value
            outer_index = outer_index * sizes[depth] + digits[depth]
        yield Point(number=number, setpoints=tuple(setpoints), current_A=current,
                    sweep=number // inner_pass_size)


def iterate_steps(plans: Sequence[LoopPlan], mode: str, start_point: int = 0) -> Iterator[Step]:
    """Moves (outermost axis first) followed by the Measure, for every point from `start_point`.

    When starting part-way (resume), the first point re-establishes every slow axis.
    """
    movable = set(movable_axis_names())
    axes_in_order = [plan.axis for plan in plans if plan.axis in movable]
    previous: dict[str, float | None] = {}
    for point in iterate_points(plans):
        if point.number < start_point:
            continue
        for axis in axes_in_order:
            value = point.setpoint(axis)
            if value is not None and previous.get(axis) != value:
                yield Move(axis, value, point.number)
                previous[axis] = value
        yield Measure(point, mode)
