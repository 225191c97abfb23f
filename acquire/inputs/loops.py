"""Loop values from a loop spec: explicit, start/stop/step, start/stop/num, log, there and back."""

from __future__ import annotations

import math

import numpy as np

from drivers.units import tidy

MAX_VALUES_PER_LOOP = 100_000


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


def _from_step(start: float, stop: float, step: float) -> np.ndarray:
    if step <= 0:
        raise LoopSpecError(
            "step", f"must be positive, got {step:g}",
            "give the step's size; the direction comes from start and stop",
        )
    span = abs(stop - start)
    if span == 0:
        raise LoopSpecError(
            "stop", "equals start, so the loop has zero width",
            "use 'values: [...]' for a single value, or move start or stop",
        )
    count = math.floor(span / step * (1 + 1e-9) + 1e-9) + 1
    if count == 1:
        raise LoopSpecError(
            "step", f"{step:g} is larger than the span {span:g} from start to stop, so the loop "
            "has one value", "use a smaller step, or 'values: [...]' for a single value",
        )
    if count > MAX_VALUES_PER_LOOP:
        raise LoopSpecError(
            "step", f"gives {count} values, more than {MAX_VALUES_PER_LOOP}", "use a larger step"
        )
    direction = 1.0 if stop > start else -1.0
    values = start + direction * step * np.arange(count)
    # A grid through zero lands a rounding error away from it (-0.3 + 3 * 0.1 = 5.6e-17).
    values[np.abs(values) < 1e-9 * step] = 0.0
    return values


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
        return sign * np.geomspace(abs(start), abs(stop), num)
    values = np.linspace(start, stop, num)
    values[np.abs(values) < 1e-9 * abs(stop - start) / (num - 1)] = 0.0  # as in _from_step
    return values


def expand(
    *,
    values: list[float] | None,
    start: float | None,
    stop: float | None,
    step: float | None,
    num: int | None,
    spacing: str,
    there_and_back: bool,
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
            result = _from_step(start, stop, step)
        else:
            assert num is not None
            result = _from_num(start, stop, num, spacing)
    ordered = _tidy(result)
    if there_and_back:
        if len(ordered) < 2:
            raise LoopSpecError("return", "needs at least two values", "remove 'return: true'")
        ordered = ordered + ordered[-2::-1]
    return ordered
