"""`flipsweep estimate`: points, readings, duration with a breakdown, peak current and density."""

from __future__ import annotations

import functools
import itertools
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from math import prod
from typing import Any

from acquire.inputs.load import LoadedProtocol, LoadedRig
from acquire.modes.base import AcquisitionMode
from acquire.plan.limits import LimitReport, check_limits
from acquire.plan.noise_budget import NoiseBudget, render_budget
from acquire.plan.schedule import LoopPlan, count_points, plans_from
from acquire.plan.timing import RigTiming
from drivers.roles import all_roles

READING_ROW_BYTES = 190  # measured on a simulated run's readings.csv (typical row length)
POINT_ROW_BYTES = 260
ADVICE_MIN_SAVING = 0.10  # suggest another loop order only when it saves 10 % or more


@dataclass(frozen=True)
class Estimate:
    points: int
    readings: int
    duration_s: float
    breakdown_s: dict[str, float]
    limits: LimitReport
    data_bytes: int
    rig_given: bool
    advice: str | None = None
    notes: list[str] = field(default_factory=list)
    noise: NoiseBudget | None = None
    # Precision-targeted cycles: duration_s is the expected night, this the longest one.
    worst_duration_s: float | None = None
    expected_cycles: float | None = None
    estimator_lines: list[str] = field(default_factory=list)


def _axis_moves_s(plans: Sequence[LoopPlan], depth: int,
                  move: Callable[[float | None, float], float], hold_s: float,
                  start: float | None) -> tuple[float, float]:
    """(moving, holding) seconds of the axis of loop `depth` over the whole night, from the
    counts alone: the inner loops never move it, and it runs the same pass (forward, or with
    `alternate_direction`, alternately backward) once per combination of the outer loops. Equal to
    walking every step (schedule.iterate_steps) and summing the moves; O(values) not O(points)."""
    values = plans[depth].values
    passes = prod(len(plan.values) for plan in plans[:depth])
    forward = list(itertools.pairwise(values))
    backward = [(b, a) for a, b in reversed(forward)]
    moving = move(start, values[0])  # the first point always sets every swept axis
    moves = 1
    if plans[depth].alternate_direction:
        # pass k runs backward when k is odd; a pass ends where the next one starts
        forward_passes, backward_passes = (passes + 1) // 2, passes // 2
        boundary: list[tuple[float, float]] = []
    else:
        forward_passes, backward_passes = passes, 0
        boundary = [(values[-1], values[0])] if passes > 1 else []
    for pairs, count in ((forward, forward_passes), (backward, backward_passes),
                         (boundary, passes - 1)):
        changing = [(a, b) for a, b in pairs if a != b]  # an equal value is no move
        if changing and count:
            moving += count * sum(move(a, b) for a, b in changing)
            moves += count * len(changing)
    return moving, moves * hold_s


def _moves_breakdown(
    protocol: Any, mode: AcquisitionMode, plans: Sequence[LoopPlan], timing: RigTiming
) -> dict[str, float]:
    axes = [role.axis for role in all_roles() if role.axis is not None]
    totals = {bucket: 0.0 for axis in axes for bucket in (axis.move_bucket, axis.hold_bucket)}
    by_name = {axis.name: axis for axis in axes}
    # The night starts where each axis says (zero field and angle; the cryostat already at
    # the first temperature: its cool-down is not part of the protocol).
    for depth, plan in enumerate(plans):
        axis = by_name.get(plan.axis)
        if axis is None or not plan.values:
            continue
        moving, holding = _axis_moves_s(
            plans, depth, functools.partial(timing.move_s, plan.axis),
            axis.hold_s(getattr(protocol.waits, plan.axis)), axis.start_value)
        totals[axis.move_bucket] += moving
        totals[axis.hold_bucket] += holding
    return totals


def duration_of(
    protocol: Any, mode: AcquisitionMode, plans: Sequence[LoopPlan], timing: RigTiming,
    cycles: float | None = None,
) -> tuple[float, dict[str, float]]:
    """`cycles`: the mean cycles per point where points vary (None: the most)."""
    points = count_points(plans)
    cost = mode.point_cost(protocol, timing, cycles)
    breakdown = _moves_breakdown(protocol, mode, plans, timing)
    breakdown["current settling"] = points * cost.settling_s
    breakdown["integration"] = points * cost.integration_s
    breakdown["transactions"] = points * cost.transactions_s
    return sum(breakdown.values()), breakdown


def _reordered(plans: Sequence[LoopPlan]) -> list[tuple[LoopPlan, ...]]:
    options = []
    for order in itertools.permutations(plans):
        # A loop that alternates direction cannot be outermost: no outer passes to alternate with.
        if order[0].alternate_direction:
            order = (LoopPlan(order[0].axis, order[0].values, False), *order[1:])
        options.append(tuple(order))
    return options


