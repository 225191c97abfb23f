"""A rig file's instrument entry: what every role shares (how to reach the instrument, how to
speak to it). Each role's module (drivers/roles/) extends it with its own settings and limits,
parsed once into SI floats."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict, Field, field_validator

from drivers.quantities import Duration


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class NoLimits(Strict):
    """A role without hardware limits of its own."""


class InstrumentSpec(Strict):
    role: str = Field(description="what the instrument does in the rig (the roles below)")
    resource: str = Field(min_length=1, description="VISA resource string")
    timeout: Duration = Field(default=5.0, gt=0, description="VISA timeout of one transaction")
    read_termination: str = Field(default="\n", description="what ends a reply")
    write_termination: str = Field(default="\n", description="what ends a command")
    latency: Duration = Field(
        default=0.002, ge=0, description="typical time of one transaction, for the estimate"
    )
    limits: Strict = NoLimits()
    commands: dict[str, str] = Field(
        default_factory=dict, description="command templates overriding the role's dialect"
    )
    replies: dict[str, str] = Field(
        default_factory=dict, description="reply patterns overriding the role's dialect"
    )
    driver: str | None = Field(
        default=None, description="a driver class of your own: 'package.module:Class'"
    )

    @field_validator("driver")
    @classmethod
    def driver_path(cls, value: str | None) -> str | None:
        if value is not None and (":" not in value or value.startswith(":")):
            raise ValueError("write the driver as 'package.module:ClassName'")
        return value


COMMON_KEYS: frozenset[str] = frozenset(InstrumentSpec.model_fields)
