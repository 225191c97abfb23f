"""The runner: the one place that touches instruments, sleeps, retries and decides on failure."""

from __future__ import annotations

import contextlib
import functools
import logging
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np

from acquire.clock import Clock
from acquire.instrument_set import Instruments
from acquire.load import LoadedProtocol, LoadedRig
from acquire.reduction import BlockResult, reduce_blocks
from acquire.rig import DEFAULT_BACKLASH, DEFAULT_NPLC
from acquire.safe_shutdown import make_safe
from acquire.sample_geometry import SampleGeometry
from acquire.schedule import Measure, Move, Point, Step, iterate_steps, plans_from
from acquire.store import AppendTable, format_cell
from acquire.waits import StabilityWait, WaitTimeout, approach_targets
from drivers.interface import CommunicationError, InstrumentError

log = logging.getLogger("flipsweep")

RETRY_BACKOFF_S = (1.0, 4.0, 15.0)  # transient faults: wait, reconnect, measure again
# What a run survives by waiting, reconnecting and doing the step again: a VISA timeout or I/O
# error, and an unreadable reply (line noise reaches the drivers as InstrumentError). A fault
# that persists through every backoff stops the run.
TRANSIENT_FAULTS = (CommunicationError, InstrumentError)

Result = TypeVar("Result")


class PointProblem(Exception):
    """A point that the protocol's on_problem policy must decide about."""

    def __init__(self, kind: str, message: str) -> None:
        self.kind = kind
        super().__init__(message)


class StopRun(Exception):
    """The run cannot go on; the session performs the safe shutdown."""


@dataclass
class PointOutcome:
    point: Point
    result: BlockResult | None
    flags: str
    skipped: bool = False


