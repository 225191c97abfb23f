"""The runner: the one place that touches instruments, sleeps, retries and decides on failure."""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import logging
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np

from acquire.clock import Clock
from acquire.load import LoadedProtocol, LoadedRig
from acquire.reduction import BlockResult, reduce_blocks
from acquire.rig import DEFAULT_BACKLASH, DEFAULT_NPLC
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
# A shutdown call is bounded by its instrument's VISA timeout plus this much for the thread that
# makes it to start and report back.
SHUTDOWN_GRACE_S = 0.5
DEFAULT_TIMEOUT_S = 5.0  # an instrument the rig does not describe (acquire.rig's default)

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


@dataclass
class Instruments:
    source: Any
    voltmeters: dict[str, Any]
    field: Any | None = None
    rotator: Any | None = None
    temperature: Any | None = None
    names: dict[str, str] = dataclasses.field(default_factory=dict)  # role -> rig name

    @classmethod
    def from_opened(
        cls, rig: LoadedRig, opened: dict[str, Any], channels: list[str]
    ) -> Instruments:
        def one(role: str) -> Any | None:
            entry = rig.rig.one(role)
            return opened[entry[0]] if entry else None

        names = {role: entry[0] for role in ("current_source", "field", "rotator", "temperature")
                 if (entry := rig.rig.one(role))}
        return cls(
            source=one("current_source"),
            voltmeters={name: opened[name] for name in channels},
            field=one("field"),
            rotator=one("rotator"),
            temperature=one("temperature"),
            names=names,
        )

    def all(self) -> Iterator[Any]:
        yield self.source
        yield from self.voltmeters.values()
        for extra in (self.field, self.rotator, self.temperature):
            if extra is not None:
                yield extra


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
        skip_until_move: set[str] = set()
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
                    skip_until_move.add(step.axis)
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
        """The safe state: current to zero and output off first, then field, then temperature.

        Every call is attempted even if an earlier one fails, once (no retries), and each is
        bounded by its instrument's VISA timeout even if the instrument no longer answers; an
        instrument that did not answer in time gets no further call. Failures are returned for
        the log.
        """
        problems: list[str] = []
        silent: set[str] = set()

        def attempt(what: str, instrument: Any, action: Callable[[], object]) -> None:
            if instrument.name in silent:
                problems.append(f"{what}: skipped, {instrument.name} did not answer")
                return
            if instrument.name in self._disconnected:
                # Its session was lost in a failed reconnect: one new one, or nothing works.
                self._disconnected.discard(instrument.name)
                attempt(f"reopen {instrument.name}", instrument, instrument.reconnect)
            self._bounded_call(what, instrument, action, problems, silent)

        source = self.instruments.source
        attempt("current to zero", source, lambda: source.set_current(0.0))
        attempt("output off", source, lambda: source.set_output(False))
        finish = self.protocol.finish
        magnet = self.instruments.field
        if finish.field == "zero" and magnet is not None:
            attempt("field to zero", magnet, lambda: magnet.set_target(0.0))
        cryostat = self.instruments.temperature
        if finish.temperature != "hold" and cryostat is not None:
            target = float(finish.temperature)
            attempt("temperature setpoint", cryostat, lambda: cryostat.set_setpoint(target))
        return problems

    def _bounded_call(self, what: str, instrument: Any, action: Callable[[], object],
                      problems: list[str], silent: set[str]) -> None:
        """`action()` in a helper thread, abandoned once the instrument's timeout has passed.

        A VISA write has no timeout of its own (a full send buffer blocks it) and a user's
        driver may block anywhere: the thread is what bounds the shutdown in time.
        """
        spec = self.rig.rig.instruments.get(instrument.name)
        bound_s = (spec.timeout if spec is not None else DEFAULT_TIMEOUT_S) + SHUTDOWN_GRACE_S
        failure: list[BaseException] = []

        def call() -> None:
            try:
                action()
            except Exception as error:  # the instrument may be gone; keep making the rest safe
                failure.append(error)

        worker = threading.Thread(target=call, name=f"shutdown: {what}", daemon=True)
        worker.start()
        worker.join(bound_s)
        if worker.is_alive():
            silent.add(instrument.name)
            problems.append(f"{what}: no answer from {instrument.name} within {bound_s:g} s")
        elif failure:
            problems.append(f"{what}: {failure[0]}")
