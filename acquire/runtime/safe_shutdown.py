"""The safe state at the end of every run, whatever ended it: bounded in time, never retried."""

from __future__ import annotations

import threading
from collections.abc import Callable
from typing import Any

from acquire.runtime.instruments import Instruments
from drivers.roles import role_named

# A shutdown call is bounded by its instrument's VISA timeout plus this much for the thread that
# makes it to start and report back.
SHUTDOWN_GRACE_S = 0.5


def make_safe(instruments: Instruments, finish: Any, disconnected: set[str]) -> list[str]:
    """Every role's safe state, the current source first (current to zero, output off), then
    the others by their rank (field, then temperature), as the protocol's `finish` says.

    Every call is attempted even if an earlier one fails, once (no retries), and each is
    bounded by its instrument's VISA timeout even if the instrument no longer answers; an
    instrument that did not answer in time gets no further call. Failures are returned for
    the log.
    """
    problems: list[str] = []
    silent: set[str] = set()
    finish_settings = finish.model_dump()

    def attempt(what: str, instrument: Any, timeout_s: float,
                action: Callable[[], object]) -> None:
        if instrument.name in silent:
            problems.append(f"{what}: skipped, {instrument.name} did not answer")
            return
        if instrument.name in disconnected:
            # Its session was lost in a failed reconnect: one new one, or nothing works.
            disconnected.discard(instrument.name)
            attempt(f"reopen {instrument.name}", instrument, timeout_s, instrument.reconnect)
        _bounded_call(what, instrument.name, timeout_s, action, problems, silent)

    ranked = sorted(instruments.by_name.items(),
                    key=lambda item: role_named(instruments.spec(item[0]).role).shutdown_rank)
    for name, driver in ranked:
        spec = instruments.spec(name)
        for what, action in role_named(spec.role).safe_state(driver, finish_settings):
            attempt(what, driver, spec.timeout, action)
    return problems


def _bounded_call(what: str, name: str, timeout_s: float, action: Callable[[], object],
                  problems: list[str], silent: set[str]) -> None:
    """`action()` in a helper thread, abandoned once the instrument's timeout has passed.

    A VISA write has no timeout of its own (a full send buffer blocks it) and a user's
    driver may block anywhere: the thread is what bounds the shutdown in time.
    """
    bound_s = timeout_s + SHUTDOWN_GRACE_S
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
        silent.add(name)
        problems.append(f"{what}: no answer from {name} within {bound_s:g} s")
    elif failure:
        problems.append(f"{what}: {failure[0]}")
