"""The safe state at the end of every run, whatever ended it: bounded in time, never retried."""

from __future__ import annotations

import threading
from collections.abc import Callable
from typing import Any

from acquire.instrument_set import Instruments
from acquire.protocol import Finish
from acquire.rig import Rig

# A shutdown call is bounded by its instrument's VISA timeout plus this much for the thread that
# makes it to start and report back.
SHUTDOWN_GRACE_S = 0.5
DEFAULT_TIMEOUT_S = 5.0  # an instrument the rig does not describe (acquire.rig's default)


def make_safe(
    instruments: Instruments, rig: Rig, finish: Finish, disconnected: set[str]
) -> list[str]:
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
        if instrument.name in disconnected:
            # Its session was lost in a failed reconnect: one new one, or nothing works.
            disconnected.discard(instrument.name)
            attempt(f"reopen {instrument.name}", instrument, instrument.reconnect)
        _bounded_call(rig, what, instrument, action, problems, silent)

    source = instruments.source
    attempt("current to zero", source, lambda: source.set_current(0.0))
    attempt("output off", source, lambda: source.set_output(False))
    magnet = instruments.field
    if finish.field == "zero" and magnet is not None:
        attempt("field to zero", magnet, lambda: magnet.set_target(0.0))
    cryostat = instruments.temperature
    if finish.temperature != "hold" and cryostat is not None:
        target = float(finish.temperature)
        attempt("temperature setpoint", cryostat, lambda: cryostat.set_setpoint(target))
    return problems


def _bounded_call(rig: Rig, what: str, instrument: Any, action: Callable[[], object],
                  problems: list[str], silent: set[str]) -> None:
    """`action()` in a helper thread, abandoned once the instrument's timeout has passed.

    A VISA write has no timeout of its own (a full send buffer blocks it) and a user's
    driver may block anywhere: the thread is what bounds the shutdown in time.
    """
    spec = rig.instruments.get(instrument.name)
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