class Runner:
    # Seconds to wait before each retry of a step hit by a transient fault; one retry per entry.
    retry_backoff_s: tuple[float, ...] = RETRY_BACKOFF_S

    def __init__(
        self,
        loaded: LoadedProtocol,
        rig: LoadedRig,
        instruments: Instruments,
        clock: Clock,
        readings: AppendTable,
        points: AppendTable,
        on_point: Callable[[PointOutcome], None] = lambda outcome: None,
        heartbeat: Callable[[], None] = lambda: None,
        sync_interval_s: float = 0.0,
    ) -> None:
        self.protocol = loaded.protocol
        self.loaded = loaded
        self.rig = rig
        self.instruments = instruments
        self.clock = clock
        self.readings = readings
        self.points = points
        self.on_point = on_point
        self.waiter = StabilityWait(clock, heartbeat)
        self.heartbeat = heartbeat  # status.json stays fresh inside a long point too
        self.channels = list(self.protocol.readings.channels)
        self.polarities = self.protocol.alternation.polarities
        self.density_per_ampere = SampleGeometry.from_sample(
            self.protocol.sample
        ).carrier_density_per_ampere
        self.angle_now: float | None = None
        self.setpoints: dict[str, float | None] = {"temperature": None, "field": None,
                                                    "angle": None}
        self.used_axes = {loop.axis for loop in self.protocol.loops}
        self.flags_pending: set[str] = set()
        self.tripped = False
        # 0: fsync at every point (a real night). A dry run on the virtual clock measures
        # thousands of points a second; there it fsyncs at most every `sync_interval_s` of
        # wall time, and still flushes every point, so a crash or kill loses nothing.
        self.sync_interval_s = sync_interval_s
        self._last_sync = 0.0
        self._disconnected: set[str] = set()  # names whose reconnect failed

    # -- configuration ------------------------------------------------------------------
    def configure(self) -> None:
        # Configuring is idempotent, so a transient fault repeats all of it.
        self._with_retries("configuration", self._configure_once)

    def _configure_once(self) -> None:
        spec_of = self.rig.rig.instruments
        source_name = self.instruments.names["current_source"]
        self.instruments.source.configure(spec_of[source_name].compliance)
        self.instruments.source.set_current(0.0)
        for name, meter in self.instruments.voltmeters.items():
            spec = spec_of[name]
            range_V = None if spec.range in (None, "auto") else float(spec.range)
            meter.configure(spec.nplc or DEFAULT_NPLC, range_V, bool(spec.autozero))
        if self.instruments.field is not None:
            spec = spec_of[self.instruments.names["field"]]
            self.instruments.field.configure(spec.ramp_rate or spec.limits.ramp_rate)
        if self.instruments.rotator is not None:
            spec = spec_of[self.instruments.names["rotator"]]
            if spec.speed:
                self.instruments.rotator.configure(spec.speed)
            self.angle_now = self.instruments.rotator.position()
        if self.instruments.temperature is not None:
            spec = spec_of[self.instruments.names["temperature"]]
            self.instruments.temperature.configure(spec.rate)
        for instrument in self.instruments.all():
            problems = instrument.errors()
            if problems:
                raise StopRun(f"{instrument.name} reported after configuration: {problems[0]}")
        self.instruments.source.set_output(True)

    # -- moves --------------------------------------------------------------------------
    def move(self, step: Move) -> None:
        waits = self.protocol.waits
        if step.axis == "field":
            magnet = self.instruments.field
            magnet.set_target(step.value)
            self.waiter.until_stable(
                "field", magnet.field, step.value, waits.field.tolerance, waits.field.hold,
                waits.field.timeout,
            )
        elif step.axis == "temperature":
            cryostat = self.instruments.temperature
            cryostat.set_setpoint(step.value)
            self.waiter.until_stable(
                "temperature", cryostat.temperature, step.value, waits.temperature.tolerance,
                waits.temperature.hold, waits.temperature.timeout,
            )
        elif step.axis == "angle":
            self._rotate(step.value)
        self.setpoints[step.axis] = step.value

    def _rotate(self, target: float) -> None:
        rotator = self.instruments.rotator
        spec = self.rig.rig.instruments[self.instruments.names["rotator"]]
        backlash = spec.backlash if spec.backlash is not None else DEFAULT_BACKLASH
        positive = (spec.approach or "positive") == "positive"
        wait = self.protocol.waits.angle
        for leg in approach_targets(self.angle_now, target, backlash, positive):
            rotator.move_to(leg)
            self.waiter.until_false("angle", rotator.moving, wait.timeout, leg)
            self.angle_now = leg
        position = rotator.position()
        if abs(position - target) > wait.tolerance:
            raise WaitTimeout("angle", target, position, wait.timeout)
        self.clock.sleep(wait.settle)

    # -- one point ----------------------------------------------------------------------
    def _readbacks(self) -> tuple[float | None, float | None, float | None]:
        field = self.instruments.field.field() if self.instruments.field is not None else None
        angle = self.instruments.rotator.position() if self.instruments.rotator else None
        temperature = (
            self.instruments.temperature.temperature() if self.instruments.temperature else None
        )
        return temperature, field, angle

    def measure(self, point: Point, attempt: int, flags: str) -> np.ndarray:
        alternation = self.protocol.alternation
        per_step = self.protocol.readings.per_step
        source = self.instruments.source
        meters = [self.instruments.voltmeters[name] for name in self.channels]
        voltages = np.empty((len(self.channels), alternation.cycles, len(self.polarities),
                             per_step))
        used = self.used_axes
        setpoints = ",".join(format_cell(value) for value in (
            point.temperature_K if "temperature" in used else None,
            point.field_T if "field" in used else None,
            point.angle_deg if "angle" in used else None,
        ))
        channels = [format_cell(name) for name in self.channels]
        flag_cell = format_cell(flags)
        # Rows are formatted here, in one f-string each: this loop runs for every reading.
        lines = []
        # Compliance is a live state: ask while current flows, at the first and the last
        # nonzero step of the point (two transactions, not one per step).
        nonzero = [index for index, polarity in enumerate(self.polarities) if polarity]
        probes = {(0, nonzero[0]), (alternation.cycles - 1, nonzero[-1])}
        self.tripped = False
        for cycle in range(alternation.cycles):
            for step_index, polarity in enumerate(self.polarities):
                current = polarity * point.current_A
                # Zero current between polarities, never output-off: the output relay does not
                # switch at every step (common practice).
                source.set_current(current)
                self.clock.sleep(alternation.settle)
                readbacks = ",".join(map(format_cell, self._readbacks()))
                self.heartbeat()
                head = f"{point.number},{attempt},{cycle},{step_index},"
                middle = f"{setpoints},{current!r},{polarity},"
                for repeat in range(per_step):
                    for channel_index, meter in enumerate(meters):
                        voltage = meter.read()
                        voltages[channel_index, cycle, step_index, repeat] = voltage
                        lines.append(
                            f"{head}{repeat},{round(self.clock.now(), 6)!r},"
                            f"{self.clock.utc().isoformat()},{middle}{channels[channel_index]},"
                            f"{voltage!r},{readbacks},{flag_cell}\n"
                        )
                if (cycle, step_index) in probes:
                    self.tripped = self.tripped or source.compliance_tripped()
        source.set_current(0.0)
        self.readings.write_lines(lines)
        return voltages

    def check_point(self) -> None:
        if self.tripped:
            raise PointProblem("compliance", "the current source hit its compliance voltage")
        for instrument in (self.instruments.source, *self.instruments.voltmeters.values()):
            problems = instrument.errors()
            if problems:
                raise PointProblem("instrument_error", f"{instrument.name}: {problems[0]}")

    def measure_with_policy(self, point: Point) -> PointOutcome:
        policy = self.protocol.on_problem
        attempt = 0
        flags: list[str] = sorted(self.flags_pending)
        self.flags_pending.clear()
        transient_failures = 0
        while True:
            try:
                voltages = self.measure(point, attempt, "|".join(flags))
                self.check_point()
            except TRANSIENT_FAULTS as error:
                transient_failures += 1
                self._rest_current()
                self._after_transient(f"point {point.number}", error, transient_failures)
                attempt += 1
                flags = sorted({*flags, "retry"})
                continue
            except PointProblem as problem:
                action = getattr(policy, problem.kind)
                log.warning("point %d: %s (policy: %s)", point.number, problem, action)
                flags = sorted({*flags, problem.kind})
                if action == "stop":
                    raise StopRun(f"point {point.number}: {problem}") from problem
                if action == "skip":
                    self.readings.commit()
                    return PointOutcome(point, None, "|".join(flags), skipped=True)
                if action == "retry" and attempt < policy.retries:
                    attempt += 1
                    flags = sorted({*flags, "retry"})
                    continue
                # "flag", or retries used up: keep the data, flagged.
                self._clear_errors()
                result = self._reduce(point, voltages)
                return PointOutcome(point, result, "|".join(flags))
            result = self._reduce(point, voltages)
            return PointOutcome(point, result, "|".join(flags))

    # -- transient faults ---------------------------------------------------------------
    def identities(self, opened: dict[str, Any]) -> dict[str, str]:
        """Each opened instrument's *IDN? reply, for run.json (the run's first queries)."""
        return {
            name: self._with_retries(f"identify {name}", driver.identify)
            for name, driver in opened.items()
        }

    def _with_retries(self, what: str, action: Callable[[], Result]) -> Result:
        """`action()`, done again after each transient fault; the next point is flagged."""
        failures = 0
        while True:
            try:
                return action()
            except TRANSIENT_FAULTS as error:
                failures += 1
                self._after_transient(what, error, failures)
                self.flags_pending.add("retry")

    def _after_transient(self, what: str, error: Exception, failures: int) -> None:
        """Back off and reconnect before retry number `failures`, or stop the run."""
        budget = len(self.retry_backoff_s)
        if failures > budget:
            raise StopRun(f"{what}: {error}; still failing after {budget} retries "
                          "with reconnect") from error
        backoff = self.retry_backoff_s[failures - 1]
        affected = self._affected(error)
        log.warning("%s: %s; retry %d of %d in %g s after reconnecting %s", what, error,
                    failures, budget, backoff, ", ".join(i.name for i in affected))
        self._recover(backoff, affected)

    def _affected(self, error: Exception) -> list[Any]:
        """The instrument the fault names; all of them if it names none of the rig's."""
        every = list(self.instruments.all())
        named = [i for i in every if i.name == getattr(error, "instrument", None)]
        return named or every

    def _recover(self, backoff_s: float, instruments: list[Any]) -> None:
        self.waiter.heartbeat()
        self.clock.sleep(backoff_s)
        for instrument in instruments:
            try:
                # A fresh session also drops a late reply still on its way to the old one,
                # which the next query would otherwise read as its own answer.
                instrument.reconnect()
                self._disconnected.discard(instrument.name)
            except Exception as error:  # a VISA library may raise anything for a dead address
                self._disconnected.add(instrument.name)
                log.warning("reconnect of %s failed: %s", instrument.name, error)

    def _rest_current(self) -> None:
        """Zero current while waiting to retry, as between points (best effort, no retry)."""
        with contextlib.suppress(*TRANSIENT_FAULTS):
            self.instruments.source.set_current(0.0)

    def _clear_errors(self) -> None:
        for instrument in self.instruments.all():
            with contextlib.suppress(InstrumentError, CommunicationError):
                instrument.errors()

    def _reduce(self, point: Point, voltages: np.ndarray) -> BlockResult:
        amplitude = np.full(len(self.channels), point.current_A)
        return reduce_blocks(voltages, self.protocol.alternation.pattern, amplitude)

    def point_rows(self, outcome: PointOutcome) -> list[tuple[object, ...]]:
        point, result = outcome.point, outcome.result
        if result is None:
            return []
        used = self.used_axes
        rows = []
        for index, channel in enumerate(self.channels):
            rows.append((
                point.number,
                point.temperature_K if "temperature" in used else None,
                point.field_T if "field" in used else None,
                point.angle_deg if "angle" in used else None,
                point.current_A,
                point.current_A * self.density_per_ampere,
                channel, result.n_cycles,
                *(float(getattr(result, name)[index]) for name in (
                    "resistance_ohm", "resistance_ohm_err", "unidirectional_ohm",
                    "unidirectional_ohm_err", "unidirectional_ratio", "unidirectional_ratio_err",
                    "offset_V", "offset_V_err")),
                outcome.flags,
            ))
        return rows

    # -- the night ----------------------------------------------------------------------
    def steps(self, start_point: int) -> Iterator[Step]:
        plans = plans_from(self.protocol, self.loaded.loop_values)
        return iterate_steps(plans, start_point)

    def run(self, start_point: int = 0) -> None:
        pending_skip = False
        for step in self.steps(start_point):
            if isinstance(step, Move):
                try:
                    self._with_retries(f"move {step.axis} to {step.value:g}",
                                       functools.partial(self.move, step))
                    pending_skip = False
                except WaitTimeout as timeout:
                    action = self.protocol.on_problem.wait_timeout
                    log.warning("%s (policy: %s)", timeout, action)
                    if action == "stop":
                        raise StopRun(str(timeout)) from timeout
                    if action == "skip":
                        pending_skip = True
                    else:
                        self.flags_pending.add("wait_timeout")
                continue
            assert isinstance(step, Measure)
            if pending_skip:
                outcome = PointOutcome(step.point, None, "wait_timeout", skipped=True)
            else:
                outcome = self.measure_with_policy(step.point)
            self.points.extend(self.point_rows(outcome))
            self._commit_point()
            self.on_point(outcome)

    def _commit_point(self) -> None:
        now = time.monotonic()
        durable = now - self._last_sync >= self.sync_interval_s
        if durable:
            self._last_sync = now
        self.readings.commit(durable)
        self.points.commit(durable)

    def shutdown(self) -> list[str]:
        """The safe state (see acquire.safe_shutdown); failures are returned for the log."""
        return make_safe(self.instruments, self.rig.rig, self.protocol.finish,
                         self._disconnected)
