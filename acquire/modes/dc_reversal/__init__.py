"""DC current reversal: +I / 0 / -I at every point, even and odd parts of the resistance.

Protocol sections `alternation` and `readings` (section.py); choreography at one point
(measure.py); readings.csv and points.csv (tables.py); the reduction (reduction.py).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from acquire.modes.base import (
    AcquisitionMode,
    MeasureContext,
    PointMeasurement,
    PointSummary,
)
from acquire.modes.dc_reversal.measure import DcReversalMeasurement
from acquire.modes.dc_reversal.reduction import BlockResult, reduce_blocks, reduce_readings
from acquire.modes.dc_reversal.section import DcReversalProtocol
from acquire.modes.dc_reversal.tables import POINTS, READINGS
from acquire.plan.schedule import Point, movable_axis_names
from acquire.plan.timing import PointCost, RigTiming
from acquire.store.tables import TableSchema

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
        return (alternation.cycles * len(alternation.pattern) * protocol.readings.per_step
                * len(protocol.readings.channels))

    def point_cost(self, protocol: Any, timing: RigTiming) -> PointCost:
        steps = protocol.alternation.cycles * len(protocol.alternation.pattern)
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

    def measurement(self, context: MeasureContext) -> PointMeasurement:
        return DcReversalMeasurement(context)

    def reduce_point(self, protocol: Any, point: Point, raw: Any) -> BlockResult:
        amplitude = np.full(len(protocol.readings.channels), point.current_A)
        return reduce_blocks(raw, protocol.alternation.pattern, amplitude)

    def point_rows(self, protocol: Any, point: Point, result: BlockResult, flags: str,
                   density_per_ampere: float) -> list[tuple[object, ...]]:
        used = {loop.axis for loop in protocol.loops}
        setpoints = tuple(value if axis in used else None
                          for axis, value in zip(movable_axis_names(), point.setpoints))
        rows = []
        for index, channel in enumerate(protocol.readings.channels):
            rows.append((
                point.number, *setpoints, point.current_A, point.current_A * density_per_ampere,
                channel, result.n_cycles,
                *(float(getattr(result, name)[index]) for name in POINT_VALUES),
                flags,
            ))
        return rows

    def summary(self, result: BlockResult) -> PointSummary:
        return PointSummary(float(result.resistance_ohm[0]),
                            float(result.unidirectional_ratio[0]))

    def normalised_sections(self, protocol: Any) -> dict[str, Any]:
        return {
            "alternation": {
                "pattern": protocol.alternation.pattern,
                "cycles": protocol.alternation.cycles,
                "settle_s": protocol.alternation.settle,
            },
            "readings": protocol.readings.model_dump(),
        }

    def reduce_readings(self, readings: pd.DataFrame, normalised: dict[str, Any],
                        density_per_ampere: float) -> pd.DataFrame:
        return reduce_readings(readings, normalised["alternation"]["pattern"],
                               density_per_ampere, normalised["readings"]["per_step"])


MODE = DcReversal()
