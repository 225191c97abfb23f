"""The estimate's moves, computed from loop counts, equal a walk over every step: the
reference below walks schedule.iterate_steps and sums each move as it comes (the way a run
makes them), an algorithm independent of the count formula it checks."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

from acquire.inputs.load import check_pair, load_protocol, load_rig
from acquire.plan.estimate import _moves_breakdown
from acquire.plan.schedule import LoopPlan, Move, iterate_steps, plans_from
from acquire.plan.timing import RigTiming
from drivers.roles import all_roles
from tests.conftest import SIMULATED_RIG

MakeProtocol = Callable[..., Path]


def walked_breakdown(protocol: object, mode: object, plans: list[LoopPlan],
                     timing: RigTiming) -> dict[str, float]:
    axes = [role.axis for role in all_roles() if role.axis is not None]
    totals = {bucket: 0.0 for axis in axes for bucket in (axis.move_bucket, axis.hold_bucket)}
    by_name = {axis.name: axis for axis in axes}
    state: dict[str, float | None] = {axis.name: axis.start_value for axis in axes}
    for step in iterate_steps(plans, "dc_reversal"):
        if isinstance(step, Move):
            axis = by_name[step.axis]
            totals[axis.move_bucket] += timing.move_s(step.axis, state[step.axis], step.value)
            totals[axis.hold_bucket] += axis.hold_s(getattr(protocol.waits, step.axis))
            state[step.axis] = step.value
    return totals


CASES = {
    "three nested": ("{axis: temperature, values: [10 K, 20 K]}",
                     "{axis: field, values: [0.1 T, 0.5 T, -0.2 T]}",
                     "{axis: angle, start: 0 deg, stop: 90 deg, step: 30 deg}",
                     "{axis: current, values: [1 mA, 2 mA]}"),
    "alternating inner": ("{axis: field, values: [0 T, 1 T, 0.3 T]}",
                          "{axis: angle, values: [0 deg, 45 deg, 180 deg, 10 deg],"
                          " alternate_direction: true}",
                          "{axis: current, values: [1 mA]}"),
    "alternating with an odd count of passes": (
        "{axis: temperature, values: [5 K, 6 K, 7 K]}",
        "{axis: angle, values: [0 deg, 90 deg], alternate_direction: true}",
        "{axis: current, values: [1 mA]}"),
    "there and back": ("{axis: field, start: -1 T, stop: 1 T, step: 0.5 T, return: true}",
                       "{axis: current, values: [1 mA, 3 mA]}"),
    "repeated values": ("{axis: field, values: [0.2 T, 0.2 T, 0.5 T, 0.2 T]}",
                        "{axis: angle, values: [0 deg, 0 deg, 90 deg]}",
                        "{axis: current, values: [1 mA]}"),
    "one value per loop": ("{axis: field, values: [0 T]}", "{axis: angle, values: [10 deg]}",
                           "{axis: current, values: [1 mA]}"),
    "current outermost": ("{axis: current, values: [1 mA, 2 mA]}",
                          "{axis: angle, values: [350 deg, 0 deg, 10 deg]}"),
}


@pytest.mark.parametrize("rig_given", [True, False], ids=["rig", "no rig"])
@pytest.mark.parametrize("case", CASES)
def test_counted_moves_equal_the_walked_steps(case: str, rig_given: bool,
                                              make_protocol: MakeProtocol) -> None:
    path = make_protocol(*CASES[case], limits="{current: 5 mA}",
                         waits="{field: {hold: 3 s}, angle: {settle: 0.5 s}, "
                               "temperature: {hold: 60 s}}")
    loaded = load_protocol(path)
    rig = load_rig(SIMULATED_RIG) if rig_given else None
    if rig:
        check_pair(loaded, rig)
    plans = plans_from(loaded.protocol, loaded.loop_values)
    timing = RigTiming.of(rig.rig if rig else None, ["vxx"], "current_source")
    counted = _moves_breakdown(loaded.protocol, loaded.mode, plans, timing)
    walked = walked_breakdown(loaded.protocol, loaded.mode, plans, timing)
    assert counted.keys() == walked.keys()
    assert any(walked.values())  # the case does move something
    for bucket, seconds in walked.items():
        # the same terms summed in another order: equal to float round-off
        assert counted[bucket] == pytest.approx(seconds, rel=1e-12, abs=1e-9), bucket
