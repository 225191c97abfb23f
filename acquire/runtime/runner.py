"""The runner: the one place that touches instruments, sleeps, retries and decides on failure.

It moves the slow axes (with their waits), hands each point to the protocol's acquisition mode,
retries transient faults, applies the protocol's on_problem policy, stores the points and, at
the end, leaves every instrument in its role's safe state.
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
from acquire.runtime.instruments import Instruments
from acquire.runtime.motions import AxisMover
from acquire.runtime.safe_shutdown import make_safe
from acquire.runtime.waits import StabilityWait, WaitTimeout
from acquire.store.append_table import AppendTable
from drivers.errors import CommunicationError, InstrumentError, LimitError
from drivers.roles import movable_axes, role_named, role_of_axis

log = logging.getLogger("flipsweep")

RETRY_BACKOFF_S = (1.0, 4.0, 15.0)  # transient faults: wait, reconnect, measure again
# What a run survives by waiting, reconnecting and doing the step again: a VISA timeout or I/O
# error, and an unreadable reply (line noise reaches the drivers as InstrumentError). A fault
# that persists through every backoff stops the run. A value refused for a limit is never a
# transient fault: it stops the run at once.
TRANSIENT_FAULTS = (CommunicationError, InstrumentError)

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
    # Seconds to wait before each retry of a step hit by a transient fault; one retry per entry.
    retry_backoff_s: tuple[float, ...] = RETRY_BACKOFF_S

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
        self.waiter = StabilityWait(clock, heartbeat)
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
        # Configuring is idempotent, so a transient fault repeats all of it.
        self._with_retries("configuration", self._configure_once)

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
        transient_failures = 0
        while True:
            try:
                raw = self.measurement.measure(point, attempt, "|".join(flags))
                self.measurement.check()
            except LimitError as error:
                raise StopRun(f"point {point.number}: {error}") from error
            except TRANSIENT_FAULTS as error:
                transient_failures += 1
                self._rest()
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
                    self.tables[self.mode.tables()[0].file_name].commit()
                    return PointOutcome(point, None, "|".join(flags), skipped=True)
                if action == "retry" and attempt < policy.retries:
                    attempt += 1
                    flags = sorted({*flags, "retry"})
                    continue
                # "flag", or retries used up: keep the data, flagged.
                self._clear_errors()
                result = self.mode.reduce_point(self.protocol, point, raw)
                return PointOutcome(point, result, "|".join(flags))
            result = self.mode.reduce_point(self.protocol, point, raw)
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
            except LimitError as error:
                raise StopRun(f"{what}: {error}") from error
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

    def _rest(self) -> None:
        """The excitation at rest while waiting to retry (best effort, no retry)."""
        with contextlib.suppress(*TRANSIENT_FAULTS):
            self.measurement.rest()

    def _clear_errors(self) -> None:
        for instrument in self.instruments.all():
            with contextlib.suppress(InstrumentError, CommunicationError):
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

    def shutdown(self) -> list[str]:
        """The safe state (see acquire.runtime.safe_shutdown); failures are returned for the log."""
        return make_safe(self.instruments, self.protocol.finish, self._disconnected)
