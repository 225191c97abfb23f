"""The rig file: which instruments play which role, how to reach them, and their hardware limits."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator

from acquire.quantities import (
    Angle,
    AngleRate,
    Current,
    Duration,
    FieldRate,
    Frequency,
    TemperatureRate,
    Voltage,
)
from acquire.quantities import (
    Field as FieldQuantity,
)

ROLES = ("current_source", "voltmeter", "field", "rotator", "temperature")
Role = Literal["current_source", "voltmeter", "field", "rotator", "temperature"]


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class HardwareLimits(Strict):
    current: Current | None = Field(default=None, gt=0)
    field: FieldQuantity | None = Field(default=None, gt=0)
    ramp_rate: FieldRate | None = Field(default=None, gt=0)
    min: str | None = Field(default=None, description="an angle (rotator) or temperature")
    max: str | None = Field(default=None, description="an angle (rotator) or temperature")

    @field_validator("min", "max", mode="before")
    @classmethod
    def with_unit(cls, value: object) -> object:
        # Read by role later (angle or temperature); a bare number is caught here, clearly.
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            raise ValueError(
                f"{value!r} has no unit; write it with its unit, like '{value} deg' for a "
                f"rotator or '{value} K' for a temperature controller"
            )
        return value


# Which limit keys and settings make sense for which role; anything else is a mistake.
ROLE_LIMIT_KEYS: dict[str, set[str]] = {
    "current_source": {"current"},
    "voltmeter": set(),
    "field": {"field", "ramp_rate"},
    "rotator": {"min", "max"},
    "temperature": {"min", "max"},
}
ROLE_SETTINGS: dict[str, set[str]] = {
    "current_source": {"compliance"},
    "voltmeter": {"nplc", "range", "autozero", "probe"},
    "field": {"ramp_rate"},
    "rotator": {"speed", "backlash", "approach"},
    "temperature": {"rate"},
}
ALL_SETTINGS = set().union(*ROLE_SETTINGS.values())


class Instrument(Strict):
    role: Role
    resource: str = Field(min_length=1, description="VISA resource string")
    timeout: Duration = Field(default=5.0, gt=0)
    read_termination: str = "\n"
    write_termination: str = "\n"
    latency: Duration = Field(
        default=0.002, ge=0, description="typical time of one transaction, for the estimate"
    )
    limits: HardwareLimits = HardwareLimits()
    commands: dict[str, str] = Field(default_factory=dict, description="command templates")
    replies: dict[str, str] = Field(default_factory=dict, description="reply patterns")
    driver: str | None = Field(default=None, description="package.module:Class")
    # role settings (checked against the role after parsing)
    compliance: Voltage | None = Field(default=None, gt=0)
    nplc: float | None = Field(default=None, gt=0, le=100)
    range: Voltage | Literal["auto"] | None = None
    autozero: bool | None = None
    probe: Literal["longitudinal", "transverse"] | None = None
    ramp_rate: FieldRate | None = Field(default=None, gt=0)
    speed: AngleRate | None = Field(default=None, gt=0)
    backlash: Angle | None = Field(default=None, ge=0)
    approach: Literal["positive", "negative"] | None = None
    rate: TemperatureRate | None = Field(default=None, gt=0)

    @field_validator("driver")
    @classmethod
    def driver_path(cls, value: str | None) -> str | None:
        if value is not None and (":" not in value or value.startswith(":")):
            raise ValueError("write the driver as 'package.module:ClassName'")
        return value


class Rig(Strict):
    name: str = Field(min_length=1)
    visa_library: str = Field(default="@py", description="'@py', '@sim' or 'file.yaml@sim'")
    mains_frequency: Frequency = Field(default=50.0, gt=0)
    instruments: dict[str, Instrument] = Field(min_length=1)
    simulation: dict[str, float | int | str] = Field(
        default_factory=dict, description="sample-model parameters for simulated runs"
    )

    def by_role(self, role: str) -> dict[str, Instrument]:
        return {name: spec for name, spec in self.instruments.items() if spec.role == role}

    def one(self, role: str) -> tuple[str, Instrument] | None:
        found = self.by_role(role)
        return next(iter(found.items())) if found else None


DEFAULT_NPLC = 1.0
DEFAULT_ROTATOR_SPEED = 10.0  # deg/s
DEFAULT_BACKLASH = 2.0  # deg
DEFAULT_TEMPERATURE_RATE = 2.0 / 60.0  # K/s
