"""The rotator: absolute moves in degrees, position, whether it is still moving, speed; moves
the `angle` axis, always arriving from the same side so gear backlash never shifts the angle."""

from __future__ import annotations

from typing import Literal, Protocol

from pydantic import Field

from drivers.driver_base import DialectDriver
from drivers.interface import Instrument
from drivers.quantities import Angle, AngleRate, Duration
from drivers.roles.base import (
    Axis,
    PositionerMotion,
    Quantity,
    Role,
    TemplateLimit,
    entry_error,
)
from drivers.spec import InstrumentSpec, Strict

ANGLE = Quantity("angle", "deg")
DEFAULT_SPEED_DEG_PER_S = 10.0
DEFAULT_BACKLASH_DEG = 2.0


class Rotator(Instrument, Protocol):
    def configure(self, speed_deg_per_s: float) -> None: ...
    def move_to(self, degrees: float) -> None: ...  # absolute, returns at once
    def position(self) -> float: ...
    def moving(self) -> bool: ...
    def home(self) -> None: ...


class RotatorLimits(Strict):
    min: Angle | None = Field(default=None, description="lowest position the stage may reach")
    max: Angle | None = Field(default=None, description="highest position the stage may reach")


class RotatorSpec(InstrumentSpec):
    role: Literal["rotator"]
    limits: RotatorLimits = RotatorLimits()
    speed: AngleRate | None = Field(default=None, gt=0, description="speed to set")
    backlash: Angle = Field(
        default=DEFAULT_BACKLASH_DEG, ge=0, description="overshoot of a move that would "
        "arrive from the wrong side (0: no approach legs)",
    )
    approach: Literal["positive", "negative"] = Field(
        default="positive", description="the side every position is approached from"
    )


class AngleWait(Strict):
    """After a move: the position is within `tolerance` of the target, then a pause of
    `settle`; a move longer than `timeout` is a wait_timeout (see on_problem)."""

    tolerance: Angle = Field(default=0.05, gt=0, description="position within this of target")
    settle: Duration = Field(default=0.5, ge=0, description="pause after arriving")
    timeout: Duration = Field(default=600.0, gt=0, description="or the move has failed")


TEMPLATE_LIMITS = (
    TemplateLimit("move", "move_to", ANGLE, "the rotator range", low="min", high="max"),
)


class DialectRotator(DialectDriver):
    template_limits = TEMPLATE_LIMITS

    def configure(self, speed_deg_per_s: float) -> None:
        # Without a speed command the rotator moves at the speed set on the instrument itself.
        if self._supports("speed"):
            self.transport.send("speed", speed_deg_per_s)
        self.transport.check_errors()

    def move_to(self, degrees: float) -> None:
        self.transport.send("move", degrees)

    def position(self) -> float:
        return self.transport.ask_number("position")

    def moving(self) -> bool:
        return self.transport.ask_flag("moving")

    def home(self) -> None:
        self.transport.send("home")


def approach_targets(
    present: float | None, target: float, backlash_deg: float, approach_positive: bool
) -> list[float]:
    """Always arrive from the same side, so gear backlash never shifts the angle.

    A move that would arrive from the wrong side first overshoots by the backlash. With an
    unknown present position (start or resume) the overshoot is always made.
    """
    if backlash_deg <= 0:
        return [target]
    if approach_positive:
        arriving_wrong_way = present is None or present > target
        return [target - backlash_deg, target] if arriving_wrong_way else [target]
    arriving_wrong_way = present is None or present < target
    return [target + backlash_deg, target] if arriving_wrong_way else [target]


def _legs(spec: RotatorSpec | None, present: float | None, target: float) -> list[float]:
    backlash = spec.backlash if spec is not None else DEFAULT_BACKLASH_DEG
    positive = spec is None or spec.approach == "positive"
    return approach_targets(present, target, backlash, positive)


def _rotation_s(spec: RotatorSpec | None, start: float | None, stop: float) -> float:
    """Moves that end against the approach side overshoot by the backlash and come back."""
    speed = (spec.speed if spec is not None else None) or DEFAULT_SPEED_DEG_PER_S
    backlash = spec.backlash if spec is not None else DEFAULT_BACKLASH_DEG
    positive = spec is None or spec.approach == "positive"
    begin = start or 0.0
    against = (stop < begin) if positive else (stop > begin)
    overshoot = 2 * backlash if against else 0.0
    return (abs(stop - begin) + overshoot) / speed


def _check(spec: RotatorSpec) -> None:
    low, high = spec.limits.min, spec.limits.max
    if low is not None and high is not None and low >= high:
        raise entry_error("min is not below max", ("limits",), "swap them")


def _configure(driver: Rotator, spec: RotatorSpec) -> None:
    if spec.speed:
        driver.configure(spec.speed)


AXIS = Axis(
    quantity=ANGLE,
    quantity_type=Angle,
    template="move",
    setpoint_title="field angle setpoint in the rotation plane",
    readback_title="rotator position readback",
    wait_model=AngleWait,
    motion=PositionerMotion(
        move=lambda d, v: d.move_to(v), moving=lambda d: d.moving(),
        position=lambda d: d.position(), legs=_legs,
    ),
    move_s=_rotation_s,
    hold_s=lambda wait: wait.settle,
    start_value=0.0,
    move_bucket="rotations",
    hold_bucket="rotations",
    order=2,
)

ROLE: Role[Rotator] = Role(
    name="rotator",
    interface=Rotator,
    driver=DialectRotator,
    spec=RotatorSpec,
    summary="a sample rotator (absolute moves, position, speed)",
    template_limits=TEMPLATE_LIMITS,
    axis=AXIS,
    check=_check,
    configure=_configure,
    order=3,
)
