"""Ctrl-C and SIGTERM: handled by one function while a block runs, then the old handlers back.

For a run, `StopSignals` acts on the first stop signal only: it raises `Interrupted` where the
main thread is, so the run stops and the safe shutdown begins. Every later signal -- a second
Ctrl-C, a SIGTERM from a supervisor that lost patience -- is noted and not acted on, so nothing
can cut the safe shutdown short; the handlers stay installed until the run's closing line is
printed.
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


class Interrupted(KeyboardInterrupt):
    """SIGINT or SIGTERM: stop, make safe, exit 130. A KeyboardInterrupt, so that code which
    catches Exception (a driver, a library) does not swallow it."""


@contextmanager
def on_stop_signals(handler: Callable[[int, object], None]) -> Iterator[None]:
    previous = {sig: signal.signal(sig, handler) for sig in STOP_SIGNALS}
    try:
        yield
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)


class StopSignals:
    """The stop signals of one run: the first interrupts it (once), the rest are noted."""

    # The command line sets this: once a run is over the process only exits, and a signal
    # that arrives in those last milliseconds must not turn exit 130 into death by SIGTERM.
    # Called as a library (a notebook, the tests) the previous handlers come back instead.
    ignore_after_run = False

    def __init__(self) -> None:
        self.received: list[str] = []  # every stop signal, in order of arrival
        self.acted_on = 0  # how many of them raised Interrupted (0 or 1)
        self._armed = True

    def handle(self, signum: int, frame: object) -> None:
        self.received.append(signal.Signals(signum).name)
        if self._armed:
            # Disarmed before raising: a second signal, however soon, cannot raise again.
            self._armed = False
            self.acted_on = 1
            raise Interrupted(signal.Signals(signum).name)

    def hold(self) -> None:
        """From now on (the safe shutdown) signals are only noted."""
        self._armed = False

    def rearm(self) -> None:
        """For the next run of a night plan: armed again, unless a signal has come already
        (then the plan stops instead)."""
        if not self.received:
            self._armed = True

    @property
    def noted_only(self) -> list[str]:
        """The signals that arrived while they were only noted (during the safe shutdown)."""
        return self.received[self.acted_on:]

    def note(self) -> str:
        """A clause for the log and the history: '' when nothing was noted only."""
        later = self.noted_only
        if not later:
            return ""
        kinds = ", ".join(sorted(set(later)))
        count = len(later)
        return (f"{count} {'further ' if self.acted_on else ''}stop signal"
                f"{'s' if count != 1 else ''} ({kinds}) during the safe shutdown, noted and "
                "not acted on")

    @contextmanager
    def installed(self) -> Iterator[StopSignals]:
        if threading.current_thread() is not threading.main_thread():
            # Python delivers signals to the main thread only (a run started from a
            # notebook's worker thread): the main thread's own handling stays.
            yield self
            return
        try:
            with on_stop_signals(self.handle):
                yield self
        finally:
            if self.ignore_after_run:
                for sig in STOP_SIGNALS:
                    signal.signal(sig, signal.SIG_IGN)
