"""The protocol file: what to sweep on which sample, within which limits (validated on load)."""

from __future__ import annotations

from typing import Annotated, Literal, Union

from pydantic import (
    BaseModel,
    ConfigDict,
    Discriminator,
    Field,
    WithJsonSchema,
    field_validator,
)

from acquire.quantities import (
    Angle,
    Current,
    CurrentDensity,
    Duration,
    Length,
    Resistance,
    Resistivity,
    Temperature,
)
from acquire.quantities import (
    Field as FieldQuantity,
)

AXES = ("temperature", "field", "angle", "current")
ROTATION_PLANES = ("xy", "zx", "zy")
PATTERN_SYMBOLS = {"+": 1, "0": 0, "-": -1}


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class Layer(Strict):
    name: str = Field(min_length=1)
    thickness: Length = Field(gt=0)
    resistivity: Resistivity = Field(gt=0)
    carrier: bool = False


class ChannelGeometry(Strict):
    length: Length = Field(gt=0, description="distance between the voltage probes")
    width: Length = Field(gt=0)


class Sample(Strict):
    id: str = Field(min_length=1)
    stack: str = ""
    channel: ChannelGeometry
    layers: list[Layer] = Field(min_length=1)
    sheet_resistance: Resistance | None = Field(
        default=None, gt=0, description="measured sheet resistance of the whole stack, if known"
    )

    @field_validator("layers")
    @classmethod
    def one_carrier(cls, layers: list[Layer]) -> list[Layer]:
        names = [layer.name for layer in layers]
        repeated = sorted({name for name in names if names.count(name) > 1})
        if repeated:
            raise ValueError(f"layer name {repeated[0]!r} is used twice; name each layer once")
        carriers = [layer for layer in layers if layer.carrier]
        if len(carriers) > 1:
            raise ValueError("more than one layer has 'carrier: true'; mark only the heavy metal")
        if not carriers and len(layers) > 1:
            raise ValueError(
                "no layer is marked 'carrier: true'; mark the layer whose current density "
                "matters (the heavy metal)"
            )
        return layers

    @property
    def carrier(self) -> Layer:
        return next((layer for layer in self.layers if layer.carrier), self.layers[0])


class LoopBase(Strict):
    spacing: Literal["linear", "log"] = "linear"
    return_: bool = Field(default=False, alias="return", description="sweep there and back")
    snake: bool = Field(
        default=False, description="reverse direction on alternate passes of the outer loop"
    )
    num: int | None = Field(default=None, description="number of values from start to stop")


class TemperatureLoop(LoopBase):
    axis: Literal["temperature"]
    values: list[Temperature] | None = None
    start: Temperature | None = None
    stop: Temperature | None = None
    step: Temperature | None = None


class FieldLoop(LoopBase):
    axis: Literal["field"]
    values: list[FieldQuantity] | None = None
    start: FieldQuantity | None = None
    stop: FieldQuantity | None = None
    step: FieldQuantity | None = None


class AngleLoop(LoopBase):
    axis: Literal["angle"]
    values: list[Angle] | None = None
    start: Angle | None = None
    stop: Angle | None = None
    step: Angle | None = None


class CurrentLoop(LoopBase):
    axis: Literal["current"]
    values: list[Current] | None = None
    start: Current | None = None
    stop: Current | None = None
    step: Current | None = None


Loop = Annotated[
    Union[TemperatureLoop, FieldLoop, AngleLoop, CurrentLoop], Discriminator("axis")
]


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


class FieldWait(Strict):
    tolerance: FieldQuantity = Field(default=1e-3, gt=0)
    hold: Duration = Field(default=1.0, ge=0)
    timeout: Duration = Field(default=1800.0, gt=0)


class TemperatureWait(Strict):
    tolerance: Temperature = Field(default=0.05, gt=0)
    hold: Duration = Field(default=60.0, ge=0)
    timeout: Duration = Field(default=1800.0, gt=0)


class AngleWait(Strict):
    tolerance: Angle = Field(default=0.05, gt=0)
    settle: Duration = Field(default=0.5, ge=0)
    timeout: Duration = Field(default=600.0, gt=0)


class Waits(Strict):
    field: FieldWait = FieldWait()
    temperature: TemperatureWait = TemperatureWait()
    angle: AngleWait = AngleWait()


class SampleLimits(Strict):
    current: Current | None = Field(default=None, gt=0)
    current_density: CurrentDensity | None = Field(
        default=None, gt=0, description="in the carrier layer"
    )
    field: FieldQuantity | None = Field(default=None, gt=0)
    temperature_max: Temperature | None = Field(default=None, gt=0)


# YAML 1.1 (PyYAML, the loader) reads a bare `off` as false; the schema admits both spellings.
FinishCurrent = Annotated[
    Literal["off"],
    WithJsonSchema({"enum": ["off", False], "type": ["string", "boolean"]}),
]


class Finish(Strict):
    current: FinishCurrent = Field(
        default="off", description="the source always goes to zero, then output off"
    )
    field: Literal["zero", "hold"] = "zero"
    temperature: Literal["hold"] | Temperature = "hold"

    @field_validator("current", mode="before")
    @classmethod
    def yaml_off(cls, value: object) -> object:
        # YAML 1.1 reads a bare `off` as false; the user meant the word.
        return "off" if value is False else value


ProblemAction = Literal["flag", "retry", "skip", "stop"]


class OnProblem(Strict):
    """What the runner does when an instrument reports a problem at a point."""

    compliance: ProblemAction = "retry"
    instrument_error: ProblemAction = "retry"
    wait_timeout: ProblemAction = "skip"
    retries: int = Field(default=2, ge=0, le=10)


class Protocol(Strict):
    name: str = Field(min_length=1)
    description: str = ""
    mode: Literal["dc_reversal"] = Field(
        default="dc_reversal",
        description="acquisition mode; DC current reversal is the one built so far",
    )
    sample: Sample
    rotation_plane: Literal["xy", "zx", "zy"] = "xy"
    loops: list[Loop] = Field(min_length=1)
    alternation: Alternation = Alternation()
    readings: Readings
    waits: Waits = Waits()
    limits: SampleLimits
    finish: Finish = Finish()
    on_problem: OnProblem = OnProblem()
    notify: list[str] | None = Field(
        default=None, description="program and arguments run at finish and on failure"
    )
