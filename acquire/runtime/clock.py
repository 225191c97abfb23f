"""Time, owned by the runner: real for a real night, virtual for a dry run.

On the virtual clock no real time passes: waiting and instrument work advance a counter, so a
night's protocol rehearses in seconds. Simulated instruments read the same clock, so field ramps,
temperature approach and rotations take their simulated time.
"""

from __future__ import annotations

import time
from datetime import datetime, timedelta, timezone
from typing import Protocol


class Clock(Protocol):
    def now(self) -> float:
        """Seconds since the clock started."""

    def sleep(self, seconds: float) -> None:
        """Let `seconds` pass (the runner waits; a simulated instrument works)."""

    def utc(self) -> datetime:
        """Wall-clock time for timestamps."""


class RealClock:
    def __init__(self, offset_s: float = 0.0) -> None:
        # A resumed run continues its run clock where the interrupted one stopped.
        self._start = time.monotonic() - offset_s
        self._start_utc = datetime.now(timezone.utc)

    def now(self) -> float:
        return time.monotonic() - self._start

    def sleep(self, seconds: float) -> None:
        if seconds > 0:
            time.sleep(seconds)

    def utc(self) -> datetime:
        return datetime.now(timezone.utc)


class VirtualClock:
    def __init__(self, start_utc: datetime | None = None) -> None:
        self._now = 0.0
        self._start_utc = start_utc or datetime.now(timezone.utc)

    def now(self) -> float:
        return self._now

    def sleep(self, seconds: float) -> None:
        if seconds > 0:
            self._now += seconds

    def utc(self) -> datetime:
        return self._start_utc + timedelta(seconds=self._now)
