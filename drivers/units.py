"""Physical quantities written by the user, parsed with pint at the edge; SI floats inside.

Every quantity in a protocol or rig file must carry a unit: a bare number is an error,
never a guess. A quantity is one number and a unit, nothing else: the text is read with our
own grammar before pint sees the unit, so no arithmetic is ever evaluated ("10**10**10 mA"
is refused, not computed). Fields are stored as mu0*H in tesla: 1 Oe and 1 G are exactly
1e-4 T (the CGS definitions), A/m is multiplied by mu0. Temperatures are absolute, in kelvin:
a Celsius or Fahrenheit value is refused with its kelvin equivalent, because the same text
would mean a temperature (0.05 degC = 273.2 K) or a difference (0.05 K) depending on the key.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache

import pint

UNIT_REGISTRY: pint.UnitRegistry = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
UNIT_REGISTRY.define("ppm = 1e-6 = _ppm_")
UNIT_REGISTRY.define("ppb = 1e-9 = _ppb_")
# A noise density is written per root hertz: '20 nV/rtHz' (our grammar allows no '^0.5').
UNIT_REGISTRY.define("rtHz = hertz ** 0.5")


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
NOISE_DENSITY = Dimension("voltage noise density", "V/rtHz", "20 nV/rtHz")
RATIO = Dimension("ratio", "dimensionless", "0.05 ppm")  # ppm, ppb or percent

ALL_DIMENSIONS = (
    CURRENT, FIELD, ANGLE, TEMPERATURE, TIME, LENGTH, RESISTIVITY, RESISTANCE,
    CURRENT_DENSITY, VOLTAGE, FIELD_RATE, ANGLE_RATE, TEMPERATURE_RATE, FREQUENCY, POWER,
    NOISE_DENSITY, RATIO,
)


def article(name: str) -> str:
    """The name with its indefinite article: 'an angle', 'a current'."""
    return ("an " if name[0] in "aeiou" else "a ") + name


class UnitError(ValueError):
    """A quantity that cannot be read as the expected dimension; the message says how to fix it."""


# The one rounding rule of values and limits alike: parsed quantities and loop values keep 15
# significant digits (drops the binary noise of unit scaling and of start + k*step, far below
# any instrument's resolution); limits then compare with drivers.command_limits.ROUND_OFF.
SIGNIFICANT_DIGITS = 15
# Unit text longer than this is not a unit anyone writes.
MAX_UNIT_TEXT = 40
# One number (SCPI/decimal: sign, digits, point, exponent), then the unit.
_NUMBER = re.compile(r"\s*([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d{1,3})?)\s*")
# A unit: words joined by '*', '/', '.' or spaces, each with at most a one-digit power
# (m^2, s**-1), and parentheses. No digits elsewhere: nothing pint could compute.
_UNIT_TOKEN = re.compile(
    r"\s*(?:(?P<word>[A-Za-z_\u00b0]+)(?:\s*(?:\^|\*\*)\s*(?P<power>[-+]?[1-9]))?"
    r"|(?P<op>\*|/|\u00b7)|(?P<paren>[()]))"
)
_CGS_FIELD_UNITS = ("oersted", "gauss")
_RELATIVE_TEMPERATURE = ("degree_Celsius", "degree_Fahrenheit", "degree_Reaumur",
                         "degree_Rankine")


def tidy(value: float) -> float:
    """`value` with SIGNIFICANT_DIGITS digits: the project's one rounding of parsed values."""
    return float(f"{value:.{SIGNIFICANT_DIGITS}g}")


def _unit_text_ok(text: str) -> bool:
    if not text or len(text) > MAX_UNIT_TEXT:
        return False
    position, depth, words, expect_word = 0, 0, 0, True
    while position < len(text):
        token = _UNIT_TOKEN.match(text, position)
        if token is None or token.end() == position:
            return False
        position = token.end()
        if token["word"]:
            words += 1
            expect_word = False
        elif token["op"]:
            if expect_word:
                return False
            expect_word = True
        elif token["paren"] == "(":
            depth += 1
            expect_word = True
        else:
            depth -= 1
            if depth < 0 or expect_word:
                return False
    return words > 0 and depth == 0 and not expect_word


