"""Physical quantities written by the user, parsed with pint at the edge; SI floats inside.

Every quantity in a protocol or rig file must carry a unit: a bare number is an error,
never a guess. Fields are stored as mu0*H in tesla, so 300 Oe and 30 mT are the same
value (pint's Gaussian context converts oersted and gauss; A/m is multiplied by mu0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import pint

UNIT_REGISTRY: pint.UnitRegistry = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
UNIT_REGISTRY.define("ppm = 1e-6 = _ppm_")


@dataclass(frozen=True)
class Dimension:
    """A kind of quantity: its SI unit, pint dimensionality and an example for error messages."""

    name: str
    si_unit: str
    example: str


CURRENT = Dimension("current", "A", "1 mA")
FIELD = Dimension("magnetic field", "T", "200 mT")
ANGLE = Dimension("angle", "deg", "10 deg")
TEMPERATURE = Dimension("temperature", "K", "300 K")
TIME = Dimension("time", "s", "20 ms")
LENGTH = Dimension("length", "m", "40 um")
RESISTIVITY = Dimension("resistivity", "ohm*m", "120 uohm*cm")
RESISTANCE = Dimension("resistance", "ohm", "1.8 kohm")
CURRENT_DENSITY = Dimension("current density", "A/m^2", "2e11 A/m^2")
VOLTAGE = Dimension("voltage", "V", "10 V")
FIELD_RATE = Dimension("field ramp rate", "T/s", "1 T/min")
ANGLE_RATE = Dimension("angular speed", "deg/s", "10 deg/s")
TEMPERATURE_RATE = Dimension("temperature rate", "K/s", "2 K/min")
FREQUENCY = Dimension("frequency", "Hz", "50 Hz")
POWER = Dimension("power", "W", "1 mW")

ALL_DIMENSIONS = (
    CURRENT, FIELD, ANGLE, TEMPERATURE, TIME, LENGTH, RESISTIVITY, RESISTANCE,
    CURRENT_DENSITY, VOLTAGE, FIELD_RATE, ANGLE_RATE, TEMPERATURE_RATE, FREQUENCY, POWER,
)


def article(name: str) -> str:
    """The name with its indefinite article: 'an angle', 'a current'."""
    return ("an " if name[0] in "aeiou" else "a ") + name


class UnitError(ValueError):
    """A quantity that cannot be read as the expected dimension; the message says how to fix it."""


@lru_cache(maxsize=4096)
def _parse(text: str) -> pint.Quantity:
    return UNIT_REGISTRY.Quantity(text)


def _field_in_tesla(quantity: pint.Quantity) -> float | None:
    if quantity.check("[magnetic_field]") or quantity.check("[mass] / [time] ** 2 / [current]"):
        return float(quantity.to("T").magnitude)
    if quantity.check("[current] / [length]"):
        # mu0*H: the field a user writes in A/m is stored as the flux density it makes in vacuum.
        mu0 = UNIT_REGISTRY.Quantity(1, "mu_0")
        return float((quantity * mu0).to("T").magnitude)
    try:
        with UNIT_REGISTRY.context("Gaussian"):
            return float(quantity.to("T").magnitude)
    except pint.DimensionalityError:
        return None


def _angle_in_degrees(quantity: pint.Quantity) -> float | None:
    if quantity.unitless:
        return None
    if quantity.dimensionless:
        return float(quantity.to("deg").magnitude)
    return None


def to_si(value: object, dimension: Dimension) -> float:
    """Parse `value` ("20 mT", "1 mA", ...) and return its magnitude in the dimension's SI unit.

    Angles are the one exception to strict SI: they are kept in degrees, the unit every
    rotator and every plot in the trade uses.
    """
    if isinstance(value, bool) or value is None:
        raise UnitError(
            f"expected {article(dimension.name)} with a unit, like {dimension.example!r}"
        )
    if isinstance(value, (int, float)):
        raise UnitError(
            f"{value!r} has no unit; write the {dimension.name} with its unit, "
            f"like {dimension.example!r}"
        )
    if not isinstance(value, str):
        raise UnitError(
            f"expected {article(dimension.name)} like {dimension.example!r}, got {value!r}"
        )
    text = value.strip().replace("Ω", "ohm").replace("µ", "u").replace("μ", "u")
    try:
        quantity = _parse(text)
    except Exception as error:  # pint raises several unrelated types for bad text
        raise UnitError(
            f"cannot read {value!r} as {article(dimension.name)} ({type(error).__name__}); "
            f"write it like {dimension.example!r}"
        ) from None
    if not isinstance(quantity, pint.Quantity) or quantity.unitless:
        raise UnitError(
            f"{value!r} has no unit; write the {dimension.name} with its unit, "
            f"like {dimension.example!r}"
        )
    if dimension is FIELD:
        result = _field_in_tesla(quantity)
    elif dimension is ANGLE:
        result = _angle_in_degrees(quantity)
    elif dimension is ANGLE_RATE:
        result = (
            float(quantity.to("deg/s").magnitude) if quantity.check("1/[time]") else None
        )
    elif dimension is FIELD_RATE:
        result = _field_rate(quantity)
    else:
        try:
            result = float(quantity.to(dimension.si_unit).magnitude)
        except pint.DimensionalityError:
            result = None
    if result is None or not math.isfinite(result):
        raise UnitError(
            f"{value!r} is not {article(dimension.name)}; write it like {dimension.example!r}"
        )
    # 15 significant digits: drops the binary noise of unit scaling (40 um -> 4e-05, not
    # 3.9999999999999996e-05) and stays far below any instrument's resolution.
    return float(f"{result:.15g}")


def _field_rate(quantity: pint.Quantity) -> float | None:
    per_second = quantity * UNIT_REGISTRY.Quantity(1, "s")
    field = _field_in_tesla(per_second.to_reduced_units())
    return field


def format_si(value: float, dimension: Dimension) -> str:
    """The unit-normalised text written back by `check --show`."""
    return f"{value:.12g} {dimension.si_unit}"
