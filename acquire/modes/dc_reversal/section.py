"""The protocol sections of DC current reversal: the alternation pattern and the readings."""

from __future__ import annotations

from typing import Literal

from pydantic import Field, field_validator

from acquire.inputs.protocol import ProtocolBase, Strict
from drivers.quantities import Duration

PATTERN_SYMBOLS = {"+": 1, "0": 0, "-": -1}


class Alternation(Strict):
    pattern: str = Field(
        default="+0-", description="current polarities of one cycle, from '+', '0', '-'"
    )
    cycles: int = Field(default=4, ge=1, le=10000)
    settle: Duration = Field(default=0.02, ge=0, description="wait after each current change")

    @field_validator("pattern")
    @classmethod
    def valid_pattern(cls, pattern: str) -> str:
        bad = sorted(set(pattern) - set(PATTERN_SYMBOLS))
        if bad:
            raise ValueError(f"pattern {pattern!r} has {bad}; use only '+', '0' and '-'")
        if "+" not in pattern or "-" not in pattern:
            raise ValueError(
                f"pattern {pattern!r} needs at least one '+' and one '-' to separate "
                "the even and odd parts; e.g. '+0-'"
            )
        if pattern.count("+") != pattern.count("-"):
            raise ValueError(
                f"pattern {pattern!r} has unequal numbers of '+' and '-'; "
                "balanced patterns like '+-', '+0-', '+--+' weight both polarities equally"
            )
        return pattern

    @property
    def polarities(self) -> tuple[int, ...]:
        return tuple(PATTERN_SYMBOLS[symbol] for symbol in self.pattern)


class Readings(Strict):
    per_step: int = Field(default=1, ge=1, le=1000)
    channels: list[str] = Field(min_length=1)

    @field_validator("channels")
    @classmethod
    def unique_channels(cls, channels: list[str]) -> list[str]:
        repeated = sorted({name for name in channels if channels.count(name) > 1})
        if repeated:
            raise ValueError(f"channel {repeated[0]!r} is listed twice; list each voltmeter once")
        return channels


class DcReversalProtocol(ProtocolBase):
    mode: Literal["dc_reversal"] = Field(
        default="dc_reversal", description="DC current reversal (+I / 0 / -I at every point)"
    )
    alternation: Alternation = Alternation()
    readings: Readings
