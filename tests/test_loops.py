"""Loop values: explicit, start/stop/step, start/stop/num, log, there and back, alternate
direction, numbering."""

from __future__ import annotations

from collections.abc import Callable
from itertools import pairwise
from pathlib import Path

import pytest

from acquire.inputs.load import load_protocol
from acquire.inputs.loops import LoopSpecError, expand
from acquire.plan.schedule import LoopPlan, Point, iterate_points, plans_from

REL = 1e-12  # values are tidied to 12 significant digits


def ranged(start: float, stop: float, *, step: float | None = None, num: int | None = None,
           spacing: str = "linear", back: bool = False) -> tuple[float, ...]:
    return expand(values=None, start=start, stop=stop, step=step, num=num, spacing=spacing,
                  there_and_back=back)


def explicit(values: list[float], back: bool = False) -> tuple[float, ...]:
    return expand(values=values, start=None, stop=None, step=None, num=None, spacing="linear",
                  there_and_back=back)


def test_explicit_values_keep_their_order() -> None:
    assert explicit([3.0, 1.0, 2.0, 1.0]) == (3.0, 1.0, 2.0, 1.0)


def test_step_upwards_includes_stop_on_the_grid() -> None:
    assert ranged(0, 350, step=10) == pytest.approx([10.0 * k for k in range(36)], rel=REL)


def test_step_downwards() -> None:
    assert ranged(300, 100, step=50) == pytest.approx([300, 250, 200, 150, 100], rel=REL)


@pytest.mark.parametrize("start, stop, last, beyond", [(0, 1, "0.9", "1.2"),
                                                     (1, 0, "0.1", "-0.2")])
def test_a_stop_off_the_grid_is_an_error_naming_the_last_value(
        start: float, stop: float, last: str, beyond: str) -> None:
    # 0, 0.3, 0.6, 0.9 and then 1.2: the stop 1 is never reached, and nothing is dropped quietly.
    with pytest.raises(LoopSpecError) as caught:
        ranged(start, stop, step=0.3)
    assert caught.value.key == "stop"
    assert f"the last value would be {last}" in caught.value.problem
    assert f"set stop to {last} or {beyond}" in caught.value.fix


def test_a_stop_a_hair_off_the_grid_is_reached_exactly() -> None:
    # A step written to six digits (1/3 as 0.333333) misses 1 by 1e-6: the stop is meant.
    assert ranged(0, 1, step=0.333333) == pytest.approx([0, 0.333333, 0.666666, 1], rel=REL)
    assert ranged(0, 1, step=0.333333)[-1] == 1.0
    # 0.1 % of a step is the tolerance (GRID_TOLERANCE): 2 % off is refused.
    with pytest.raises(LoopSpecError):
        ranged(0, 1, step=0.34)


def test_float_steps_reach_the_stop_exactly() -> None:
    # 0.1 is not a binary fraction: ten steps of it do not add to exactly 1.0 in floats.
    values = ranged(0, 1, step=0.1)
    assert len(values) == 11
    assert values[-1] == 1.0
    values = ranged(5e-4, 4e-3, step=5e-4)
    assert len(values) == 8 and values[-1] == 4e-3


def test_a_grid_through_zero_hits_zero_exactly() -> None:
    # -0.3 + 3 * 0.1 is 5.6e-17 in floats; a zero-field point must be 0.
    assert 0.0 in ranged(-0.3, 0.3, step=0.1)
    assert 0.0 in ranged(0.7, -0.7, step=0.1)
    assert 0.0 in ranged(-0.1, 0.1, num=23)
    assert 0.0 in ranged(-0.04, 0.04, step=0.002)


def test_num_both_directions() -> None:
    assert ranged(0, 1, num=5) == pytest.approx([0, 0.25, 0.5, 0.75, 1], rel=REL)
    assert ranged(2, -2, num=3) == pytest.approx([2, 0, -2], rel=REL)


def test_log_spacing_has_a_constant_ratio_to_the_rounding() -> None:
    values = ranged(0.05, 2, num=8, spacing="log")
    ratio = (2 / 0.05) ** (1 / 7)  # 40 ** (1/7), by hand
    assert values[0] == 0.05 and values[-1] == 2.0  # the ends as written
    exact = [0.05 * ratio**k for k in range(8)]
    for k in range(1, 7):
        spacing = min(exact[k] - exact[k - 1], exact[k + 1] - exact[k])
        # Three significant digits of the spacing: off by at most half a unit of the third.
        assert abs(values[k] - exact[k]) <= 0.005 * spacing * (1 + 1e-9)
    assert values[1:4] == (0.0847, 0.1435, 0.243)  # 0.05 * 1.69381..^k, by hand


def test_generated_values_are_short() -> None:
    # 100 K to 300 K in five log steps: 100 * 3^(k/5) = 124.57, 155.18, 193.32, 240.82 K
    # (by hand), spaced 25-60 K apart, so kept to 0.1 K.
    assert ranged(100, 300, num=6, spacing="log") == (100.0, 124.6, 155.2, 193.3, 240.8, 300.0)
    assert ranged(0, 1, num=4) == (0.0, 0.333, 0.667, 1.0)


def test_log_spacing_of_negative_values() -> None:
    assert ranged(-1e-3, -1, num=4, spacing="log") == pytest.approx(
        [-1e-3, -1e-2, -1e-1, -1], rel=1e-10
    )


