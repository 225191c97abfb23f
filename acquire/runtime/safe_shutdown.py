"""The safe state at the end of every run, whatever ended it: bounded in time, then read back.

Every role's safe-state calls are made once, the current source first; then each instrument
whose role can read its state back (the current source: its level and its output relay) is
asked. An instrument whose read-back does not show the safe state, or could not be read, gets
its safe-state calls and the read-back again, up to SAFE_ROUNDS in all, unless it stopped
answering (then nothing more is sent to it). The report says what was verified and exactly
what was not: the run never claims a safe state it has not read back.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from acquire.runtime.instruments import Instruments
from drivers.roles import role_named
from drivers.roles.base import SafeReading

# A shutdown call is bounded by its instrument's VISA timeout plus this much for the thread that
# makes it to start and report back.
SHUTDOWN_GRACE_S = 0.5
# Rounds of safe-state calls and read-back for an instrument whose read-back fails: a reply
# lost to a transient fault should not leave a night's run reported unsafe (common practice:
# a few bounded attempts, never an unbounded loop).
SAFE_ROUNDS = 3


@dataclass
class SafeReport:
    """What the safe shutdown did and found."""

    problems: list[str] = field(default_factory=list)  # calls that failed (for the log)
    verified: list[str] = field(default_factory=list)  # "source: current 0 mA, output off"
    unverified: list[str] = field(default_factory=list)  # "source: output on" -> exit 1
    not_read: list[str] = field(default_factory=list)  # "source: output state (no query)"
    commanded: list[str] = field(default_factory=list)  # roles with no read-back, calls made
    opened: bool = True  # False: the run never opened its instruments (nothing was sent)

    @property
    def ok(self) -> bool:
        return not self.unverified

    def summary(self) -> str:
        """One clause for the closing line."""
        if not self.opened:
            return "no instrument was opened, so nothing was sent"
        if not self.ok:
            return "safe state NOT verified: " + "; ".join(self.unverified)
        text = "safe state verified"
        if self.verified:
            text += f" ({'; '.join(self.verified)})"
        if self.not_read:
            text += "; not read back: " + "; ".join(self.not_read)
        return text


class _Shutdown:
    def __init__(self, instruments: Instruments, finish: Any, disconnected: set[str]) -> None:
        self.instruments = instruments
        self.finish = finish.model_dump()
        self.disconnected = disconnected
        self.silent: set[str] = set()
        self.report = SafeReport()
        self.last_error: dict[str, str] = {}  # instrument -> what its last failed call said

    def call(self, what: str, driver: Any, timeout_s: float, action: Callable[[], object]
             ) -> tuple[bool, object]:
        """(answered without error, result) of one bounded call."""
        if driver.name in self.silent:
            self.report.problems.append(f"{what}: skipped, {driver.name} did not answer")
            return False, None
        if driver.name in self.disconnected:
            # Its session was lost in a failed reconnect: one new one, or nothing works.
            self.disconnected.discard(driver.name)
            self.call(f"reopen {driver.name}", driver, timeout_s, driver.reconnect)
        ok, result, error = _bounded_call(what, driver.name, timeout_s, action, self.silent)
        if error:
            self.report.problems.append(f"{what}: {error}")
            self.last_error[driver.name] = error
        return ok, result

    def command(self, name: str, driver: Any) -> bool:
        spec = self.instruments.spec(name)
        answered = True
        for what, action in role_named(spec.role).safe_state(driver, self.finish):
            answered = self.call(what, driver, spec.timeout, action)[0] and answered
        return answered

    def read_back(self, name: str, driver: Any) -> tuple[list[str], list[str], list[str]]:
        """(verified, not safe or unreadable, not readable by design) for one instrument."""
        spec = self.instruments.spec(name)
        good, bad, absent = [], [], []
        for what, read in role_named(spec.role).verify_safe(driver, self.finish):
            answered, reading = self.call(f"read back: {what}", driver, spec.timeout, read)
            if not answered or not isinstance(reading, SafeReading):
                bad.append(f"{what} not read back ({self._last_problem(name)})")
            elif reading.safe is None:
                absent.append(f"{what} ({reading.found})")
            elif reading.safe:
                good.append(reading.found)
            else:
                bad.append(reading.found)
        return good, bad, absent

    def _last_problem(self, name: str) -> str:
        if name in self.silent:
            return f"{name} does not answer"
        return self.last_error.get(name, "no reading")

    def run(self) -> SafeReport:
        instruments = self.instruments
        ranked = sorted(instruments.by_name.items(),
                        key=lambda item: role_named(instruments.spec(item[0]).role).shutdown_rank)
        for name, driver in ranked:
            answered = self.command(name, driver)
            role = role_named(instruments.spec(name).role)
            if not role.verify_safe(driver, self.finish):
                # Commanded only: a call that failed leaves the state unknown.
                if answered:
                    self.report.commanded.append(name)
                else:
                    self.report.unverified.append(f"{name}: safe-state calls failed "
                                                  f"({self._last_problem(name)})")
                continue
            unanswered_rounds = 0
            for round_number in range(1, SAFE_ROUNDS + 1):
                good, bad, absent = self.read_back(name, driver)
                # Two rounds without a single answer: a hung instrument, not a lost reply.
                unanswered_rounds = unanswered_rounds + 1 if not (good or absent) else 0
                if (not bad or name in self.silent or round_number == SAFE_ROUNDS
                        or unanswered_rounds >= 2):
                    break
                self.command(name, driver)  # once more, then read back again
            if bad:
                self.report.unverified.append(f"{name}: {', '.join(bad)}")
            else:
                if good:
                    self.report.verified.append(f"{name}: {', '.join(good)}")
                self.report.not_read.extend(f"{name}: {text}" for text in absent)
        return self.report


def make_safe(instruments: Instruments, finish: Any, disconnected: set[str]) -> SafeReport:
    """Every role's safe state, the current source first (current to zero, output off), then
    the others by their rank (field, then temperature), as the protocol's `finish` says; then
    the read-back.

    Every call is attempted even if an earlier one fails, and each is bounded by its
    instrument's VISA timeout even if the instrument no longer answers; an instrument that did
    not answer in time gets no further call. Failures are in the report's `problems`.
    """
    return _Shutdown(instruments, finish, disconnected).run()


def _bounded_call(what: str, name: str, timeout_s: float, action: Callable[[], object],
                  silent: set[str]) -> tuple[bool, object, str]:
    """`action()` in a helper thread, abandoned once the instrument's timeout has passed.

    A VISA write has no timeout of its own (a full send buffer blocks it) and a user's
    driver may block anywhere: the thread is what bounds the shutdown in time. Returns
    (answered without error, its result, what went wrong or "").
    """
    bound_s = timeout_s + SHUTDOWN_GRACE_S
    failure: list[BaseException] = []
    result: list[object] = []

    def call() -> None:
        try:
            result.append(action())
        except Exception as error:  # the instrument may be gone; keep making the rest safe
            failure.append(error)

    worker = threading.Thread(target=call, name=f"shutdown: {what}", daemon=True)
    worker.start()
    worker.join(bound_s)
    if worker.is_alive():
        silent.add(name)
        return False, None, f"no answer from {name} within {bound_s:g} s"
    if failure:
        return False, None, str(failure[0])
    return True, result[0] if result else None, ""
