"""Loop values from a loop spec: explicit, start/stop/step, start/stop/num, log, there and back.

Two rules keep the values the ones the user wrote (stated for users in docs/protocol.md):
a `step` grid must reach `stop` (GRID_TOLERANCE), or the loop is refused naming the last
value reached, never cut short in silence; values made from `num` are rounded to
SPACING_DIGITS significant digits of their spacing, the ends kept as written.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from drivers.units import tidy

MAX_VALUES_PER_LOOP = 100_000
GRID_TOLERANCE = 1e-3  # of a step: how far from start + k * step a stop still counts as on it
SPACING_DIGITS = 3  # significant digits of the local spacing kept in values made from `num`


class LoopSpecError(ValueError):
    def __init__(self, key: str, problem: str, fix: str) -> None:
        self.key = key
        self.problem = problem
        self.fix = fix
        super().__init__(f"{key}: {problem}")


def _tidy(values: np.ndarray) -> tuple[float, ...]:
    # The rounding of parsed quantities (drivers.units.tidy): removes the float noise of
    # start + k*step without moving a real value, and rounds values and limits alike.
    return tuple(tidy(value) for value in values.tolist())


def _plain(value: float) -> str:
    return f"{value:g}"


def _from_step(start: float, stop: float, step: float,
               show: Callable[[float], str] = _plain) -> np.ndarray:
    if step <= 0:
        raise LoopSpecError(
            "step", f"must be positive, got {show(step)}",
            "give the step's size; the direction comes from start and stop",
        )
    span = abs(stop - start)
    if span == 0:
        raise LoopSpecError(
            "stop", "equals start, so the loop has zero width",
            "use 'values: [...]' for a single value, or move start or stop",
        )
    steps = round(span / step)
    on_grid = steps >= 1 and abs(span - steps * step) <= GRID_TOLERANCE * step
    whole_steps = math.floor(span / step * (1 + 1e-9) + 1e-9)
    if not on_grid and whole_steps == 0:
        raise LoopSpecError(
            "step", f"{show(step)} is larger than the span {show(span)} from start to stop, so "
            "the loop has one value", "use a smaller step, or 'values: [...]' for a single value",
        )
    count = (steps if on_grid else whole_steps) + 1
    if count > MAX_VALUES_PER_LOOP:
        raise LoopSpecError(
            "step", f"gives {count} values, more than {MAX_VALUES_PER_LOOP}", "use a larger step"
        )
    direction = 1.0 if stop > start else -1.0
    if not on_grid:
        last = float(_tidy(np.array([start + direction * step * whole_steps]))[0])
        beyond = float(_tidy(np.array([last + direction * step]))[0])
        raise LoopSpecError(
            "stop", f"{show(stop)} is not reached by steps of {show(step)} from {show(start)}: "
            f"the last value would be {show(last)}",
            f"set stop to {show(last)} or {show(beyond)}, or a step that divides the span, "
            "or use 'num' for evenly spaced values",
        )
    values = start + direction * step * np.arange(count)
    values[-1] = stop  # on the grid: the last value is the stop as written
    # A grid through zero lands a rounding error away from it (-0.3 + 3 * 0.1 = 5.6e-17).
    values[np.abs(values) < 1e-9 * step] = 0.0
    return values


def _rounded_to_spacing(values: np.ndarray) -> np.ndarray:
    """Values between the ends rounded to SPACING_DIGITS significant digits of the smaller gap
    to a neighbour (190.236907151 K between gaps of ~40 K: 190 K); the ends stay as written."""
    rounded = values.copy()
    gaps = np.abs(np.diff(values))
    for index in range(1, len(values) - 1):
        spacing = min(gaps[index - 1], gaps[index])
        if spacing > 0:
            decimals = SPACING_DIGITS - 1 - math.floor(math.log10(spacing))
            rounded[index] = round(float(values[index]), decimals)
    return rounded


def _from_num(start: float, stop: float, num: int, spacing: str) -> np.ndarray:
    if num < 2:
        raise LoopSpecError("num", f"must be at least 2, got {num}", "use 'values' for one value")
    if num > MAX_VALUES_PER_LOOP:
        raise LoopSpecError("num", f"{num} is more than {MAX_VALUES_PER_LOOP}", "use fewer")
    if start == stop:
        raise LoopSpecError(
            "stop", "equals start, so the loop has zero width",
            "use 'values: [...]' for a single value, or move start or stop",
        )
    if spacing == "log":
        if start == 0 or stop == 0 or (start > 0) != (stop > 0):
            raise LoopSpecError(
                "spacing", "log spacing needs start and stop of the same sign, neither zero",
                "use linear spacing or move start and stop to one side of zero",
            )
        sign = 1.0 if start > 0 else -1.0
        return _rounded_to_spacing(sign * np.geomspace(abs(start), abs(stop), num))
    values = np.linspace(start, stop, num)
    values[np.abs(values) < 1e-9 * abs(stop - start) / (num - 1)] = 0.0  # as in _from_step
    return _rounded_to_spacing(values)


def expand(
    *,
    values: list[float] | None,
    start: float | None,
    stop: float | None,
    step: float | None,
    num: int | None,
    spacing: str,
    there_and_back: bool,
    show: Callable[[float], str] = _plain,
) -> tuple[float, ...]:
    """The ordered values of one pass of a loop (before any reversal on alternate passes)."""
    ranged = (start, stop, step, num)
    if values is not None:
        if any(item is not None for item in ranged):
            raise LoopSpecError(
                "values", "given together with start/stop/step/num",
                "keep either 'values' or a range",
            )
        if not values:
            raise LoopSpecError("values", "is empty", "list at least one value")
        if spacing == "log":
            raise LoopSpecError("spacing", "log applies to a range", "remove 'spacing'")
        if len(values) > MAX_VALUES_PER_LOOP:
            raise LoopSpecError(
                "values", f"lists {len(values)} values, more than {MAX_VALUES_PER_LOOP}",
                "split the sweep into several protocols or use a range with a larger step",
            )
        result = np.asarray(values, dtype=float)
    else:
        if start is None or stop is None:
            missing = "start" if start is None else "stop"
            raise LoopSpecError(
                missing, "is missing",
                "give 'values: [...]', or 'start' and 'stop' with 'step' or 'num'",
            )
        if (step is None) == (num is None):
            raise LoopSpecError(
                "step", "give exactly one of 'step' and 'num'",
                "e.g. 'step: 10 deg' or 'num: 37'",
            )
        if step is not None:
            if spacing == "log":
                raise LoopSpecError("spacing", "log spacing needs 'num', not 'step'", "use num")
            result = _from_step(start, stop, step, show)
        else:
            assert num is not None
            result = _from_num(start, stop, num, spacing)
    ordered = _tidy(result)
    if there_and_back:
        if len(ordered) < 2:
            raise LoopSpecError("return", "needs at least two values", "remove 'return: true'")
        ordered = ordered + ordered[-2::-1]
    return ordered