@pytest.mark.parametrize("start, stop", [(-1.0, 1.0), (0.0, 1.0), (1.0, 0.0)])
def test_log_spacing_through_or_from_zero_is_refused(start: float, stop: float) -> None:
    with pytest.raises(LoopSpecError) as caught:
        ranged(start, stop, num=5, spacing="log")
    assert caught.value.key == "spacing"


@pytest.mark.parametrize("num", [1, 0, -3])
def test_num_below_two(num: int) -> None:
    with pytest.raises(LoopSpecError) as caught:
        ranged(0, 1, num=num)
    assert caught.value.key == "num"


@pytest.mark.parametrize(
    "kwargs, key",
    [
        ({"step": -1.0}, "step"),
        ({"step": 0.0}, "step"),
        ({"step": 1.0, "num": 3}, "step"),
        ({}, "step"),
    ],
)
def test_bad_ranges(kwargs: dict, key: str) -> None:
    with pytest.raises(LoopSpecError) as caught:
        ranged(0, 10, **kwargs)
    assert caught.value.key == key


def test_zero_width() -> None:
    for kwargs in ({"step": 1.0}, {"num": 3}):
        with pytest.raises(LoopSpecError) as caught:
            ranged(5, 5, **kwargs)
        assert caught.value.key == "stop"


def test_there_and_back_passes_the_turning_point_once() -> None:
    assert explicit([1.0, 2.0, 3.0], back=True) == (1.0, 2.0, 3.0, 2.0, 1.0)
    values = ranged(-0.04, 0.04, step=0.02, back=True)
    assert values == pytest.approx([-0.04, -0.02, 0, 0.02, 0.04, 0.02, 0, -0.02, -0.04], abs=1e-15)
    assert values.count(max(values)) == 1


def test_there_and_back_needs_two_values() -> None:
    with pytest.raises(LoopSpecError) as caught:
        explicit([1.0], back=True)
    assert caught.value.key == "return"


# --- alternate direction and numbering, through the schedule ----------------------------------


def angles_of(points: list[Point]) -> list[float | None]:
    return [point.setpoint("angle") for point in points]


def test_alternate_direction_reverses_on_alternate_passes_and_never_rewinds() -> None:
    field = LoopPlan("field", (0.1, 0.2, 0.3))
    current = LoopPlan("current", (1e-3,))
    angle = LoopPlan("angle", (0, 10, 20, 30), alternate_direction=True)
    alternating = list(iterate_points([field, angle, current]))
    assert angles_of(alternating) == [0, 10, 20, 30, 30, 20, 10, 0, 0, 10, 20, 30]
    steps = [abs(b - a) for a, b in pairwise(angles_of(alternating))]
    assert max(steps) <= 10  # the rotator only ever moves one step

    plain = list(iterate_points([field, LoopPlan("angle", (0, 10, 20, 30)), current]))
    assert max(abs(b - a) for a, b in pairwise(angles_of(plain))) == 30


def test_alternate_direction_counts_passes_across_all_outer_loops() -> None:
    # Two temperatures x two fields = four passes of the angle loop: fwd, rev, fwd, rev.
    plans = [LoopPlan("temperature", (10, 20)), LoopPlan("field", (0.1, 0.2)),
             LoopPlan("angle", (0, 90, 180), alternate_direction=True),
             LoopPlan("current", (1e-3,))]
    assert angles_of(list(iterate_points(plans))) == [0, 90, 180, 180, 90, 0] * 2


def test_alternate_direction_of_a_middle_loop_moves_the_inner_loop_with_it() -> None:
    plans = [LoopPlan("field", (0.1, 0.2)), LoopPlan("angle", (0, 90), alternate_direction=True),
             LoopPlan("current", (1e-3, 2e-3))]
    pairs = [(p.setpoint("field"), p.setpoint("angle"), p.current_A) for p in iterate_points(plans)]
    assert pairs == [
        (0.1, 0, 1e-3), (0.1, 0, 2e-3), (0.1, 90, 1e-3), (0.1, 90, 2e-3),
        (0.2, 90, 1e-3), (0.2, 90, 2e-3), (0.2, 0, 1e-3), (0.2, 0, 2e-3),
    ]


def test_points_from_a_protocol_file(make_protocol: Callable[..., Path]) -> None:
    path = make_protocol(
        "{axis: field, values: [0.2 T, 1 T]}",
        "{axis: angle, start: 0 deg, stop: 20 deg, step: 10 deg, alternate_direction: true}",
        "{axis: current, values: [1 mA, 2 mA]}",
    )
    loaded = load_protocol(path)
    points = list(iterate_points(plans_from(loaded.protocol, loaded.loop_values)))
    assert len(points) == 2 * 3 * 2
    assert [p.number for p in points] == list(range(12))
    assert angles_of(points) == [0, 0, 10, 10, 20, 20, 20, 20, 10, 10, 0, 0]
    assert [p.sweep for p in points] == [k // 2 for k in range(12)]  # pass of the inner loop


def test_the_same_file_twice_gives_the_same_points(make_protocol: Callable[..., Path]) -> None:
    path = make_protocol(
        "{axis: temperature, start: 300 K, stop: 250 K, step: 25 K}",
        "{axis: field, start: -40 mT, stop: 40 mT, step: 20 mT, return: true,"
        " alternate_direction: true}",
        "{axis: current, start: 1 mA, stop: 3 mA, num: 3}",
    )

    def points() -> list[Point]:
        loaded = load_protocol(path)
        return list(iterate_points(plans_from(loaded.protocol, loaded.loop_values)))

    first, second = points(), points()
    assert first == second
    assert len(first) == 3 * 9 * 3
    assert [p.number for p in first] == list(range(len(first)))
