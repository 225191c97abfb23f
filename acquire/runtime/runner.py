"""The runner: the one place that touches instruments, sleeps, retries and decides on failure.

It moves the slow axes (with their waits), hands each point to the protocol's acquisition mode,
retries transient faults (acquire.runtime.fault_budget: per call, then the point again),
applies the protocol's on_problem policy, stores the points and, at the end, leaves every
instrument in its role's safe state and reads it back.
"""

from __future__ import annotations

import contextlib
import functools
import logging
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any, TypeVar

from acquire.inputs.load import LoadedProtocol, LoadedRig
from acquire.inputs.resistance_check import first_point_warning
from acquire.inputs.stack import StackGeometry
from acquire.modes.base import MeasureContext, PointProblem
from acquire.plan.schedule import Measure, Move, Point, Step, iterate_steps, plans_from
from acquire.runtime.clock import Clock
from acquire.runtime.fault_budget import (
    RETRY_BACKOFF_S,
    SILENT_FAILURES,
    SILENT_S,
    TRANSIENT_FAULTS,
    FaultBudget,
    InstrumentSilent,
    Retrying,
    TransactionFailed,
)
from acquire.runtime.instruments import Instruments
from acquire.runtime.motions import AxisMover
from acquire.runtime.safe_shutdown import SafeReport, make_safe
from acquire.runtime.waits import StabilityWait, WaitTimeout
from acquire.store.append_table import AppendTable
from drivers.errors import LimitError
from drivers.roles import movable_axes, role_named, role_of_axis

log = logging.getLogger("flipsweep")

__all__ = ["TRANSIENT_FAULTS", "InstrumentSilent", "PointOutcome", "Runner", "StopRun"]

Result = TypeVar("Result")


class StopRun(Exception):
    """The run cannot go on; the session performs the safe shutdown."""


@dataclass
class PointOutcome:
    point: Point
    result: Any  # the mode's reduced result, or None
    flags: str
    skipped: bool = False


