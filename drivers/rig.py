"""The rig file: which instruments play which role, how to reach them, and their limits."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from pydantic import Field

from drivers.quantities import Frequency
from drivers.roles import instrument_entry_type
from drivers.roles.base import Role
from drivers.spec import InstrumentSpec, Strict

if TYPE_CHECKING:  # what every role's entry shares; pydantic sees the union by `role:`
    InstrumentEntry = InstrumentSpec
else:
    InstrumentEntry = instrument_entry_type()


class Rig(Strict):
    name: str = Field(min_length=1, description="the rig's name, shown by check, in run.json")
    visa_library: str = Field(default="@py", description="'@py', '@sim' or 'file.yaml@sim'")
    mains_frequency: Frequency = Field(default=50.0, gt=0, description="of the lab's mains")
    instruments: dict[str, InstrumentEntry] = Field(min_length=1)
    simulation: dict[str, float | int | str] = Field(
        default_factory=dict, description="sample-model parameters for simulated runs"
    )

    def of_role(self, role: Role[Any]) -> dict[str, InstrumentSpec]:
        return {name: spec for name, spec in self.instruments.items() if spec.role == role.name}

    def one(self, role: Role[Any]) -> tuple[str, Any] | None:
        """(name, spec) of the rig's instrument of `role`, or None."""
        found = self.of_role(role)
        return next(iter(found.items())) if found else None
