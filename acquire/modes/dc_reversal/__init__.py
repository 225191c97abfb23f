"""DC current reversal: +I / 0 / -I at every point, even and odd parts of the resistance.

This module is the mode: its protocol sections (`alternation`, `readings`), its tables
(readings.csv, points.csv), its timing and its summary. The choreography at one point is in
measure.py (runner-side), the reduction in reduction.py (pure).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Annotated, Any, Literal

import numpy as np
import pandas as pd
from pydantic import Discriminator, Field, Tag, field_validator

from acquire.inputs.protocol import ProtocolBase, Strict
from acquire.inputs.resistance_check import is_longitudinal
from acquire.inputs.stack import StackGeometry
from acquire.modes.base import (
    AcquisitionMode,
    MeasureContext,
    PointMeasurement,
    PointSummary,
)
from acquire.modes.dc_reversal.budget import (
    channel_noise,
    noise_budget,
    prior_cycle_variance_V2,
    target_channel,
)
from acquire.modes.dc_reversal.cycle_target import POOLED_DOF, CyclePlanner, CycleTarget
from acquire.modes.dc_reversal.measure import DcReversalMeasurement, RawPoint
from acquire.modes.dc_reversal.pattern_analysis import analyse_pattern, summary_lines
from acquire.modes.dc_reversal.reduction import (
    PATTERN_SYMBOLS,
    BlockResult,
    reduce_blocks,
    reduce_readings,
)
from acquire.plan.noise_budget import ROOM_TEMPERATURE_K, NoiseBudget
from acquire.plan.schedule import LoopPlan, Point, movable_axis_names
from acquire.plan.timing import PointCost, RigTiming
from acquire.store.csvw import Column
from acquire.store.tables import TableSchema, readback_columns, setpoint_columns
from drivers.quantities import Duration


def _count_or_target(value: object) -> str:
    return "cycle_target" if isinstance(value, (dict, CycleTarget)) else "cycle_count"


class Alternation(Strict):
    """How the current alternates at every point."""

    pattern: str = Field(
        default="+0-", description="current polarities of one cycle, from '+', '0', '-', with "
        "as many '+' as '-' (e.g. '+-', '+0-', '+0-0', '+--+'); a '0' gives the offset V0",
    )
    cycles: Annotated[
        Annotated[Annotated[int, Field(ge=1, le=10000)], Tag("cycle_count")]
        | Annotated[CycleTarget, Tag("cycle_target")],
        Discriminator(_count_or_target),
    ] = Field(
        default=4,
        description="cycles averaged per point: a number, or {target: 0.05 ppm, min: 3, "
        "max: 40} for as many as the unidirectional ratio's error needs")
    settle: Duration = Field(default=0.02, ge=0, description="wait after each current change")

    @field_validator("cycles", mode="before")
    @classmethod
    def no_yes_for_cycles(cls, value: object) -> object:
        # As for every count (ProtocolBase): YAML's yes must not become 1 cycle.
        return str(value).lower() if isinstance(value, bool) else value

    @field_validator("pattern")
    @classmethod
    def valid_pattern(cls, pattern: str) -> str:
        bad = sorted(set(pattern) - set(PATTERN_SYMBOLS))
        if bad:
            raise ValueError(f"pattern {pattern!r} has {bad}; use only '+', '0' and '-'")
        if "+" not in pattern or "-" not in pattern:
            raise ValueError(
                f"pattern {pattern!r} needs at least one '+' and one '-' to separate "
                "the even and odd parts; e.g. '+0-'"
            )
        if pattern.count("+") != pattern.count("-"):
            raise ValueError(
                f"pattern {pattern!r} has unequal numbers of '+' and '-'; "
                "balanced patterns like '+-', '+0-', '+--+' weight both polarities equally"
            )
        return pattern

    @property
    def max_cycles(self) -> int:
        """The cycles of a point at most (all of them with a fixed number)."""
        return self.cycles.max if isinstance(self.cycles, CycleTarget) else self.cycles

    @property
    def target(self) -> CycleTarget | None:
        return self.cycles if isinstance(self.cycles, CycleTarget) else None

    @property
    def polarities(self) -> tuple[int, ...]:
        return tuple(PATTERN_SYMBOLS[symbol] for symbol in self.pattern)


def _cycles_record(alternation: Alternation) -> int | dict[str, Any]:
    target = alternation.target
    if target is None:
        return int(alternation.max_cycles)
    return {"target_ratio": target.target, "min": target.min, "max": target.max,
            "channel": target.channel}


class Readings(Strict):
    """What is read at each step of the pattern."""

    per_step: int = Field(default=1, ge=1, le=1000,
                          description="readings per channel at each step, averaged")
    channels: list[str] = Field(min_length=1, description="the rig's voltmeters to read, by name")

    @field_validator("channels")
    @classmethod
    def unique_channels(cls, channels: list[str]) -> list[str]:
        repeated = sorted({name for name in channels if channels.count(name) > 1})
        if repeated:
            raise ValueError(f"channel {repeated[0]!r} is listed twice; list each voltmeter once")
        return channels


class DcReversalProtocol(ProtocolBase):
    mode: Literal["dc_reversal"] = Field(
        default="dc_reversal", description="DC current reversal (+I / 0 / -I at every point)"
    )
    alternation: Alternation = Alternation()
    readings: Readings


READINGS = TableSchema(
    "readings.csv",
    "one row per voltmeter reading",
    (
        Column("point", "integer", "", "point number in measurement order (stable for a protocol)"),
        Column("attempt", "integer", "", "0 for the first measurement of the point, +1 per retry"),
        Column("cycle", "integer", "", "alternation cycle within the point"),
        Column("step", "integer", "", "position of this polarity in the alternation pattern"),
        Column("repeat", "integer", "", "reading number within the step"),
        Column("time_s", "double", "s", "seconds since the run started (run clock)"),
        Column("timestamp", "dateTime", "", "ISO 8601 UTC time of the reading"),
        *setpoint_columns(),
        Column("current_A", "double", "A", "current as applied, signed"),
        Column("polarity", "integer", "", "+1, 0 or -1"),
        Column("channel", "string", "", "voltmeter name in the rig"),
        Column("voltage_V", "double", "V", "the reading"),
        *readback_columns("at this step"),
        Column("flags", "string", "",
               "'|'-separated problems: retry, compliance, instrument_error, wait_timeout"),
    ),
)

ERROR_MEANING = (
    "half-width of the 68.3 % interval of the mean: Student's t with `dof` degrees of freedom "
    "times the standard error over cycles (t = 1.20 at 4 cycles, 1.03 at 16)"
)

POINTS = TableSchema(
    "points.csv",
    "one row per (point, channel)",
    (
        Column("point", "integer", "", "point number"),
        *setpoint_columns(),
        Column("current_A", "double", "A", "current amplitude"),
        Column("current_density_A_m2", "double", "A/m^2",
               "current density in the carrier layer (parallel-resistor model)"),
        Column("channel", "string", "", "voltmeter name"),
        Column("n_cycles", "integer", "",
               "cycles averaged (precision-targeted cycles: what the point used)"),
        Column("dof", "integer", "",
               "degrees of freedom of the row's errors: n_cycles - 1 (each error is from the "
               "scatter of the per-cycle values)"),
        Column("resistance_ohm", "double", "ohm", "(V+ - V-)/(2I), mean over cycles"),
        Column("resistance_ohm_err", "double", "ohm", ERROR_MEANING),
        Column("unidirectional_ohm", "double", "ohm",
               "(V+ + V- - 2V0)/(2I), mean over cycles; empty when the pattern has no '0' step"),
        Column("unidirectional_ohm_err", "double", "ohm", ERROR_MEANING),
        Column("unidirectional_ratio", "double", "1", "unidirectional_ohm / resistance_ohm"),
        Column("unidirectional_ratio_err", "double", "1",
               "propagated from the two errors above (same coverage)"),
        Column("offset_V", "double", "V", "zero-current reading (thermoelectric offset)"),
        Column("offset_V_err", "double", "V", ERROR_MEANING),
        *readback_columns("mean over the point's steps (empty when not read back)"),
        Column("flags", "string", "", "'|'-separated flags of the point's readings"),
    ),
)

POINT_VALUES = ("resistance_ohm", "resistance_ohm_err", "unidirectional_ohm",
                "unidirectional_ohm_err", "unidirectional_ratio", "unidirectional_ratio_err",
                "offset_V", "offset_V_err")


class DcReversal(AcquisitionMode):
    name = "dc_reversal"
    protocol_model = DcReversalProtocol
    channel_role = "voltmeter"
    excitation_role = "current_source"

    def channels(self, protocol: Any) -> list[str]:
        return list(protocol.readings.channels)

    def tables(self) -> list[TableSchema]:
        return [READINGS, POINTS]

    def readings_per_point(self, protocol: Any) -> int:
        alternation = protocol.alternation
        return (alternation.max_cycles * len(alternation.pattern) * protocol.readings.per_step
                * len(protocol.readings.channels))

    def fixed_readings_per_point(self, protocol: Any) -> int | None:
        return None if protocol.alternation.target else self.readings_per_point(protocol)

    def point_cost(self, protocol: Any, timing: RigTiming,
                   cycles: float | None = None) -> PointCost:
        cycles = protocol.alternation.max_cycles if cycles is None else cycles
        steps = cycles * len(protocol.alternation.pattern)
        per_step = protocol.readings.per_step
        channels = protocol.readings.channels
        latency_per_reading = sum(timing.reading_latency_s[name] for name in channels)
        integration_per_reading = sum(timing.integration_s[name] for name in channels)
        step_transactions = timing.source_latency_s + timing.readback_latency_s
        return PointCost(
            settling_s=steps * protocol.alternation.settle,
            integration_s=steps * per_step * integration_per_reading,
            transactions_s=steps * (step_transactions + per_step * latency_per_reading)
            + 2 * timing.source_latency_s,  # compliance and error-queue checks at each point
        )

    def check(self, loaded: Any) -> None:
        target = loaded.protocol.alternation.target
        channels = loaded.protocol.readings.channels
        if target is not None and target.channel is not None and target.channel not in channels:
            raise loaded.document.source.error(
                f"cycles.channel {target.channel!r} is not one of the channels read",
                ("alternation", "cycles", "channel"),
                f"use one of {', '.join(channels)}, or leave it out (the first longitudinal)")
        if target is not None and target.channel is None and not any(
                is_longitudinal(name, None) for name in channels):
            raise loaded.document.source.error(
                "precision-targeted cycles follow a longitudinal channel's ratio, and none of "
                f"{', '.join(channels)} is one by its name", ("alternation", "cycles"),
                "name the channel to follow with cycles.channel")

    def noise_budget(self, protocol: Any, rig: Any, plans: Sequence[LoopPlan]) -> NoiseBudget:
        return noise_budget(protocol, rig.rig if rig is not None else None, plans,
                            rig.document.source if rig is not None else None)

    def expected_cycles(self, protocol: Any, budget: NoiseBudget) -> float | None:
        """Mean cycles per point the budget predicts: every current of the loop has as many
        points, and all channels of a point share its cycles."""
        if protocol.alternation.target is None:
            return None
        first = budget.channels[0].channel
        counts = [point.cycles for point in budget.points if point.channel == first]
        return sum(counts) / len(counts) if counts else float(protocol.alternation.max_cycles)

    def measurement(self, context: MeasureContext) -> PointMeasurement:
        protocol = context.protocol
        target = protocol.alternation.target
        if target is None:
            return DcReversalMeasurement(context)
        rig = context.instruments.rig
        steering = target_channel(protocol, rig)
        noise = next(noise for noise in channel_noise(protocol, rig, ROOM_TEMPERATURE_K)
                     if noise.channel == steering)
        planner = CyclePlanner(target, prior_cycle_variance_V2(protocol, noise),
                               StackGeometry.from_sample(protocol.sample).resistance_ohm)
        # A resumed run goes on from the points already stored (rebuilt from the readings).
        stored = context.tables[POINTS.file_name].path
        if stored.exists() and stored.stat().st_size:
            earlier = POINTS.read(stored)
            earlier = earlier[earlier["channel"] == steering].sort_values("point", kind="stable")
            for row in earlier.tail(POOLED_DOF + 1).itertuples():
                planner.record(row.current_A, int(row.n_cycles), row.unidirectional_ohm_err,
                               row.resistance_ohm)
        return DcReversalMeasurement(context, planner,
                                     list(protocol.readings.channels).index(steering))

    def reduce_point(self, protocol: Any, point: Point, raw: Any) -> BlockResult:
        amplitude = np.full(len(protocol.readings.channels), point.current_A)
        if isinstance(raw, RawPoint):
            result = reduce_blocks(raw.voltages, protocol.alternation.pattern, amplitude)
            return dataclasses.replace(result, readback_means=raw.readback_means)
        return reduce_blocks(raw, protocol.alternation.pattern, amplitude)

    def point_rows(self, protocol: Any, point: Point, result: BlockResult, flags: str,
                   density_per_ampere: float) -> list[tuple[object, ...]]:
        used = {loop.axis for loop in protocol.loops}
        setpoints = tuple(value if axis in used else None
                          for axis, value in zip(movable_axis_names(), point.setpoints))
        n_axes = len(movable_axis_names())
        readbacks = tuple(result.readback_means) or (None,) * n_axes
        rows = []
        for index, channel in enumerate(protocol.readings.channels):
            rows.append((
                point.number, *setpoints, point.current_A, point.current_A * density_per_ampere,
                channel, result.n_cycles, result.dof,
                *(float(getattr(result, name)[index]) for name in POINT_VALUES),
                *readbacks,
                flags,
            ))
        return rows

    def summary(self, result: BlockResult) -> PointSummary:
        return PointSummary(float(result.resistance_ohm[0]),
                            float(result.unidirectional_ratio[0]),
                            float(result.unidirectional_ratio_err[0]), result.dof)

    def estimator_notes(self, protocol: Any) -> tuple[list[str], list[str]]:
        pattern = protocol.alternation.pattern
        return summary_lines(pattern), analyse_pattern(pattern).warnings()

    def normalised_sections(self, protocol: Any) -> dict[str, Any]:
        return {
            "alternation": {
                "pattern": protocol.alternation.pattern,
                "cycles": _cycles_record(protocol.alternation),
                "settle_s": protocol.alternation.settle,
            },
            "readings": protocol.readings.model_dump(),
        }

    def reduce_readings(self, readings: pd.DataFrame, normalised: dict[str, Any],
                        density_per_ampere: float) -> pd.DataFrame:
        return reduce_readings(readings, normalised["alternation"]["pattern"],
                               density_per_ampere, normalised["readings"]["per_step"],
                               POINTS.names)


MODE = DcReversal()
