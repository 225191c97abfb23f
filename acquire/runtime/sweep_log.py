"""One log line per pass of the innermost loop: what the person reading run.log scans."""

from __future__ import annotations

import logging
from collections.abc import Callable
from typing import Any

from acquire.modes.base import PointSummary
from acquire.runtime.runner import PointOutcome

log = logging.getLogger("flipsweep")


class SweepLog:
    def __init__(self, summary: Callable[[Any], PointSummary]) -> None:
        self.summary = summary  # the mode's one-line summary of a reduced point
        self.sweep: int | None = None
        self.rows: list[tuple[float, float]] = []
        self.first_point = 0

    def add(self, outcome: PointOutcome) -> None:
        if self.sweep is not None and outcome.point.sweep != self.sweep:
            self.flush()
        if self.sweep != outcome.point.sweep:
            self.sweep, self.first_point = outcome.point.sweep, outcome.point.number
        if outcome.result is not None:
            shown = self.summary(outcome.result)
            self.rows.append((shown.resistance_ohm, shown.unidirectional_ratio))

    def flush(self) -> None:
        if self.sweep is None:
            return
        if self.rows:
            resistances = [r for r, _ in self.rows]
            ratios = [u * 1e6 for _, u in self.rows if u == u] or [float("nan")]  # NaN: none
            count = len(self.rows)
            log.info(
                "sweep %d (from point %d): %d point%s, R %.6g..%.6g ohm, "
                "unidirectional %+.2f..%+.2f ppm", self.sweep, self.first_point, count,
                "" if count == 1 else "s", min(resistances), max(resistances), min(ratios),
                max(ratios),
            )
        else:
            log.info("sweep %d (from point %d): no point measured", self.sweep, self.first_point)
        self.rows = []
