"""The temperature controller: setpoint and reading in kelvin, ramp rate in K/s; moves the
`temperature` axis. A controller that takes K/min uses {per_minute} in its ramp_rate template."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Literal, Protocol

from pydantic import Field

from drivers.driver_base import DialectDriver
from drivers.interface import Instrument
from drivers.quantities import Duration, Temperature, TemperatureRate
from drivers.roles.base import (
    Axis,
    Quantity,
    Role,
    SafeAction,
    SettleMotion,
    TemplateLimit,
    entry_error,
)
from drivers.spec import InstrumentSpec, Strict

TEMPERATURE = Quantity("temperature", "K")
DEFAULT_RATE_K_PER_S = 2.0 / 60.0


class TemperatureController(Instrument, Protocol):
    def configure(self, rate_K_per_s: float | None) -> None: ...  # setpoint ramp rate, K/s
    def set_setpoint(self, kelvin: float) -> None: ...
    def temperature(self) -> float: ...


class TemperatureLimits(Strict):
    min: Temperature | None = Field(default=None, description="lowest setpoint allowed")
    max: Temperature | None = Field(default=None, description="highest setpoint allowed")


class TemperatureSpec(InstrumentSpec):
    role: Literal["temperature"]
    limits: TemperatureLimits = TemperatureLimits()
    rate: TemperatureRate | None = Field(default=None, gt=0, description="setpoint ramp rate")


class TemperatureWait(Strict):
    """After a new setpoint: the readback stays within `tolerance` of it for `hold`; no
    settling within `timeout` is a wait_timeout (see on_problem)."""

    tolerance: Temperature = Field(default=0.05, gt=0, description="readback within this")
    hold: Duration = Field(default=60.0, ge=0, description="for this long")
    timeout: Duration = Field(default=1800.0, gt=0, description="or the wait has failed")


TEMPLATE_LIMITS = (
    TemplateLimit("setpoint", "set_setpoint", TEMPERATURE, "the range", low="min", high="max"),
)


class DialectTemperatureController(DialectDriver):
    template_limits = TEMPLATE_LIMITS

    def configure(self, rate_K_per_s: float | None) -> None:
        if rate_K_per_s is not None and self._supports("ramp_rate"):
            self.transport.send("ramp_rate", rate_K_per_s)
        self.transport.check_errors()

    def set_setpoint(self, kelvin: float) -> None:
        self.transport.send("setpoint", kelvin)

    def temperature(self) -> float:
        return self.transport.ask_number("temperature")


def _check(spec: TemperatureSpec) -> None:
    low, high = spec.limits.min, spec.limits.max
    if low is not None and high is not None and low >= high:
        raise entry_error("min is not below max", ("limits",), "swap them")


def _configure(driver: TemperatureController, spec: TemperatureSpec) -> None:
    driver.configure(spec.rate)


def _safe_state(driver: TemperatureController, finish: Mapping[str, object]) -> list[SafeAction]:
    target = finish.get("temperature", "hold")
    if isinstance(target, (int, float)) and not isinstance(target, bool):
        kelvin = float(target)
        return [("temperature setpoint", lambda: driver.set_setpoint(kelvin))]
    return []


def _change_s(spec: TemperatureSpec | None, start: float | None, stop: float) -> float:
    # The cryostat is assumed at the first temperature already (its cool-down is not part of
    # the protocol).
    if start is None:
        return 0.0
    rate = (spec.rate if spec is not None else None) or DEFAULT_RATE_K_PER_S
    return abs(stop - start) / rate


def _unphysical(kelvin: float) -> tuple[str, str] | None:
    if kelvin <= 0:
        return (f"temperature {kelvin:g} K is not above absolute zero",
                "give temperatures in K above 0")
    return None


AXIS = Axis(
    quantity=TEMPERATURE,
    quantity_type=Temperature,
    template="setpoint",
    setpoint_title="temperature setpoint",
    readback_title="temperature readback",
    wait_model=TemperatureWait,
    motion=SettleMotion(set=lambda d, v: d.set_setpoint(v), read=lambda d: d.temperature()),
    move_s=_change_s,
    hold_s=lambda wait: wait.hold,
    start_value=None,
    move_bucket="temperature changes",
    hold_bucket="temperature holds",
    sample_limit="temperature_max",
    order=0,
    value_problem=_unphysical,
)

ROLE: Role[TemperatureController] = Role(
    name="temperature",
    interface=TemperatureController,
    driver=DialectTemperatureController,
    spec=TemperatureSpec,
    summary="a temperature controller (setpoint, ramp rate, readback)",
    template_limits=TEMPLATE_LIMITS,
    axis=AXIS,
    check=_check,
    configure=_configure,
    safe_state=_safe_state,
    shutdown_rank=2,
    order=4,
)