class Runner:
    # Seconds to wait before a retry, by how many calls in a row the instrument has failed.
    retry_backoff_s: tuple[float, ...] = RETRY_BACKOFF_S
    silent_failures: int = SILENT_FAILURES  # an instrument failing this often in a row ...
    silent_s: float = SILENT_S  # ... or this long stays silent: the run stops

    def __init__(
        self,
        loaded: LoadedProtocol,
        rig: LoadedRig,
        instruments: Instruments,
        clock: Clock,
        tables: dict[str, AppendTable],
        on_point: Callable[[PointOutcome], None] = lambda outcome: None,
        heartbeat: Callable[[], None] = lambda: None,
        sync_interval_s: float = 0.0,
        activity: Callable[[str], None] = lambda text: None,
    ) -> None:
        self.protocol = loaded.protocol
        self.loaded = loaded
        self.mode = loaded.mode
        self.rig = rig
        self.instruments = instruments
        self.clock = clock
        self.tables = tables
        self.points = tables[self.mode.tables()[-1].file_name]
        self.on_point = on_point
        self.activity = activity
        self.budget = FaultBudget(
            retries=self.protocol.on_problem.retries, now=clock.now, recover=self._recover,
            backoff_s=self.retry_backoff_s, silent_failures=self.silent_failures,
            silent_s=self.silent_s,
        )
        instruments.attach(lambda guarded: Retrying(guarded, self.budget))
        self.waiter = StabilityWait(clock, heartbeat, activity)
        self.heartbeat = heartbeat  # status.json stays fresh inside a long point too
        self.density_per_ampere = StackGeometry.from_sample(
            self.protocol.sample
        ).carrier_density_per_ampere
        self.used_axes = frozenset(loop.axis for loop in self.protocol.loops)
        self.movers = {
            axis.name: AxisMover(axis, instruments, rig.rig, self.waiter, clock,
                                 getattr(self.protocol.waits, axis.name))
            for axis in movable_axes() if instruments.one(role_of_axis(axis.name))
        }
        self.measurement = self.mode.measurement(MeasureContext(
            protocol=self.protocol, instruments=instruments, clock=clock, tables=tables,
            readbacks=self._readbacks, heartbeat=heartbeat, used_axes=self.used_axes,
            faults=lambda: self.budget.faults,
        ))
        self.flags_pending: set[str] = set()
        # 0: fsync at every point (a real night). A dry run on the virtual clock measures
        # thousands of points a second; there it fsyncs at most every `sync_interval_s` of
        # wall time, and still flushes every point, so a crash or kill loses nothing.
        self.sync_interval_s = sync_interval_s
        self._last_sync = 0.0
        self._disconnected: set[str] = set()  # names whose reconnect failed

    # -- configuration ------------------------------------------------------------------
    def configure(self) -> None:
        # Configuring is idempotent, so a failed call repeats all of it.
        self.activity("configuring the instruments")
        self._repeat("configuration", self._configure_once)

    def _configure_once(self) -> None:
        for role in sorted({role_named(spec.role) for spec in self.rig.rig.instruments.values()},
                           key=lambda role: role.order):
            for name in self.rig.rig.of_role(role):
                role.configure(self.instruments.named(name), self.instruments.spec(name))
        for mover in self.movers.values():
            mover.prepare()
        for instrument in self.instruments.all():
            problems = instrument.errors()
            if problems:
                raise StopRun(f"{instrument.name} reported after configuration: {problems[0]}")
        self.measurement.start()

    # -- moves --------------------------------------------------------------------------
    def move(self, step: Move) -> None:
        self.movers[step.axis].move_to(step.value)

    def _readbacks(self) -> tuple[float | None, ...]:
        return tuple(mover.read() if (mover := self.movers.get(axis.name)) else None
                     for axis in movable_axes())

    # -- one point ----------------------------------------------------------------------
    def measure_with_policy(self, point: Point) -> PointOutcome:
        policy = self.protocol.on_problem
        attempt = 0
        flags: list[str] = sorted(self.flags_pending)
        self.flags_pending.clear()
        budget = self.budget
        budget.context = f"point {point.number}"
        faults_before = budget.faults
        measured_again = 0

        def outcome(result: Any, skipped: bool = False) -> PointOutcome:
            marks = {*flags, "retry"} if budget.faults != faults_before else set(flags)
            return PointOutcome(point, result, "|".join(sorted(marks)), skipped=skipped)

        while True:
            try:
                raw = self.measurement.measure(point, attempt, "|".join(flags))
                self.measurement.check()
            except LimitError as error:
                raise StopRun(f"point {point.number}: {error}") from error
            except TransactionFailed as failed:
                measured_again += 1
                if measured_again > policy.retries:
                    raise StopRun(str(failed)) from failed
                log.warning("%s; measuring point %d again (attempt %d)", failed, point.number,
                            attempt + 1)
                self._rest()
                self._recover(budget.backoff_for(failed.instrument), [failed.instrument])
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
                    self.tables[self.mode.tables()[0].file_name].commit()
                    return outcome(None, skipped=True)
                if action == "retry" and attempt < policy.retries:
                    attempt += 1
                    flags = sorted({*flags, "retry"})
                    continue
                # "flag", or retries used up: keep the data, flagged.
                self._clear_errors()
                return outcome(self.mode.reduce_point(self.protocol, point, raw))
            return outcome(self.mode.reduce_point(self.protocol, point, raw))

    # -- transient faults ---------------------------------------------------------------
    def identities(self, opened: dict[str, Any]) -> dict[str, str]:
        """Each opened instrument's *IDN? reply, for run.json (the run's first queries)."""
        return {
            name: self._repeat(f"identify {name}", self.instruments.named(name).identify)
            for name in opened
        }

    def _repeat(self, what: str, action: Callable[[], Result]) -> Result:
        """`action()`, done again when one of its calls fails through its retry budget (up to
        the protocol's retries); a fault on the way flags the next point."""
        budget = self.budget
        budget.context = what
        faults_before = budget.faults
        repeats = 0
        while True:
            try:
                result = action()
            except LimitError as error:
                raise StopRun(f"{what}: {error}") from error
            except TransactionFailed as failed:
                repeats += 1
                if repeats > self.protocol.on_problem.retries:
                    raise StopRun(str(failed)) from failed
                log.warning("%s; doing it again (%d of %d)", failed, repeats,
                            self.protocol.on_problem.retries)
                self._recover(budget.backoff_for(failed.instrument), [failed.instrument])
                continue
            finally:
                if budget.faults != faults_before:
                    self.flags_pending.add("retry")
            return result

    def _recover(self, backoff_s: float, names: list[str]) -> None:
        """Wait, then open a fresh session to each named instrument."""
        self.waiter.heartbeat()
        self.clock.sleep(backoff_s)
        for name in names:
            instrument = self.instruments.by_name[name]
            try:
                # A fresh session also drops a late reply still on its way to the old one,
                # which the next query would otherwise read as its own answer.
                instrument.reconnect()
                self._disconnected.discard(name)
            except Exception as error:  # a VISA library may raise anything for a dead address
                self._disconnected.add(name)
                log.warning("reconnect of %s failed: %s", name, error)

    def _rest(self) -> None:
        """The excitation at rest while waiting to measure again (best effort)."""
        with contextlib.suppress(TransactionFailed, *TRANSIENT_FAULTS):
            self.measurement.rest()

    def _clear_errors(self) -> None:
        for instrument in self.instruments.by_name.values():  # best effort, never retried
            with contextlib.suppress(*TRANSIENT_FAULTS):
                instrument.errors()

    def point_rows(self, outcome: PointOutcome) -> list[tuple[object, ...]]:
        if outcome.result is None:
            return []
        return self.mode.point_rows(self.protocol, outcome.point, outcome.result,
                                    outcome.flags, self.density_per_ampere)

    # -- the night ----------------------------------------------------------------------
    def steps(self, start_point: int) -> Iterator[Step]:
        plans = plans_from(self.protocol, self.loaded.loop_values)
        return iterate_steps(plans, self.mode.name, start_point)

    def run(self, start_point: int = 0) -> None:
        pending_skip = False
        for step in self.steps(start_point):
            if isinstance(step, Move):
                try:
                    self._repeat(f"move {step.axis} to {step.value:g}",
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
                self.activity(f"measuring point {step.point.number}")
                outcome = self.measure_with_policy(step.point)
            self.points.extend(self.point_rows(outcome))
            if outcome.result is not None:
                self.measurement.stored(step.point, outcome.result)
            self._commit_point()
            self.on_point(outcome)
            if note := first_point_warning(self.loaded, self.rig, step.point.number,
                                           outcome.result):
                log.warning(note)

    def _commit_point(self) -> None:
        now = time.monotonic()
        durable = now - self._last_sync >= self.sync_interval_s
        if durable:
            self._last_sync = now
        for table in self.tables.values():
            table.commit(durable)

    def shutdown(self) -> SafeReport:
        """The safe state, read back (see acquire.runtime.safe_shutdown)."""
        return make_safe(self.instruments, self.protocol.finish, self._disconnected)
