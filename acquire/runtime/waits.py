"""Bringing a slow axis to its setpoint and waiting until it is there (runner-side: it sleeps)."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from acquire.plan.timing import POLL_INTERVAL_S
from acquire.runtime.clock import Clock


class WaitTimeout(Exception):
    def __init__(self, axis: str, target: float, last: float, timeout_s: float) -> None:
        self.axis = axis
        super().__init__(
            f"{axis} did not settle at {target:g} within {timeout_s:g} s (last read {last:g})"
        )


def plain(value: float) -> str:
    return f"{value:.4g}"


@dataclass
class StabilityWait:
    """Wait until |readback - target| <= tolerance has held for `hold_s`, or time out.

    While it waits it says what it is doing (`activity`): "ramping field 0.31 -> 0.5 T" while
    the readback is outside the tolerance, "waiting for temperature 45/120 s stable" inside it.
    """

    clock: Clock
    heartbeat: Callable[[], None]
    activity: Callable[[str], None] = lambda text: None

    def until_stable(
        self,
        axis: str,
        read: Callable[[], float],
        target: float,
        tolerance: float,
        hold_s: float,
        timeout_s: float,
        shown: Callable[[float], str] = plain,
        unit: str = "",
    ) -> float:
        started = self.clock.now()
        inside_since: float | None = None
        while True:
            value = read()
            now = self.clock.now()
            if abs(value - target) <= tolerance:
                inside_since = now if inside_since is None else inside_since
                if now - inside_since >= hold_s:
                    return value
                self.activity(f"waiting for {axis} {now - inside_since:.0f}/{hold_s:.0f} s "
                              "stable")
            else:
                inside_since = None
                self.activity(f"ramping {axis} {shown(value)} -> {shown(target)} {unit}".rstrip())
            if now - started > timeout_s:
                raise WaitTimeout(axis, target, value, timeout_s)
            self.heartbeat()
            remaining_hold = hold_s - (now - inside_since) if inside_since is not None else None
            pause = POLL_INTERVAL_S if remaining_hold is None else min(POLL_INTERVAL_S,
                                                                       max(remaining_hold, 0.0))
            self.clock.sleep(max(pause, 1e-3))

    def until_false(
        self, axis: str, busy: Callable[[], bool], timeout_s: float, target: float,
        shown: Callable[[float], str] = plain, unit: str = "",
    ) -> None:
        self.activity(f"moving {axis} to {shown(target)} {unit}".rstrip())
        started = self.clock.now()
        while busy():
            if self.clock.now() - started > timeout_s:
                raise WaitTimeout(axis, target, float("nan"), timeout_s)
            self.heartbeat()
            self.clock.sleep(POLL_INTERVAL_S / 5)
