"""What an acquisition mode is: the protocol section it adds, its instrument choreography at
one point, the tables it writes, its reduction, its timing and its one-line summary.

The runner keeps what every mode shares (moves, waits, retries, the problem policy, storage,
the safe shutdown) and hands each point to the mode named by the protocol's `mode:`.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, ClassVar

import pandas as pd

from acquire.inputs.protocol import ProtocolBase
from acquire.plan.schedule import Point
from acquire.plan.timing import PointCost, RigTiming
from acquire.store.tables import TableSchema


class PointProblem(Exception):
    """A point that the protocol's on_problem policy must decide about."""

    def __init__(self, kind: str, message: str) -> None:
        self.kind = kind
        super().__init__(message)


@dataclass(frozen=True)
class PointSummary:
    """What the progress line, status.json and the sweep log show of a point (first channel)."""

    resistance_ohm: float
    unidirectional_ratio: float  # NaN when the mode gives none (no zero step)
    unidirectional_ratio_err: float = float("nan")  # half-width of the 68.3 % interval
    dof: int | None = None  # degrees of freedom of that error


@dataclass
class MeasureContext:
    """What a mode's measurement may use: the runner owns every piece of it."""

    protocol: Any  # the mode's protocol model
    instruments: Any  # acquire.runtime.instruments.Instruments
    clock: Any  # acquire.runtime.clock.Clock
    tables: dict[str, Any]  # file name -> acquire.store.append_table.AppendTable
    readbacks: Callable[[], tuple[float | None, ...]]  # every axis's readback, column order
    heartbeat: Callable[[], None]
    used_axes: frozenset[str]  # loop axes the protocol sweeps (others leave columns empty)
    # Transient faults the run has met so far: a reading taken after a change is flagged.
    faults: Callable[[], int] = lambda: 0


class PointMeasurement(ABC):
    """The runner-side part of a mode: it touches instruments (and only through the
    context); retries, policy and storage of the points stay with the runner."""

    @abstractmethod
    def measure(self, point: Point, attempt: int, flags: str) -> Any:
        """Take the point's readings (written to the tables as they come); the raw data."""

    @abstractmethod
    def check(self) -> None:
        """Raise PointProblem for what the instruments reported during the point."""

    def stored(self, point: Point, result: Any) -> None:  # noqa: B027 - most need nothing
        """The runner stored this point's result in the points table."""

    @abstractmethod
    def rest(self) -> None:
        """Leave the excitation at rest while the runner waits to retry (no retries itself)."""

    @abstractmethod
    def start(self) -> None:
        """After configuration: switch the excitation on (at zero)."""


class AcquisitionMode(ABC):
    name: ClassVar[str]
    protocol_model: ClassVar[type[ProtocolBase]]
    channel_role: ClassVar[str]  # the role every channel of the protocol must have
    excitation_role: ClassVar[str]  # the role that drives the current loop's amplitude

    @abstractmethod
    def channels(self, protocol: Any) -> list[str]:
        """The rig instruments the mode reads, in the protocol's order."""

    @abstractmethod
    def tables(self) -> list[TableSchema]:
        """Every table the mode writes; the first is the raw readings, the last the points."""

    @abstractmethod
    def readings_per_point(self, protocol: Any) -> int:
        """Rows of the readings table a complete point writes (one attempt)."""

    @abstractmethod
    def point_cost(self, protocol: Any, timing: RigTiming,
                   cycles: float | None = None) -> PointCost:
        """Seconds one point takes, by what they are spent on; `cycles` for a mode whose
        points vary in length (None: the longest)."""

    @abstractmethod
    def measurement(self, context: MeasureContext) -> PointMeasurement: ...

    @abstractmethod
    def reduce_point(self, protocol: Any, point: Point, raw: Any) -> Any:
        """The point's reduced result from its raw data (pure)."""

    @abstractmethod
    def point_rows(self, protocol: Any, point: Point, result: Any, flags: str,
                   density_per_ampere: float) -> list[tuple[object, ...]]:
        """Rows of the points table for one point (pure)."""

    @abstractmethod
    def summary(self, result: Any) -> PointSummary: ...

    @abstractmethod
    def reduce_readings(self, readings: pd.DataFrame, normalised: dict[str, Any],
                        density_per_ampere: float) -> pd.DataFrame:
        """The points table from the readings table alone (pure; `reduce` and `resume`)."""

    @abstractmethod
    def normalised_sections(self, protocol: Any) -> dict[str, Any]:
        """The mode's own sections, SI with units in the key names (run.json, check --show)."""

    def check(self, loaded: Any) -> None:  # noqa: B027 - a mode may have none
        """Semantic checks of the mode's own sections beyond its model (InputError)."""

    def estimator_notes(self, protocol: Any) -> tuple[list[str], list[str]]:
        """What `check` and `estimate` print about the mode's estimators for this protocol:
        (lines of information, warnings). None by default."""
        return [], []

    def peak_current(self, protocol: Any, amplitude: float) -> float:
        """The largest instantaneous current of a point at this loop amplitude."""
        return amplitude

    def readings_count(self, protocol: Any, points: int) -> int:
        return points * self.readings_per_point(protocol)

    def fixed_readings_per_point(self, protocol: Any) -> int | None:
        """Rows of a complete point when every point has as many (None: they vary, and a
        point is complete once the points table holds it)."""
        return self.readings_per_point(protocol)

    def noise_budget(self, protocol: Any, rig: Any, plans: Any) -> Any | None:
        """The predicted errors of a point (acquire.plan.noise_budget), or None."""
        return None

    def expected_cycles(self, protocol: Any, budget: Any) -> float | None:
        """Mean cycles per point a budget predicts, for a mode whose points vary; else None."""
        return None
