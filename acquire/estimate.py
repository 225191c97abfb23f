"""`flipsweep estimate`: points, readings, duration with a breakdown, peak current and density."""

from __future__ import annotations

import itertools
from collections.abc import Sequence
from dataclasses import dataclass, field

from acquire.limits import LimitReport, check_limits
from acquire.load import LoadedProtocol, LoadedRig
from acquire.protocol import Protocol
from acquire.schedule import LoopPlan, Move, count_points, iterate_steps, plans_from
from acquire.timing import RigTiming, point_cost

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


def _moves_breakdown(
    protocol: Protocol, plans: Sequence[LoopPlan], timing: RigTiming
) -> dict[str, float]:
    waits = protocol.waits
    totals = {"field ramps": 0.0, "field holds": 0.0, "rotations": 0.0,
              "temperature changes": 0.0, "temperature holds": 0.0}
    # The night starts from zero field and zero angle; the cryostat is assumed at the first
    # temperature already (its cool-down is not part of the protocol).
    state = {"field": 0.0, "angle": 0.0, "temperature": None}
    for step in iterate_steps(plans):
        if not isinstance(step, Move):
            continue
        previous = state[step.axis]
        if step.axis == "field":
            totals["field ramps"] += abs(step.value - previous) / timing.field_ramp_T_per_s
            totals["field holds"] += waits.field.hold
        elif step.axis == "angle":
            totals["rotations"] += timing.rotation_s(previous, step.value) + waits.angle.settle
        elif step.axis == "temperature":
            if previous is not None:
                change = abs(step.value - previous) / timing.temperature_rate_K_per_s
                totals["temperature changes"] += change
            totals["temperature holds"] += waits.temperature.hold
        state[step.axis] = step.value
    return totals


def duration_of(
    protocol: Protocol, plans: Sequence[LoopPlan], timing: RigTiming
) -> tuple[float, dict[str, float]]:
    points = count_points(plans)
    cost = point_cost(protocol, timing)
    breakdown = _moves_breakdown(protocol, plans, timing)
    breakdown["current settling"] = points * cost.settling_s
    breakdown["integration"] = points * cost.integration_s
    breakdown["transactions"] = points * cost.transactions_s
    return sum(breakdown.values()), breakdown


def _reordered(plans: Sequence[LoopPlan]) -> list[tuple[LoopPlan, ...]]:
    options = []
    for order in itertools.permutations(plans):
        # A snake loop cannot be outermost: it has no outer passes to alternate with.
        if order[0].snake:
            order = (LoopPlan(order[0].axis, order[0].values, False), *order[1:])
        options.append(tuple(order))
    return options


def loop_order_advice(
    protocol: Protocol, plans: Sequence[LoopPlan], timing: RigTiming, duration_s: float
) -> str | None:
    if len(plans) < 2:
        return None
    best_time, best_order = duration_s, None
    for order in _reordered(plans):
        if [p.axis for p in order] == [p.axis for p in plans]:
            continue
        time, _ = duration_of(protocol, order, timing)
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
    limit_report = check_limits(loaded, rig)
    plans = plans_from(protocol, loaded.loop_values)
    timing = RigTiming.of(rig.rig if rig else None, protocol.readings.channels)
    points = count_points(plans)
    steps_per_point = protocol.alternation.cycles * len(protocol.alternation.pattern)
    readings = points * steps_per_point * protocol.readings.per_step * len(
        protocol.readings.channels
    )
    duration, breakdown = duration_of(protocol, plans, timing)
    points_rows = points * len(protocol.readings.channels)
    notes = list(limit_report.warnings)
    if rig is None:
        notes.append("no rig given: default speeds, NPLC 1 at 50 Hz and 2 ms per transaction")
    return Estimate(
        points=points,
        readings=readings,
        duration_s=duration,
        breakdown_s=breakdown,
        limits=limit_report,
        data_bytes=readings * READING_ROW_BYTES + points_rows * POINT_ROW_BYTES,
        rig_given=rig is not None,
        advice=loop_order_advice(protocol, plans, timing, duration),
        notes=notes,
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


def render(result: Estimate, protocol: Protocol) -> str:
    lines = [
        f"points        {result.points}",
        f"readings      {result.readings}",
        f"duration      {format_duration(result.duration_s)}",
    ]
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
    lines.append(f"data size     about {format_bytes(result.data_bytes)}")
    if result.advice:
        lines.append(f"faster order  {result.advice}")
    lines.extend(f"note          {note}" for note in result.notes)
    return "\n".join(lines)
