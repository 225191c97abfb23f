"""How long each thing takes on a rig: shared by the estimate and the simulated instruments."""

from __future__ import annotations

from dataclasses import dataclass

from acquire.protocol import Protocol
from acquire.rig import (
    DEFAULT_BACKLASH,
    DEFAULT_NPLC,
    DEFAULT_ROTATOR_SPEED,
    DEFAULT_TEMPERATURE_RATE,
    Rig,
)

DEFAULT_LATENCY_S = 0.002
DEFAULT_FIELD_RAMP_T_PER_S = 0.5 / 60.0
POLL_INTERVAL_S = 0.5  # how often a wait asks for a readback (common practice: ~1 Hz or faster)


@dataclass(frozen=True)
class RigTiming:
    """The timing facts of a rig; defaults stand in when no rig is given."""

    integration_s: dict[str, float]  # per voltmeter channel: integration (+ autozero)
    reading_latency_s: dict[str, float]  # per voltmeter channel: one transaction
    source_latency_s: float
    readback_latency_s: float  # all readbacks of one step together
    field_ramp_T_per_s: float
    rotator_speed_deg_per_s: float
    backlash_deg: float
    approach_positive: bool
    temperature_rate_K_per_s: float

    @classmethod
    def of(cls, rig: Rig | None, channels: list[str]) -> RigTiming:
        if rig is None:
            integration = DEFAULT_NPLC / 50.0
            return cls(
                dict.fromkeys(channels, integration), dict.fromkeys(channels, DEFAULT_LATENCY_S),
                DEFAULT_LATENCY_S, DEFAULT_LATENCY_S, DEFAULT_FIELD_RAMP_T_PER_S,
                DEFAULT_ROTATOR_SPEED, DEFAULT_BACKLASH, True, DEFAULT_TEMPERATURE_RATE,
            )
        integration, latency = {}, {}
        for name in channels:
            spec = rig.instruments[name]
            nplc = spec.nplc if spec.nplc is not None else DEFAULT_NPLC
            # Autozero measures the zero as well: about twice the integration (common practice).
            factor = 2.0 if spec.autozero else 1.0
            integration[name] = factor * nplc / rig.mains_frequency
            latency[name] = spec.latency
        source = rig.one("current_source")
        readbacks = sum(
            entry[1].latency for role in ("field", "rotator", "temperature")
            if (entry := rig.one(role))
        )
        field = rig.one("field")
        ramp = DEFAULT_FIELD_RAMP_T_PER_S
        if field:
            ramp = field[1].ramp_rate or field[1].limits.ramp_rate or ramp
        rotator = rig.one("rotator")
        speed, backlash, positive = DEFAULT_ROTATOR_SPEED, DEFAULT_BACKLASH, True
        if rotator:
            spec = rotator[1]
            speed = spec.speed or speed
            backlash = spec.backlash if spec.backlash is not None else backlash
            positive = (spec.approach or "positive") == "positive"
        temperature = rig.one("temperature")
        rate = (temperature[1].rate if temperature else None) or DEFAULT_TEMPERATURE_RATE
        source_latency = source[1].latency if source else DEFAULT_LATENCY_S
        return cls(
            integration, latency, source_latency, readbacks, ramp, speed, backlash, positive, rate
        )

    def rotation_s(self, start: float, stop: float) -> float:
        """Moves that end against the approach side overshoot by the backlash and come back."""
        distance = abs(stop - start)
        against = (stop < start) if self.approach_positive else (stop > start)
        overshoot = 2 * self.backlash_deg if against else 0.0
        return (distance + overshoot) / self.rotator_speed_deg_per_s


@dataclass(frozen=True)
class PointCost:
    """Seconds spent at one point, split by what they are spent on."""

    settling_s: float
    integration_s: float
    transactions_s: float

    @property
    def total_s(self) -> float:
        return self.settling_s + self.integration_s + self.transactions_s


def point_cost(protocol: Protocol, timing: RigTiming) -> PointCost:
    steps = protocol.alternation.cycles * len(protocol.alternation.pattern)
    per_step = protocol.readings.per_step
    channels = protocol.readings.channels
    latency_per_reading = sum(timing.reading_latency_s[name] for name in channels)
    integration_per_reading = sum(timing.integration_s[name] for name in channels)
    step_transactions = timing.source_latency_s + timing.readback_latency_s
    return PointCost(
        settling_s=steps * protocol.alternation.settle,
        integration_s=steps * per_step * integration_per_reading,
        transactions_s=steps * (step_transactions + per_step * latency_per_reading)
        + 2 * timing.source_latency_s,  # compliance and error-queue checks at each point
    )
