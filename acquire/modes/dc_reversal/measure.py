"""DC current reversal at one point, on the instruments: the runner-side part of the mode.

At every step of every cycle the source is set to +I, 0 or -I (zero between polarities, never
output-off: the output relay does not switch at every step, common practice), the current is
let settle, the readbacks are taken, then every channel is read `per_step` times. Each reading
becomes a row of readings.csv as it is taken: the rows of a step are written when the step
ends and reach the operating system every few seconds of run clock, so a long point is never
held in memory or lost whole to a kill. A row taken after a transient fault in the attempt is
flagged `retry`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from acquire.modes.base import MeasureContext, PointMeasurement, PointProblem
from acquire.modes.dc_reversal.cycle_target import CyclePlanner
from acquire.modes.dc_reversal.reduction import mean_over_steps
from acquire.plan.schedule import Point, movable_axis_names
from acquire.store.append_table import format_cell
from drivers.roles import current_source, voltmeter


@dataclass(frozen=True)
class RawPoint:
    """A point's readings: voltages[channel, cycle, step, repeat] and the mean readback of
    each movable axis over its steps (None for an axis not read back)."""

    voltages: np.ndarray
    readback_means: tuple[float | None, ...]


def mean_readbacks(taken: list[tuple[float | None, ...]]) -> tuple[float | None, ...]:
    """Each axis's mean readback over the steps (None where never read)."""
    if not taken:
        return ()
    per_axis = np.array([[np.nan if v is None else v for v in step] for step in taken]).T
    return tuple(None if np.isnan(mean) else float(mean) for mean in mean_over_steps(per_axis))


class DcReversalMeasurement(PointMeasurement):
    def __init__(self, context: MeasureContext, planner: CyclePlanner | None = None,
                 steering_index: int = 0) -> None:
        """`planner`: precision-targeted cycles, following channel `steering_index`."""
        self.context = context
        protocol = context.protocol
        self.alternation = protocol.alternation
        self.per_step = protocol.readings.per_step
        self.channels = list(protocol.readings.channels)
        self.polarities = self.alternation.polarities
        self.source: current_source.CurrentSource = context.instruments.required(
            current_source.ROLE)
        self.meters: list[voltmeter.Voltmeter] = [
            context.instruments.named(name) for name in self.channels
        ]
        self.readings = context.tables["readings.csv"]
        self.tripped = False
        self.planner = planner
        self.steering_index = steering_index
        self.nonzero = [index for index, polarity in enumerate(self.polarities) if polarity]
        self.used = context.used_axes

    def cycles_for(self, point: Point) -> int:
        if self.planner is None:
            return int(self.alternation.cycles)
        return self.planner.cycles(point.current_A)

    def stored(self, point: Point, result: Any) -> None:
        if self.planner is not None:
            index = self.steering_index
            self.planner.record(point.current_A, result.n_cycles,
                                float(result.unidirectional_ohm_err[index]),
                                float(result.resistance_ohm[index]))

    def start(self) -> None:
        self.source.set_output(True)

    def rest(self) -> None:
        self.source.set_current(0.0)

    def measure(self, point: Point, attempt: int, flags: str) -> RawPoint:
        alternation, per_step, clock = self.alternation, self.per_step, self.context.clock
        source, meters = self.source, self.meters
        cycles = self.cycles_for(point)
        # Compliance is a live state: ask while current flows, at the first and the last
        # nonzero step of the point (two transactions, not one per step).
        probes = {(0, self.nonzero[0]), (cycles - 1, self.nonzero[-1])}
        voltages = np.empty((len(self.channels), cycles, len(self.polarities), per_step))
        setpoints = ",".join(
            format_cell(value if axis in self.used else None)
            for axis, value in zip(movable_axis_names(), point.setpoints)
        )
        channels = [format_cell(name) for name in self.channels]
        flag_cell = format_cell(flags)
        after_fault = format_cell("|".join(sorted({*filter(None, flags.split("|")), "retry"})))
        faults, faults_at_start = self.context.faults, self.context.faults()
        readings = self.readings
        # Rows are formatted here, in one f-string each: this loop runs for every reading.
        self.tripped = False
        taken: list[tuple[float | None, ...]] = []
        for cycle in range(cycles):
            for step_index, polarity in enumerate(self.polarities):
                lines = []
                current = polarity * point.current_A
                source.set_current(current)
                clock.sleep(alternation.settle)
                step_readbacks = self.context.readbacks()
                taken.append(step_readbacks)
                readbacks = ",".join(map(format_cell, step_readbacks))
                self.context.heartbeat()
                head = f"{point.number},{attempt},{cycle},{step_index},"
                middle = f"{setpoints},{current!r},{polarity},"
                for repeat in range(per_step):
                    for channel_index, meter in enumerate(meters):
                        voltage = meter.read()
                        if faults() != faults_at_start:
                            flag_cell = after_fault
                        voltages[channel_index, cycle, step_index, repeat] = voltage
                        lines.append(
                            f"{head}{repeat},{round(clock.now(), 6)!r},"
                            f"{clock.utc().isoformat()},{middle}{channels[channel_index]},"
                            f"{voltage!r},{readbacks},{flag_cell}\n"
                        )
                if (cycle, step_index) in probes:
                    self.tripped = self.tripped or source.compliance_tripped()
                readings.write_lines(lines)
                readings.flush_if_due(clock.now())
        source.set_current(0.0)
        return RawPoint(voltages, mean_readbacks(taken))

    def check(self) -> None:
        if self.tripped:
            raise PointProblem("compliance", "the current source hit its compliance voltage")
        for instrument in (self.source, *self.meters):
            problems = instrument.errors()
            if problems:
                raise PointProblem("instrument_error", f"{instrument.name}: {problems[0]}")
