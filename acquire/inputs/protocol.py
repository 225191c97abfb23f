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
    name: str = Field(min_length=1)
    thickness: Length = Field(gt=0)
    resistivity: Resistivity = Field(gt=0)
    carrier: bool = Field(default=False, description="the layer whose current density matters")


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
    axis: str
    spacing: Literal["linear", "log"] = "linear"
    return_: bool = Field(default=False, alias="return", description="sweep there and back")
    alternate_direction: bool = Field(
        default=False,
        description="run backwards on every second pass of the loops outside it, so the axis "
        "never jumps back to its start; not on the outermost loop",
    )
    num: int | None = Field(default=None, description="number of values from start to stop")
    values: list[float] | None = None
    start: float | None = None
    stop: float | None = None
    step: float | None = None


def _loop_model(axis: str, quantity: Any) -> type[LoopBase]:
    """A loop of one axis: its values parsed with the axis's unit."""
    tag: Any = Literal[axis]  # a literal of a runtime string: what the discriminator reads
    values: Any = list[quantity] | None
    bound: Any = quantity | None
    return create_model(
        f"{axis.title()}Loop", __base__=LoopBase, axis=(tag, ...), values=(values, None),
        start=(bound, None), stop=(bound, None), step=(bound, None),
    )


def _waits_model() -> type[BaseModel]:
    """`waits:`, one section per axis a role moves, each the role's own wait model."""
    sections: dict[str, Any] = {
        axis.name: (axis.wait_model, axis.wait_model()) for axis in movable_axes()
    }
    return create_model("Waits", __base__=Strict, **sections)


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
    current: Current | None = Field(default=None, gt=0, description="largest current amplitude")
    current_density: DensityLimit | None = Field(
        default=None,
        description="in every layer (parallel-resistor model), or per layer by name",
    )
    power: Power | None = Field(
        default=None, gt=0,
        description="largest peak power dissipated in the channel, I^2 R with the model's R",
    )
    field: FieldQuantity | None = Field(default=None, gt=0, description="largest |mu0*H|")
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


class ProtocolBase(Strict):
    """The sections every acquisition mode shares; each mode's model adds its own."""

    name: str = Field(min_length=1)
    description: str = ""
    mode: str = Field(default="dc_reversal", description="acquisition mode")
    sample: Sample
    rotation_plane: Literal["xy", "zx", "zy"] = "xy"
    loops: list[Loop] = Field(min_length=1)
    waits: Waits = Waits()
    limits: SampleLimits
    max_points: int = Field(
        default=DEFAULT_MAX_POINTS, ge=1,
        description="refuse the protocol if its loops give more points than this",
    )
    finish: Finish = Finish()
    on_problem: OnProblem = OnProblem()
    notify: list[str] | None = Field(
        default=None, description="program and arguments run at finish and on failure"
    )
