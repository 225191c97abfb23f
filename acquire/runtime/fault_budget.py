"""How many transient faults a run lives through: a budget per transaction, and a limit per
instrument for one that stays silent.

A transaction is one driver call (a reading, a readback, a setting, an error-queue check). A
call hit by a transient fault (timeout, I/O error, unreadable reply) is made again after a
backoff and a reconnect of that instrument, up to the protocol's `on_problem.retries` times;
its budget starts afresh with the next call. A call that uses up its budget raises
TransactionFailed, and the runner measures the point (or repeats the move) again.

Separately, an instrument that keeps failing -- SILENT_FAILURES calls in a row, or failing for
SILENT_S of run clock since it last answered -- stays silent: InstrumentSilent stops the run,
and the safe shutdown follows. Scattered faults over a night never add up to a stop; a dead
instrument stops the run within a bounded time.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from drivers.errors import CommunicationError, InstrumentError, LimitError

log = logging.getLogger("flipsweep")

# What a run survives by waiting, reconnecting and doing the call again: a VISA timeout or I/O
# error, and an unreadable reply (line noise reaches the drivers as InstrumentError). A value
# refused for a limit is never a transient fault: it stops the run at once.
TRANSIENT_FAULTS = (CommunicationError, InstrumentError)
# Backoff before retry k of an instrument's current run of failures (the last entry repeats).
RETRY_BACKOFF_S = (1.0, 4.0, 15.0)
# An instrument is silent after this many failed calls in a row: at a 5 % fault rate six in a
# row happen once in 6e7 calls, while a dead instrument gets there in about a minute.
SILENT_FAILURES = 6
SILENT_S = 600.0  # ... or after failing for this long (run clock) since it last answered


class TransactionFailed(Exception):
    """One call failed through its whole retry budget; the point is measured again."""

    def __init__(self, instrument: str, message: str) -> None:
        self.instrument = instrument
        super().__init__(message)


class InstrumentSilent(Exception):
    """An instrument stopped answering; the run stops (the safe shutdown follows)."""


@dataclass
class FaultBudget:
    retries: int  # the protocol's on_problem.retries: retries per transaction
    now: Callable[[], float]  # the run clock
    # (seconds to wait, names to reconnect): the runner's backoff and reconnect
    recover: Callable[[float, list[str]], None]
    backoff_s: tuple[float, ...] = RETRY_BACKOFF_S
    silent_failures: int = SILENT_FAILURES
    silent_s: float = SILENT_S
    context: str = "start"  # what the run is doing, for the log ("point 12", "move field ...")
    faults: int = 0  # transient faults met so far (a change flags the point being measured)
    _streak: dict[str, int] = field(default_factory=dict)  # failed calls in a row
    _failing_since: dict[str, float] = field(default_factory=dict)

    def succeeded(self, name: str) -> None:
        """`name` answered a query: its run of failures is over."""
        if name in self._streak:
            del self._streak[name]
            del self._failing_since[name]

    def backoff_for(self, name: str) -> float:
        """The wait before the next call to `name`, longer the more it has failed in a row."""
        streak = max(self._streak.get(name, 1), 1)
        return self.backoff_s[min(streak, len(self.backoff_s)) - 1]

    def failed(self, name: str, call: str, error: Exception, attempt: int) -> None:
        """After failure number `attempt` of one call: back off and reconnect for the next
        attempt, or raise TransactionFailed / InstrumentSilent."""
        if isinstance(error, LimitError):
            raise error
        self.faults += 1
        streak = self._streak.get(name, 0) + 1
        self._streak[name] = streak
        since = self._failing_since.setdefault(name, self.now())
        silent_for = self.now() - since
        if streak >= self.silent_failures or silent_for >= self.silent_s:
            raise InstrumentSilent(
                f"{self.context}: {error}; {name} stays silent ({streak} failed calls in a "
                f"row over {silent_for:.3g} s)") from error
        if attempt > self.retries:
            raise TransactionFailed(
                name, f"{self.context}: {error}; {call} still failing after "
                f"{self.retries} {'retry' if self.retries == 1 else 'retries'} with reconnect"
            ) from error
        backoff = self.backoff_for(name)
        log.warning("%s: %s; retry %d of %d in %g s after reconnecting %s", self.context, error,
                    attempt, self.retries, backoff, name)
        self.recover(backoff, [name])


class Retrying:
    """A guarded driver whose every call goes through the fault budget (the run's view of an
    instrument; the safe shutdown uses the guarded driver itself and never retries)."""

    # Calls the recovery itself makes, or that must not be repeated.
    DIRECT = frozenset({"reconnect", "close"})

    def __init__(self, guarded: Any, budget: FaultBudget) -> None:
        self._guarded = guarded
        self._budget = budget
        self.name: str = guarded.name

    @property
    def driver(self) -> Any:
        return self._guarded.driver

    @property
    def guarded(self) -> Any:
        return self._guarded

    def __getattr__(self, attribute: str) -> Any:
        found = getattr(self._guarded, attribute)
        if not callable(found) or attribute in self.DIRECT:
            return found
        method = self._retried(found, attribute)
        setattr(self, attribute, method)  # looked up once: this runs for every reading
        return method

    def _retried(self, method: Callable[..., Any], attribute: str) -> Callable[..., Any]:
        budget, name = self._budget, self.name
        label = f"{name}.{attribute}"

        def call(*args: Any, **options: Any) -> Any:
            attempt = 0
            while True:
                try:
                    result = method(*args, **options)
                except TRANSIENT_FAULTS as error:
                    attempt += 1
                    budget.failed(name, label, error, attempt)
                    continue
                if result is not None:
                    # Only an answer shows the instrument is alive: a command is written
                    # even to an instrument that has hung.
                    budget.succeeded(name)
                return result

        return call
