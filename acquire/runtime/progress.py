"""Progress for the person watching: a bar with what the run is doing now and one ETA (from the
estimate until the measured pace is known), and status.json."""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Any

from tqdm import tqdm

from acquire.modes.base import PointSummary
from acquire.runtime.runner import PointOutcome
from acquire.store.run_folder import RunFolder

HEARTBEAT_S = 10.0
ACTIVITY_REFRESH_S = 0.5  # wall seconds between redraws of the bar for a new activity line
# tqdm's own remaining-time guess is left out: it knows nothing of the estimate, and two ETAs
# that disagree help nobody. Ours is in the postfix.
BAR_FORMAT = "{desc}: {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} pt{postfix}"


@dataclass
class Progress:
    folder: RunFolder
    total_points: int
    estimated_s: float
    clock_now: Any  # callable returning run-clock seconds
    show_bar: bool = True
    done: int = 0
    started_clock_s: float = 0.0
    last_status_wall: float = 0.0
    last_point: dict[str, Any] = field(default_factory=dict)
    state: str = "running"
    min_status_interval_s: float = 0.0  # > 0 on the virtual clock, where points fly by
    summary: Any = None  # the mode's summary of a reduced point (result -> PointSummary)
    extra_status: dict[str, Any] = field(default_factory=dict)  # e.g. the inputs' SHA-256
    current_activity: str = "starting"
    _bar: Any = None
    _done_at_start: int = 0
    _shown_activity_at: float = 0.0

    def start(self, already_done: int) -> None:
        self.done = already_done
        self.started_clock_s = self.clock_now()
        self._done_at_start = already_done
        if self.show_bar:
            self._bar = tqdm(total=self.total_points, initial=already_done, unit="pt",
                             dynamic_ncols=True, leave=True, bar_format=BAR_FORMAT,
                             desc=self.current_activity)
            self._bar.set_postfix_str(f"ETA {format_eta(self.eta_s())} (estimate)",
                                      refresh=True)
        self.write_status()

    def activity(self, text: str) -> None:
        """What the run is doing now ("ramping field 0.31 -> 0.5 T"): on the bar and in
        status.json."""
        kind_changed = text.split(" ", 1)[0] != self.current_activity.split(" ", 1)[0]
        self.current_activity = text
        # A new kind of work shows at once; a wait's counting, at most every
        # ACTIVITY_REFRESH_S of wall time.
        if self._bar is not None and (kind_changed or time.monotonic() - self._shown_activity_at
                                      >= ACTIVITY_REFRESH_S):
            self._shown_activity_at = time.monotonic()
            self._bar.set_description_str(text, refresh=True)

    @property
    def pace_known(self) -> bool:
        return self.done > self._done_at_start

    def eta_s(self) -> float:
        """Start from the estimate; scale by the measured pace once points are done."""
        remaining = self.total_points - self.done
        per_point_estimate = self.estimated_s / max(self.total_points, 1)
        measured_points = self.done - self._done_at_start
        if measured_points <= 0:
            return remaining * per_point_estimate
        pace = (self.clock_now() - self.started_clock_s) / measured_points
        return remaining * pace

    def point_done(self, outcome: PointOutcome) -> None:
        self.done = outcome.point.number + 1
        shown: PointSummary | None = (
            self.summary(outcome.result) if outcome.result is not None and self.summary
            else None
        )
        if shown is not None:
            self.last_point = {
                "point": outcome.point.number,
                "current_A": outcome.point.current_A,
                "resistance_ohm": shown.resistance_ohm,
                "unidirectional_ratio_ppm": _finite_or_none(shown.unidirectional_ratio * 1e6),
                "unidirectional_ratio_err_ppm":
                    _finite_or_none(shown.unidirectional_ratio_err * 1e6),
                "dof": shown.dof,
                "flags": outcome.flags,
            }
        if self._bar is not None:
            self._bar.n = self.done
            if shown is not None:
                self._bar.set_postfix_str(
                    f"R={shown.resistance_ohm:.5g} ohm, uni={unidirectional_text(shown)}, "
                    f"ETA {format_eta(self.eta_s())}", refresh=False,
                )
            self._bar.set_description_str(self.current_activity, refresh=False)
            self._bar.refresh()
        if time.monotonic() - self.last_status_wall >= self.min_status_interval_s:
            self.write_status()

    def heartbeat(self) -> None:
        if time.monotonic() - self.last_status_wall >= HEARTBEAT_S:
            self.write_status()

    def write_status(self) -> None:
        self.last_status_wall = time.monotonic()
        self.folder.write_status({
            "state": self.state,
            "points_done": self.done,
            "points_total": self.total_points,
            "eta_s": round(self.eta_s(), 1) if self.state == "running" else 0.0,
            "eta_from": "measured pace" if self.pace_known else "estimate",
            "activity": self.current_activity if self.state == "running" else self.state,
            "run_clock_s": round(self.clock_now(), 3),
            "last_point": self.last_point,
            **self.extra_status,
        })

    def close(self, state: str, extra: dict[str, Any] | None = None) -> None:
        self.state = state
        self.extra_status.update(extra or {})
        if self._bar is not None:
            self._bar.set_description_str(state, refresh=False)
            self._bar.close()
        self.write_status()


def format_eta(seconds: float) -> str:
    minutes, secs = divmod(int(seconds), 60)
    hours, minutes = divmod(minutes, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}"


def _finite_or_none(value: float) -> float | None:
    return value if math.isfinite(value) else None


def unidirectional_text(shown: PointSummary) -> str:
    """The unidirectional ratio with its 68.3 % error and the error's degrees of freedom."""
    return ratio_text(shown.unidirectional_ratio * 1e6, shown.unidirectional_ratio_err * 1e6,
                      shown.dof)


def ratio_text(ppm: float | None, err_ppm: float | None, dof: int | None) -> str:
    if ppm is None or not math.isfinite(ppm):
        return "none (no '0' step)"
    if err_ppm is None or not math.isfinite(err_ppm) or not dof:
        return f"{ppm:+.2f} ppm"
    return f"{ppm:+.2f} ± {err_ppm:.2f} ppm (68 %, t with {dof} dof)"