@lru_cache(maxsize=4096)
def _parse(text: str) -> pint.Quantity:
    """One number and one unit; ValueError for anything else (an expression, no unit)."""
    number = _NUMBER.match(text)
    if number is None:
        raise ValueError("no number")
    unit = text[number.end():].strip()
    if not unit:
        return UNIT_REGISTRY.Quantity(float(number.group(1)))  # reported as "no unit"
    if not _unit_text_ok(unit):
        raise ValueError("not one number and a unit")
    return UNIT_REGISTRY.Quantity(float(number.group(1)), UNIT_REGISTRY.parse_units(unit))


def _unit_names(quantity: pint.Quantity) -> tuple[str, ...]:
    return tuple(name for name, _ in quantity.unit_items())


def _cgs_field(quantity: pint.Quantity, per: str = "") -> float | None:
    """Oersted or gauss (per `per`, for rates) in tesla, exactly: 1 Oe = 1 G = 1e-4 T as
    mu0*H (not through pint's Gaussian context, which uses a measured mu0)."""
    if not any(cgs in name for name in _unit_names(quantity) for cgs in _CGS_FIELD_UNITS):
        return None
    try:
        return float(quantity.to(f"gauss{per}").magnitude) * 1e-4
    except pint.DimensionalityError:
        return None


def _field_in_tesla(quantity: pint.Quantity) -> float | None:
    cgs = _cgs_field(quantity)
    if cgs is not None:
        return cgs
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
    except Exception:  # our grammar, or pint for an unknown unit name
        raise UnitError(
            f"cannot read {value!r} as {article(dimension.name)}: write one number and a "
            f"unit, like {dimension.example!r} (no arithmetic)"
        ) from None
    # ppm and percent are unitless to pint, yet written as units: a ratio needs one of them.
    written = bool(_unit_names(quantity)) if isinstance(quantity, pint.Quantity) else False
    if not isinstance(quantity, pint.Quantity) or (
            quantity.unitless and not (dimension is RATIO and written)):
        raise UnitError(
            f"{value!r} has no unit; write the {dimension.name} with its unit, "
            f"like {dimension.example!r}"
        )
    if dimension in (TEMPERATURE, TEMPERATURE_RATE):
        _refuse_relative_temperature(value, quantity, dimension)
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
    elif dimension is RATIO:
        plain = set(_unit_names(quantity)) <= {"ppm", "ppb", "percent", "permille"}
        result = float(quantity.to("dimensionless").magnitude) if plain else None
    else:
        try:
            result = float(quantity.to(dimension.si_unit).magnitude)
        except pint.DimensionalityError:
            result = None
    if result is None or not math.isfinite(result):
        raise UnitError(
            f"{value!r} is not {article(dimension.name)}; write it like {dimension.example!r}"
        )
    # 40 um -> 4e-05, not 3.9999999999999996e-05 (see SIGNIFICANT_DIGITS)
    return tidy(result)


def _refuse_relative_temperature(value: str, quantity: pint.Quantity,
                                 dimension: Dimension) -> None:
    names = _unit_names(quantity)
    if not any(relative in name for name in names for relative in _RELATIVE_TEMPERATURE):
        return
    number = float(quantity.magnitude)
    if len(names) == 1 and "Celsius" in names[0] and not names[0].startswith("delta"):
        fix = (f"write kelvin: a temperature of {value} is '{number + 273.15:.6g} K', "
               f"a difference of {value} is '{number:.6g} K'")
    elif len(names) == 1 and "Fahrenheit" in names[0] and not names[0].startswith("delta"):
        fix = (f"write kelvin: a temperature of {value} is "
               f"'{(number - 32) * 5 / 9 + 273.15:.6g} K', a difference of {value} is "
               f"'{number * 5 / 9:.6g} K'")
    else:
        fix = f"write it in kelvin, like {dimension.example!r} (1 degC step = 1 K)"
    raise UnitError(f"{value!r} is a relative temperature scale, which is ambiguous here; {fix}")


def _field_rate(quantity: pint.Quantity) -> float | None:
    cgs = _cgs_field(quantity, "/s")
    if cgs is not None:
        return cgs
    per_second = quantity * UNIT_REGISTRY.Quantity(1, "s")
    field = _field_in_tesla(per_second.to_reduced_units())
    return field


def format_si(value: float, dimension: Dimension) -> str:
    """The unit-normalised text written back by `check --show`."""
    return f"{value:.12g} {dimension.si_unit}"
