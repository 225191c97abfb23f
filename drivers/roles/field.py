"""The field supply: target and ramp rate in SI (tesla as mu0*H, T/s); moves the `field` axis.
A supply that takes T/min uses {per_minute} in its ramp_rate template."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Literal, Protocol

from pydantic import Field

from drivers.driver_base import DialectDriver
from drivers.interface import Instrument
from drivers.quantities import Duration, FieldRate
from drivers.quantities import Field as FieldQuantity
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

FIELD = Quantity("field", "T")
FIELD_RATE = Quantity("field ramp rate", "T/s", "T/min", 60.0)
DEFAULT_RAMP_T_PER_S = 0.5 / 60.0  # for an estimate without a rig


class FieldSupply(Instrument, Protocol):
    def configure(self, ramp_rate_T_per_s: float) -> None: ...
    def set_target(self, tesla: float) -> None: ...
    def field(self) -> float: ...  # readback, tesla (mu0*H)


class FieldLimits(Strict):
    field: FieldQuantity | None = Field(default=None, gt=0, description="largest |mu0*H|")
    ramp_rate: FieldRate | None = Field(default=None, gt=0, description="fastest ramp")


class FieldSpec(InstrumentSpec):
    role: Literal["field"]
    limits: FieldLimits = FieldLimits()
    ramp_rate: FieldRate | None = Field(
        default=None, gt=0, description="ramp rate to set (the limit's when unset)"
    )

    @property
    def ramp_T_per_s(self) -> float | None:
        return self.ramp_rate or self.limits.ramp_rate


class FieldWait(Strict):
    """After a field move: the readback stays within `tolerance` of the target for `hold`;
    no settling within `timeout` is a wait_timeout (see on_problem)."""

    tolerance: FieldQuantity = Field(default=1e-3, gt=0, description="readback within this")
    hold: Duration = Field(default=1.0, ge=0, description="for this long")
    timeout: Duration = Field(default=1800.0, gt=0, description="or the wait has failed")


TEMPLATE_LIMITS = (
    TemplateLimit("set_target", "set_target", FIELD, "the magnet limit", high="field",
                  symmetric=True),
    # A rate equal to the limit must not round up past it in the command text.
    TemplateLimit("ramp_rate", "configure", FIELD_RATE, "the rig's ramp-rate limit",
                  high="ramp_rate", round_toward_zero=True),
)


class DialectFieldSupply(DialectDriver):
    template_limits = TEMPLATE_LIMITS

    def configure(self, ramp_rate_T_per_s: float) -> None:
        # Without a rate command the supply ramps at the rate set on the instrument itself.
        if self._supports("ramp_rate"):
            self.transport.send("ramp_rate", ramp_rate_T_per_s)
        self.transport.check_errors()

    def set_target(self, tesla: float) -> None:
        self.transport.send("set_target", tesla)

    def field(self) -> float:
        return self.transport.ask_number("field")


def _check(spec: FieldSpec) -> None:
    if spec.limits.field is None:
        raise entry_error(
            "the field supply has no field limit", ("limits",),
            "add 'limits: {field: 2 T, ramp_rate: 1 T/min}' from the magnet's manual",
        )
    if spec.limits.ramp_rate is None:
        raise entry_error(
            "the field supply has no ramp-rate limit", ("limits",),
            "add 'ramp_rate: 1 T/min' (from the magnet's manual) under limits",
        )
    if spec.ramp_rate is not None and spec.ramp_rate > spec.limits.ramp_rate:
        raise entry_error(
            f"ramp_rate {spec.ramp_rate * 60:g} T/min exceeds the limit "
            f"{spec.limits.ramp_rate * 60:g} T/min", ("ramp_rate",), "lower the ramp rate",
        )


def _configure(driver: FieldSupply, spec: FieldSpec) -> None:
    assert spec.ramp_T_per_s is not None, "the rig's check requires a ramp-rate limit"
    driver.configure(spec.ramp_T_per_s)


def _safe_state(driver: FieldSupply, finish: Mapping[str, object]) -> list[SafeAction]:
    if finish.get("field") == "zero":
        return [("field to zero", lambda: driver.set_target(0.0))]
    return []


def _ramp_s(spec: FieldSpec | None, start: float | None, stop: float) -> float:
    rate = (spec.ramp_T_per_s if spec is not None else None) or DEFAULT_RAMP_T_PER_S
    return abs(stop - (start or 0.0)) / rate


AXIS = Axis(
    quantity=FIELD,
    quantity_type=FieldQuantity,
    template="set_target",
    setpoint_title="field setpoint as mu0*H",
    readback_title="field readback",
    wait_model=FieldWait,
    motion=SettleMotion(set=lambda d, v: d.set_target(v), read=lambda d: d.field()),
    move_s=_ramp_s,
    hold_s=lambda wait: wait.hold,
    start_value=0.0,
    move_bucket="field ramps",
    hold_bucket="field holds",
    sample_limit="field",
    order=1,
)

ROLE: Role[FieldSupply] = Role(
    name="field",
    interface=FieldSupply,
    driver=DialectFieldSupply,
    spec=FieldSpec,
    summary="a magnet's field supply (target, ramp rate, readback)",
    template_limits=TEMPLATE_LIMITS,
    axis=AXIS,
    check=_check,
    configure=_configure,
    safe_state=_safe_state,
    shutdown_rank=1,
    order=2,
)
