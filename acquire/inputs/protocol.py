"""The protocol file: what to sweep on which sample, within which limits (validated on load).

The sections every acquisition mode shares are here; a mode adds its own (acquire/modes/).
The loop axes and their `waits` sections come from the roles that move them (drivers/roles/),
so a new role's axis needs no change here.
"""

from __future__ import annotations

import types
import typing
from typing import TYPE_CHECKING, Annotated, Any, Literal, Union

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Discriminator,
    Field,
    WithJsonSchema,
    create_model,
    field_validator,
    model_validator,
)

from drivers import units
from drivers.quantities import (
    Current,
    Length,
    Power,
    Resistance,
    Resistivity,
    Temperature,
)
from drivers.quantities import Field as FieldQuantity
from drivers.roles import movable_axes

CURRENT_AXIS = "current"  # the excitation amplitude: every mode sweeps it
ROTATION_PLANES = ("xy", "zx", "zy")
# A protocol with more points than this is refused unless it raises `max_points` itself: a
# step slip (1 uT for 1 mT) must not become a week-long night that `check` calls valid.
DEFAULT_MAX_POINTS = 1_000_000


def axis_names() -> tuple[str, ...]:
    """Every loop axis, outermost-first order of the tables' columns, the current last."""
    return (*(axis.name for axis in movable_axes()), CURRENT_AXIS)


def _is_count(annotation: Any) -> bool:
    """int, int | None, Annotated[int, ...]: a field holding a whole number."""
    while typing.get_origin(annotation) is Annotated:
        annotation = typing.get_args(annotation)[0]
    if annotation is int:
        return True
    members = typing.get_args(annotation)
    return typing.get_origin(annotation) in (Union, types.UnionType) and int in members \
        and bool not in members


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)

    @model_validator(mode="before")
    @classmethod
    def no_yes_for_a_count(cls, data: object) -> object:
        # YAML 1.1 reads yes/no/on/off as booleans, and pydantic would take true as 1: the
        # boolean goes on as the word, which a whole-number field refuses (at its own key).
        if not isinstance(data, dict):
            return data
        counts = {info.alias or name for name, info in cls.model_fields.items()
                  if _is_count(info.annotation)}
        return {key: (str(value).lower() if isinstance(value, bool) and key in counts
                      else value) for key, value in data.items()}


class Layer(Strict):
    """One layer of the stack; the layers share the current as parallel resistors."""

    name: str = Field(min_length=1, description="the layer's name, unique in the stack")
    thickness: Length = Field(gt=0, description="the layer's thickness")
    resistivity: Resistivity = Field(gt=0, description="its resistivity at the measurement")
    carrier: bool = Field(
        default=False, description="the layer whose current density the limits and the tables "
        "give (the heavy metal); exactly one when there are several layers",
    )


class ChannelGeometry(Strict):
    """The part of the channel the longitudinal voltage probes see."""

    length: Length = Field(gt=0, description="distance between the voltage probes")
    width: Length = Field(gt=0, description="width of the current channel")


class Sample(Strict):
    """The device: its name, its channel and its layers (for current densities and limits)."""

    id: str = Field(min_length=1, description="the sample's name, written to run.json")
    stack: str = Field(default="", description="free text, e.g. 'NiFe 4 nm / Pt 5 nm'")
    channel: ChannelGeometry
    layers: list[Layer] = Field(min_length=1, description="the layers, in any order")
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
    """One loop: `values`, or `start` and `stop` with `step` or `num`."""

    axis: str = Field(description="what the loop sweeps: temperature, field, angle or current")
    spacing: Literal["linear", "log"] = Field(
        default="linear", description="how `num` values are spread; log needs start and stop "
        "of one sign",
    )
    return_: bool = Field(
        default=False, alias="return",
        description="sweep there and back, passing the turning value once",
    )
    alternate_direction: bool = Field(
        default=False,
        description="run backwards on every second pass of the loops outside it, so the axis "
        "never jumps back to its start; not on the outermost loop",
    )
    num: int | None = Field(
        default=None, description="number of values from start to stop, both included"
    )
    values: list[float] | None = Field(default=None, description="the values, in order")
    start: float | None = Field(default=None, description="first value of a range")
    stop: float | None = Field(
        default=None, description="last value of a range; with `step` it must be on the grid "
        "start + k * step",
    )
    step: float | None = Field(default=None, description="spacing of a range, positive")


def _loop_model(axis: str, quantity: Any) -> type[LoopBase]:
    """A loop of one axis: its values parsed with the axis's unit."""
    tag: Any = Literal[axis]  # a literal of a runtime string: what the discriminator reads
    values: Any = list[quantity] | None
    bound: Any = quantity | None
    return create_model(
        f"{axis.title()}Loop", __base__=LoopBase, __doc__=f"A loop over the {axis}.",
        axis=(tag, Field(description=f"'{axis}'")),
        values=(values, LoopBase.model_fields["values"]),
        start=(bound, LoopBase.model_fields["start"]),
        stop=(bound, LoopBase.model_fields["stop"]),
        step=(bound, LoopBase.model_fields["step"]),
    )


def _waits_model() -> type[BaseModel]:
    """`waits:`, one section per axis a role moves, each the role's own wait model."""
    sections: dict[str, Any] = {
        axis.name: (axis.wait_model, axis.wait_model()) for axis in movable_axes()
    }
    return create_model("Waits", __base__=Strict, __doc__="How each axis settles after a move.",
                        **sections)


