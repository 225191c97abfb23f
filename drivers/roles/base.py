"""What defines an instrument role: one `Role` value per module in drivers/roles/.

A role declares, as data where it can: the driver interface the runner may use, its rig-file
entry (settings and hardware limits, parsed into SI), its dialect file, the limits every command
it sends must respect (checked on the rendered text), the loop axis it moves and how, how long
that takes, how it is configured at the start of a run, its safe state at the end and how that
state is read back. Nothing
outside the role's own module branches on its name.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Generic, TypeVar

from pydantic import BaseModel

from drivers.errors import InputError
from drivers.spec import COMMON_KEYS, InstrumentSpec

DriverT = TypeVar("DriverT")
# (what, action): one call of the safe shutdown, attempted once, bounded in time.
SafeAction = tuple[str, Callable[[], object]]


@dataclass(frozen=True)
class SafeReading:
    """What reading an instrument back after the safe shutdown found."""

    safe: bool | None  # None: the instrument has no query that could tell
    found: str  # what was read, as a person says it: "current 0 A", "output on"


# (what, read): one read-back of the safe state, e.g. ("output off", read the output relay).
SafeCheck = tuple[str, Callable[[], SafeReading]]


@dataclass(frozen=True)
class Quantity:
    """How a quantity is named, written in SI and shown to a person."""

    name: str  # "current", "field", "angle", "temperature"
    si_unit: str  # "A"
    shown_unit: str = ""  # "mA"; empty: the SI unit
    shown_scale: float = 1.0  # SI value x scale = shown value

    def shown(self, value: float) -> str:
        return f"{value * self.shown_scale:g} {self.shown_unit or self.si_unit}"


@dataclass(frozen=True)
class TemplateLimit:
    """The bounds the number in one command template must respect, taken from the rig entry's
    `limits` (attribute names), checked on the number as the rendered command text sends it."""

    template: str  # dialect template name, e.g. "set_current"
    method: str  # the driver method whose first argument is that value, e.g. "set_current"
    quantity: Quantity
    described_as: str  # "the rig's limit", "the rotator range"
    high: str | None = None  # attribute of spec.limits giving the largest value sent
    low: str | None = None  # attribute of spec.limits giving the smallest value sent
    symmetric: bool = False  # the bound holds for the magnitude (current, field)
    # A rate: send a hair less rather than let the template's precision round it up.
    round_toward_zero: bool = False

    def bounds(self, spec: InstrumentSpec) -> tuple[float | None, float | None]:
        limits = spec.limits
        low = getattr(limits, self.low) if self.low else None
        high = getattr(limits, self.high) if self.high else None
        return low, high


@dataclass(frozen=True)
class SettleMotion(Generic[DriverT]):
    """Set a target, then wait until the readback has stayed within tolerance for the hold."""

    set: Callable[[DriverT, float], None]
    read: Callable[[DriverT], float]


@dataclass(frozen=True)
class PositionerMotion(Generic[DriverT]):
    """Move to each leg of an approach, wait while moving, check the position, then settle."""

    move: Callable[[DriverT, float], None]
    moving: Callable[[DriverT], bool]
    position: Callable[[DriverT], float]
    # (spec, present position or None, target) -> the positions to move to, in order
    legs: Callable[[Any, float | None, float], list[float]]


Motion = SettleMotion[Any] | PositionerMotion[Any]


@dataclass(frozen=True)
class Axis:
    """A loop axis a role moves between points (field, angle, temperature)."""

    quantity: Quantity
    quantity_type: Any  # the pydantic quantity type of the axis's values (drivers.quantities)
    template: str  # the dialect template that sends the axis's setpoint
    setpoint_title: str  # CSVW description of the setpoint column
    readback_title: str  # CSVW description of the readback column
    wait_model: type[BaseModel]  # the protocol's `waits.<axis>` section
    motion: Motion
    # (rig entry or None for "no rig given", from, to) -> seconds the move takes
    move_s: Callable[[Any, float | None, float], float]
    # (the protocol's waits.<axis>) -> seconds held or settled after the move
    hold_s: Callable[[Any], float]
    start_value: float | None  # where the night starts (None: already there)
    move_bucket: str  # the estimate's breakdown line for moving
    hold_bucket: str  # the estimate's breakdown line for holding
    sample_limit: str | None = None  # key of the protocol's `limits` bounding this axis
    order: int = 0  # column order of the axes in the tables
    # A loop value that makes no sense whatever the limits: (problem, fix), or None.
    value_problem: Callable[[float], tuple[str, str] | None] = lambda value: None

    @property
    def name(self) -> str:
        return self.quantity.name

    @property
    def setpoint_column(self) -> str:
        return f"{self.name}_{self.quantity.si_unit}"

    @property
    def readback_column(self) -> str:
        return f"{self.name}_read_{self.quantity.si_unit}"

    def reach(self, spec: Any, target: float) -> list[float]:
        """Every position a move to `target` may send (approach legs included)."""
        if isinstance(self.motion, PositionerMotion):
            return self.motion.legs(spec, None, target)
        return [target]


@dataclass(frozen=True)
class LoadCheck:
    """What an excitation source says of a planned peak current into the sample."""

    problem: tuple[str, str] | None = None  # (what is wrong, the fix): the protocol is refused
    warnings: tuple[str, ...] = ()
    compliance_V: float | None = None


def no_load_check(spec: Any, peak_current_A: float, expected_voltage_V: float) -> LoadCheck:
    return LoadCheck()


def no_checks(spec: Any) -> None:
    """A role whose rig entry needs nothing beyond its model's own validation."""


