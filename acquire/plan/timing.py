"""How long each thing takes on a rig: the estimate's time model, from the roles' own models."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from drivers.rig import Rig
from drivers.roles import all_roles, role_of_axis
from drivers.roles.voltmeter import integration_s

DEFAULT_LATENCY_S = 0.002
DEFAULT_MAINS_HZ = 50.0
POLL_INTERVAL_S = 0.5  # how often a wait asks for a readback (common practice: ~1 Hz or faster)


@dataclass(frozen=True)
class RigTiming:
    """The timing facts of a rig; defaults stand in when no rig is given."""

    rig: Rig | None
    integration_s: dict[str, float]  # per channel: integration (+ autozero)
    reading_latency_s: dict[str, float]  # per channel: one transaction
    source_latency_s: float
    readback_latency_s: float  # all readbacks of one step together

    @classmethod
    def of(cls, rig: Rig | None, channels: Sequence[str], source_role: str) -> RigTiming:
        if rig is None:
            integration = integration_s(None, DEFAULT_MAINS_HZ)
            return cls(None, dict.fromkeys(channels, integration),
                       dict.fromkeys(channels, DEFAULT_LATENCY_S), DEFAULT_LATENCY_S,
                       DEFAULT_LATENCY_S)
        integrations: dict[str, float] = {}
        latency: dict[str, float] = {}
        for name in channels:
            spec = rig.instruments[name]
            integrations[name] = integration_s(spec, rig.mains_frequency)  # type: ignore[arg-type]
            latency[name] = spec.latency
        readbacks = sum(
            entry[1].latency for role in all_roles() if role.axis is not None
            if (entry := rig.one(role))
        )
        source = next((spec for spec in rig.instruments.values() if spec.role == source_role),
                      None)
        source_latency = source.latency if source is not None else DEFAULT_LATENCY_S
        return cls(rig, integrations, latency, source_latency, readbacks)

    def axis_spec(self, axis: str) -> Any:
        """The rig entry that moves `axis`, or None (no rig given, or the rig has none)."""
        if self.rig is None:
            return None
        entry = self.rig.one(role_of_axis(axis))
        return entry[1] if entry else None

    def move_s(self, axis: str, start: float | None, stop: float) -> float:
        role = role_of_axis(axis)
        assert role.axis is not None
        return role.axis.move_s(self.axis_spec(axis), start, stop)


@dataclass(frozen=True)
class PointCost:
    """Seconds spent at one point, split by what they are spent on."""

    settling_s: float
    integration_s: float
    transactions_s: float

    @property
    def total_s(self) -> float:
        return self.settling_s + self.integration_s + self.transactions_s