LOOP_MODELS: tuple[type[LoopBase], ...] = (
    *(_loop_model(axis.name, axis.quantity_type) for axis in movable_axes()),
    _loop_model(CURRENT_AXIS, Current),
)
if TYPE_CHECKING:  # what every loop shares; pydantic sees the union by `axis:`
    Loop = LoopBase
    Waits = Any
else:
    Loop = Annotated[Union[LOOP_MODELS], Discriminator("axis")]
    Waits = _waits_model()


def _density_limit(value: object) -> float | dict[str, float]:
    """One density for every layer ('2e11 A/m^2'), or one per layer ({Pt: ..., NiFe: ...})."""
    def one(text: object, where: str) -> float:
        try:
            density = units.to_si(text, units.CURRENT_DENSITY)
        except units.UnitError as error:
            raise ValueError(f"{where}{error}") from None
        if density <= 0:
            raise ValueError(f"{where}must be greater than 0")
        return density

    if isinstance(value, dict):
        if not value:
            raise ValueError("name at least one layer, or give one density for every layer")
        return {str(name): one(text, f"layer {name!s}: ") for name, text in value.items()}
    return one(value, "")


DensityLimit = Annotated[
    float | dict[str, float],
    BeforeValidator(_density_limit),
    WithJsonSchema({
        "oneOf": [
            {"type": "string", "description": "a current density for every layer, e.g. "
                                              "'2e11 A/m^2'"},
            {"type": "object", "additionalProperties": {"type": "string"},
             "description": "a current density per layer name, e.g. {Pt: '2e11 A/m^2'}"},
        ],
    }),
]


class SampleLimits(Strict):
    """What the device survives: checked before anything is sent, on top of the rig's
    limits. At least one of `current`, `current_density` and `power` is required."""

    current: Current | None = Field(
        default=None, gt=0, description="largest current amplitude (the peak in modes with one)"
    )
    current_density: DensityLimit | None = Field(
        default=None,
        description="largest current density in every layer (parallel-resistor model), or per "
        "layer by name",
    )
    power: Power | None = Field(
        default=None, gt=0,
        description="largest peak power dissipated in the channel, I^2 R with the model's R",
    )
    field: FieldQuantity | None = Field(
        default=None, gt=0, description="largest |mu0*H| the sample may see"
    )
    temperature_max: Temperature | None = Field(
        default=None, gt=0, description="highest temperature setpoint for the sample"
    )


# YAML 1.1 (PyYAML, the loader) reads a bare `off` as false; the schema admits both spellings.
FinishCurrent = Annotated[
    Literal["off"],
    WithJsonSchema({"enum": ["off", False], "type": ["string", "boolean"]}),
]


class Finish(Strict):
    """The state the run leaves the rig in: at the end, after a failure and after Ctrl-C."""

    current: FinishCurrent = Field(
        default="off", description="always 'off': the source goes to zero, then output off"
    )
    field: Literal["zero", "hold"] = Field(
        default="zero", description="'zero': ramp the magnet to zero; 'hold': leave it where it is"
    )
    temperature: Literal["hold"] | Temperature = Field(
        default="hold", description="'hold': keep the last setpoint; a temperature (e.g. "
        "'300 K'): set it and leave (within the rig's and sample's limits)",
    )

    @field_validator("current", mode="before")
    @classmethod
    def yaml_off(cls, value: object) -> object:
        # YAML 1.1 reads a bare `off` as false; the user meant the word.
        return "off" if value is False else value


ProblemAction = Literal["flag", "retry", "skip", "stop"]


class OnProblem(Strict):
    """What the runner does when an instrument reports a problem at a point: 'flag' keeps the
    point and marks it; 'retry' measures it again (up to `retries` times), then flags it;
    'skip' leaves the point out of points.csv (readings already taken stay); 'stop' ends the
    run in the safe state (exit 1) for `flipsweep resume` to continue."""

    compliance: ProblemAction = Field(
        default="retry", description="the source reached its compliance voltage during a point"
    )
    instrument_error: ProblemAction = Field(
        default="retry", description="an instrument's error queue reported an error at a point"
    )
    wait_timeout: ProblemAction = Field(
        default="skip", description="a field, angle or temperature did not settle within its "
        "wait's timeout",
    )
    retries: int = Field(
        default=2, ge=0, le=10, description="how often 'retry' measures a point again before it "
        "keeps the last attempt, flagged",
    )


class ProtocolBase(Strict):
    """The sections every acquisition mode shares; each mode's model adds its own."""

    name: str = Field(min_length=1, description="what the run is, shown and written to run.json")
    description: str = Field(default="", description="free text")
    mode: str = Field(default="dc_reversal", description="acquisition mode")
    sample: Sample
    rotation_plane: Literal["xy", "zx", "zy"] = Field(
        default="xy", description="the plane the field angle turns in: xy from +x (the current) "
        "towards +y, zx from +z (the film normal) towards +x, zy from +z towards +y",
    )
    loops: list[Loop] = Field(
        min_length=1, description="outermost first; any subset and order of the axes, and a "
        "current loop always",
    )
    waits: Waits = Waits()
    limits: SampleLimits
    max_points: int = Field(
        default=DEFAULT_MAX_POINTS, ge=1,
        description="refuse the protocol if its loops give more points than this",
    )
    finish: Finish = Finish()
    on_problem: OnProblem = OnProblem()
    notify: list[str] | None = Field(
        default=None, description="a program and its arguments, run when the run ends (done, "
        "failed or interrupted) with two more arguments: the state and the run folder",
    )
