"""The bounds on the numbers an instrument is sent, checked on the command text itself.

One table per instrument, built from its role's TemplateLimits and its rig entry's limits, and
tightened by the run with the protocol's own limits (a sample may take less than the rig can
give). The transport checks every command against it before anything is written; `check`
uses the same rule on every value a protocol can send. A command past a bound raises
LimitError and is never sent.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, replace

from drivers.errors import LimitError
from drivers.roles.base import TemplateLimit
from drivers.spec import InstrumentSpec

# The one rounding rule for limits: a value computed in floating point (a density limit turned
# into a current, a unit conversion) that lands within this relative distance of its bound is
# at the bound, not past it. Far below any instrument's resolution.
ROUND_OFF = 1e-9


def past(value: float, low: float | None, high: float | None, symmetric: bool) -> bool:
    """Is `value` past the bounds (|value| for a symmetric bound), beyond the round-off?"""
    checked = abs(value) if symmetric else value
    if high is not None and checked > high + abs(high) * ROUND_OFF:
        return True
    return low is not None and checked < low - abs(low) * ROUND_OFF


@dataclass(frozen=True)
class Bound:
    limit: TemplateLimit
    low: float | None
    high: float | None
    source: str  # where the tightest bound comes from, for the message

    def describe(self) -> str:
        quantity = self.limit.quantity
        if self.limit.symmetric:
            return f"{self.source} {quantity.shown(self.high or 0.0)}"
        low = "-inf" if self.low is None else f"{self.low * quantity.shown_scale:g}"
        high = "inf" if self.high is None else f"{self.high * quantity.shown_scale:g}"
        return f"{self.source} {low}..{high} {quantity.shown_unit or quantity.si_unit}"


class CommandLimits:
    """template name -> Bound for one instrument."""

    def __init__(self, limits: Iterable[TemplateLimit], spec: InstrumentSpec) -> None:
        self._bounds: dict[str, Bound] = {}
        for limit in limits:
            low, high = limit.bounds(spec)
            self._bounds[limit.template] = Bound(limit, low, high, limit.described_as)

    def get(self, template: str) -> Bound | None:
        return self._bounds.get(template)

    def templates(self) -> tuple[str, ...]:
        return tuple(self._bounds)

    def tighten(self, template: str, *, low: float | None = None, high: float | None = None,
                source: str) -> None:
        """Keep the stricter of the present bound and the one given (from the protocol)."""
        bound = self._bounds.get(template)
        if bound is None:
            return
        if high is not None and (bound.high is None or high < bound.high):
            bound = replace(bound, high=high, source=source)
        if low is not None and (bound.low is None or low > bound.low):
            bound = replace(bound, low=low, source=source)
        self._bounds[template] = bound

    def refuse_past(self, instrument: str, template: str, value: float, sent: float,
                    command: str) -> None:
        """LimitError if the value asked for or the number the command sends is past a bound."""
        bound = self._bounds.get(template)
        if bound is None:
            return
        for number in (value, sent):
            if past(number, bound.low, bound.high, bound.limit.symmetric):
                shown = bound.limit.quantity.shown(number)
                raise LimitError(instrument, command,
                                 f"refused: {shown} is past {bound.describe()}")
