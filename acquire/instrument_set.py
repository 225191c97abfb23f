"""The opened instruments of a run, by role."""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from acquire.load import LoadedRig


@dataclass
class Instruments:
    source: Any
    voltmeters: dict[str, Any]
    field: Any | None = None
    rotator: Any | None = None
    temperature: Any | None = None
    names: dict[str, str] = dataclasses.field(default_factory=dict)  # role -> rig name

    @classmethod
    def from_opened(
        cls, rig: LoadedRig, opened: dict[str, Any], channels: list[str]
    ) -> Instruments:
        def one(role: str) -> Any | None:
            entry = rig.rig.one(role)
            return opened[entry[0]] if entry else None

        names = {role: entry[0] for role in ("current_source", "field", "rotator", "temperature")
                 if (entry := rig.rig.one(role))}
        return cls(
            source=one("current_source"),
            voltmeters={name: opened[name] for name in channels},
            field=one("field"),
            rotator=one("rotator"),
            temperature=one("temperature"),
            names=names,
        )

    def all(self) -> Iterator[Any]:
        yield self.source
        yield from self.voltmeters.values()
        for extra in (self.field, self.rotator, self.temperature):
            if extra is not None:
                yield extra