def nothing_to_configure(driver: Any, spec: Any) -> None:
    """A role the runner does not configure at the start of a run."""


def no_safe_state(driver: Any, finish: Mapping[str, object]) -> list[SafeAction]:
    """A role that needs nothing done at the end of a run."""
    return []


def no_verification(driver: Any, finish: Mapping[str, object]) -> list[SafeCheck]:
    """A role whose safe state is not read back (it is commanded only)."""
    return []


@dataclass(frozen=True)
class Role(Generic[DriverT]):
    name: str
    interface: type  # the typing.Protocol a driver of this role implements
    driver: type  # the built-in driver (speaks the role's dialect with the rig's overrides)
    spec: type[InstrumentSpec]  # the rig-file entry (pydantic, discriminated by `role`)
    summary: str  # one line for docs and error messages
    template_limits: tuple[TemplateLimit, ...] = ()
    axis: Axis | None = None
    required: bool = False  # every rig needs one
    at_most_one: bool = True
    # Semantic checks of one rig entry beyond its model; raise InputError with a key path
    # relative to the entry, e.g. ("limits",).
    check: Callable[[Any], None] = no_checks
    # Configure a driver from its rig entry at the start of a run (idempotent, no sleeping).
    configure: Callable[[Any, Any], None] = nothing_to_configure
    # The calls that leave this instrument safe, given the protocol's `finish` section.
    safe_state: Callable[[Any, Mapping[str, object]], list[SafeAction]] = no_safe_state
    # The read-backs that show the safe state was reached, after `safe_state`'s calls.
    verify_safe: Callable[[Any, Mapping[str, object]], list[SafeCheck]] = no_verification
    # (rig entry, planned peak current, voltage it needs across the sample) -> LoadCheck
    check_load: Callable[[Any, float, float], LoadCheck] = no_load_check
    shutdown_rank: int = 100  # lower first: the current source goes before everything else
    order: int = 100  # registry order (tables, listings); the dialect is dialects/<name>.yaml

    @property
    def setting_keys(self) -> frozenset[str]:
        return frozenset(self.spec.model_fields) - COMMON_KEYS

    @property
    def limit_keys(self) -> frozenset[str]:
        limits_model = self.spec.model_fields["limits"].annotation
        return frozenset(getattr(limits_model, "model_fields", {}))


def entry_error(problem: str, key: Sequence[str | int], fix: str = "") -> InputError:
    """An error in one rig entry; the loader prefixes the entry's key path."""
    return InputError(problem, key=tuple(key), fix=fix)