def loop_order_advice(
    protocol: Any, mode: AcquisitionMode, plans: Sequence[LoopPlan], timing: RigTiming,
    duration_s: float,
) -> str | None:
    if len(plans) < 2:
        return None
    best_time, best_order = duration_s, None
    for order in _reordered(plans):
        if [p.axis for p in order] == [p.axis for p in plans]:
            continue
        time, _ = duration_of(protocol, mode, order, timing)
        if time < best_time:
            best_time, best_order = time, order
    if best_order is None or best_time > duration_s * (1 - ADVICE_MIN_SAVING):
        return None
    names = " > ".join(plan.axis for plan in best_order)
    return (
        f"loop order {names} (outermost first) would take {format_duration(best_time)} "
        f"instead of {format_duration(duration_s)} ({1 - best_time / duration_s:.0%} less); "
        "check that the order does not matter for the physics (hysteresis) before changing it"
    )


def estimate(loaded: LoadedProtocol, rig: LoadedRig | None) -> Estimate:
    protocol = loaded.protocol
    mode = loaded.mode
    limit_report = check_limits(loaded, rig)
    plans = plans_from(protocol, loaded.loop_values)
    channels = mode.channels(protocol)
    timing = RigTiming.of(rig.rig if rig else None, channels, mode.excitation_role)
    points = count_points(plans)
    most_readings = mode.readings_count(protocol, points)
    worst, worst_breakdown = duration_of(protocol, mode, plans, timing)
    budget = mode.noise_budget(protocol, rig, plans)
    expected = mode.expected_cycles(protocol, budget) if budget is not None else None
    if expected is None:
        duration, breakdown, readings = worst, worst_breakdown, most_readings
    else:
        duration, breakdown = duration_of(protocol, mode, plans, timing, expected)
        readings = round(most_readings * expected / protocol.alternation.max_cycles)
    points_rows = points * len(channels)
    notes = list(limit_report.warnings)
    estimator_lines, estimator_warnings = mode.estimator_notes(protocol)
    notes.extend(f"WARNING: {warning}" for warning in estimator_warnings)
    if rig is None:
        notes.append("no rig given: default speeds, NPLC 1 at 50 Hz and 2 ms per transaction")
    return Estimate(
        points=points,
        readings=readings,
        duration_s=duration,
        breakdown_s=breakdown,
        limits=limit_report,
        # The disk must hold the longest night.
        data_bytes=most_readings * READING_ROW_BYTES + points_rows * POINT_ROW_BYTES,
        rig_given=rig is not None,
        advice=loop_order_advice(protocol, mode, plans, timing, worst),
        notes=notes,
        noise=budget,
        worst_duration_s=worst if expected is not None else None,
        expected_cycles=expected,
        estimator_lines=estimator_lines,
    )


def format_duration(seconds: float) -> str:
    if seconds < 60:
        return f"{seconds:.1f} s"
    minutes, secs = divmod(round(seconds), 60)
    hours, minutes = divmod(minutes, 60)
    if hours:
        return f"{hours} h {minutes:02d} min"
    return f"{minutes} min {secs:02d} s"


def format_bytes(count: int) -> str:
    size = float(count)
    for unit in ("B", "kB", "MB", "GB"):
        if size < 1000 or unit == "GB":
            return f"{size:.0f} {unit}" if unit == "B" else f"{size:.1f} {unit}"
        size /= 1000
    return f"{size:.1f} GB"


def render(result: Estimate, protocol: Any) -> str:
    lines = [
        f"points        {result.points}",
        f"readings      {result.readings}",
        f"duration      {format_duration(result.duration_s)}",
    ]
    if result.worst_duration_s is not None and result.expected_cycles is not None:
        lines[-1] += (f" expected ({result.expected_cycles:.3g} cycles a point on average); "
                      f"at most {format_duration(result.worst_duration_s)} (every point at "
                      f"{protocol.alternation.max_cycles} cycles)")
    for name, seconds in result.breakdown_s.items():
        if seconds > 0:
            share = seconds / result.duration_s if result.duration_s else 0
            lines.append(f"  {name:<20} {format_duration(seconds):>12}  {share:5.1%}")
    lim = result.limits
    lines.append(f"peak current  {lim.peak_current_A * 1e3:g} mA")
    for layer, density in lim.peak_density_by_layer.items():
        carrier = " (carrier)" if layer == protocol.sample.carrier.name else ""
        lines.append(f"  density in {layer}{carrier}: {density:.3g} A/m^2")
    compliance = f" of {lim.compliance_V:g} V compliance" if lim.compliance_V else ""
    lines.append(f"peak voltage  {lim.expected_peak_voltage_V:.3g} V expected{compliance}")
    if lim.peak_power_W > 0:
        lines.append(f"peak power    {lim.peak_power_W * 1e3:.3g} mW in the channel "
                     "(I^2 R, model resistance)")
    lines.append(f"data size     about {format_bytes(result.data_bytes)}")
    if result.noise is not None:
        lines.extend(render_budget(result.noise))
    if result.advice:
        lines.append(f"faster order  {result.advice}")
    lines.extend(result.estimator_lines)
    lines.extend(f"note          {note}" for note in result.notes)
    return "\n".join(lines)
