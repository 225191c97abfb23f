"""The schedule: moves only when a setpoint changes, outermost axis first; resume part-way."""

from __future__ import annotations

from acquire.plan.schedule import (
    LoopPlan,
    Measure,
    Move,
    Step,
    count_points,
    iterate_points,
    iterate_steps,
)

MODE = "dc_reversal"
PLANS = [
    LoopPlan("temperature", (300.0, 200.0)),
    LoopPlan("field", (0.2, 1.0)),
    LoopPlan("angle", (0.0, 90.0), alternate_direction=True),
    LoopPlan("current", (1e-3, 2e-3)),
]


def describe(steps: list[Step]) -> list[tuple]:
    return [
        ("move", s.axis, s.value) if isinstance(s, Move) else ("measure", s.point.number)
        for s in steps
    ]


def test_count_points_is_the_product_of_loop_lengths() -> None:
    assert count_points(PLANS) == 2 * 2 * 2 * 2
    assert sum(1 for _ in iterate_points(PLANS)) == 16


def test_moves_come_before_the_point_outermost_first_and_only_on_change() -> None:
    steps = describe(list(iterate_steps(PLANS, MODE))[:12])
    assert steps == [
        ("move", "temperature", 300.0), ("move", "field", 0.2), ("move", "angle", 0.0),
        ("measure", 0), ("measure", 1),  # the current changes inside the point, no move
        ("move", "angle", 90.0), ("measure", 2), ("measure", 3),
        ("move", "field", 1.0),  # alternate direction: the angle stays at 90 for the next pass
        ("measure", 4), ("measure", 5),
        ("move", "angle", 0.0),
    ]


def test_every_point_is_measured_once_in_order() -> None:
    measured = [s.point.number for s in iterate_steps(PLANS, MODE) if isinstance(s, Measure)]
    assert measured == list(range(16))


def test_moves_carry_the_point_they_prepare() -> None:
    for step in iterate_steps(PLANS, MODE):
        if isinstance(step, Move):
            point = next(p for p in iterate_points(PLANS) if p.number == step.before_point)
            assert point.setpoint(step.axis) == step.value


def test_resume_re_establishes_every_slow_axis_then_continues_identically() -> None:
    full = list(iterate_steps(PLANS, MODE))
    resumed = list(iterate_steps(PLANS, MODE, start_point=6))
    head = describe(resumed[:4])
    # point 6: temperature 300 K, field 1 T, angle 0 (second pass of the angle loop reversed)
    assert head == [("move", "temperature", 300.0), ("move", "field", 1.0),
                    ("move", "angle", 0.0), ("measure", 6)]
    measures_full = [s for s in full if isinstance(s, Measure) and s.point.number >= 6]
    measures_resumed = [s for s in resumed if isinstance(s, Measure)]
    assert measures_full == measures_resumed


def test_a_protocol_without_slow_axes_has_no_moves() -> None:
    steps = list(iterate_steps([LoopPlan("current", (1e-3, 2e-3, 3e-3))], MODE))
    assert all(isinstance(step, Measure) for step in steps)
    assert [s.point.current_A for s in steps] == [1e-3, 2e-3, 3e-3]
    assert all(s.point.setpoint("field") is None and s.point.setpoint("angle") is None
               for s in steps)


def test_steps_are_lazy() -> None:
    # A night of a million points is handed out one step at a time, not as a list.
    plans = [LoopPlan("field", tuple(float(k) for k in range(1000))),
             LoopPlan("angle", tuple(float(k) for k in range(1000))),
             LoopPlan("current", (1e-3,))]
    steps = iterate_steps(plans, MODE)
    assert iter(steps) is steps  # an iterator, not a container
    assert isinstance(next(steps), Move)
    points = iterate_points(plans)
    assert iter(points) is points
