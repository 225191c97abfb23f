"""Quantities with units at the edge: checked against pint itself, the unit definitions and CODATA.

Tolerances: a conversion that only moves a decimal prefix is exact to a few float ulps, so it
is checked to 1e-12 relative. A field written in Oe, G or A/m goes through mu0; since the 2019
SI revision mu0 is a measured constant, and pint and scipy may carry different CODATA releases
(from memory: 2018 gives 1.25663706212e-6, 2022 gives 1.25663706127e-6 N/A^2, 7e-10 apart
relative), so those checks use 1e-9 relative -- far finer than a lab's field calibration
(a few 1e-4 at best; common practice).
"""

from __future__ import annotations

import math

import pint
import pytest
from scipy.constants import mu_0  # CODATA recommended value, as shipped with scipy

from drivers import units
from drivers.units import UnitError, to_si

PREFIX_REL = 1e-12
MU0_REL = 1e-9

# An independent registry: the same library, but none of the project's definitions or contexts.
REFERENCE = pint.UnitRegistry()

# BIPM, The International System of Units, 8th ed. (2006), Table 9 (units of the CGS system):
# 1 Oe corresponds to (1000 / 4 pi) A/m, 1 G to 1e-4 T. The 9th ed. (2019) is the current
# brochure; from memory it no longer tabulates the CGS units, so the 8th ed. table is cited.
OERSTED_IN_A_PER_M = 1000.0 / (4.0 * math.pi)
GAUSS_IN_T = 1e-4


# --- magnetic field: stored as mu0*H in tesla -------------------------------------------------


def test_300_oersted_is_30_millitesla_as_mu0_h() -> None:
    expected = 300 * OERSTED_IN_A_PER_M * mu_0  # mu0 * H, SI Brochure definition + CODATA mu0
    assert to_si("300 Oe", units.FIELD) == pytest.approx(expected, rel=MU0_REL)
    assert to_si("300 Oe", units.FIELD) == pytest.approx(30e-3, rel=MU0_REL)
    assert to_si("300 Oe", units.FIELD) == pytest.approx(to_si("30 mT", units.FIELD), rel=MU0_REL)


def test_kilo_oersted() -> None:
    # 10 kOe = 1e4 * 1000/(4 pi) A/m -> mu0*H = 1 T (SI Brochure 8th ed., Table 9)
    assert to_si("10 kOe", units.FIELD) == pytest.approx(1e4 * OERSTED_IN_A_PER_M * mu_0,
                                                         rel=MU0_REL)


def test_gauss_is_a_tenth_of_a_millitesla() -> None:
    # 1 G = 1e-4 T (SI Brochure 8th ed., Table 9)
    assert to_si("1 G", units.FIELD) == pytest.approx(GAUSS_IN_T, rel=MU0_REL)
    assert to_si("5 kG", units.FIELD) == pytest.approx(0.5, rel=MU0_REL)


@pytest.mark.parametrize("text, amperes_per_metre", [("1 A/m", 1.0), ("800 kA/m", 8e5)])
def test_ampere_per_metre_is_multiplied_by_mu0(text: str, amperes_per_metre: float) -> None:
    # B = mu0 * H with scipy's CODATA mu0 as the independent reference
    assert to_si(text, units.FIELD) == pytest.approx(amperes_per_metre * mu_0, rel=MU0_REL)


@pytest.mark.parametrize("text, tesla", [("2 T", 2.0), ("200 mT", 0.2), ("-40 mT", -0.04),
                                          ("50 uT", 50e-6)])
def test_tesla_and_prefixes(text: str, tesla: float) -> None:
    assert to_si(text, units.FIELD) == pytest.approx(tesla, rel=PREFIX_REL)


def test_field_ramp_rates() -> None:
    assert to_si("1 T/min", units.FIELD_RATE) == pytest.approx(1 / 60, rel=PREFIX_REL)
    assert to_si("5 mT/s", units.FIELD_RATE) == pytest.approx(5e-3, rel=PREFIX_REL)
    # 100 Oe/s -> mu0 * 100 * 1000/(4 pi) A/m per second (SI Brochure 8th ed. + CODATA)
    assert to_si("100 Oe/s", units.FIELD_RATE) == pytest.approx(
        100 * OERSTED_IN_A_PER_M * mu_0, rel=MU0_REL
    )


# --- everything else: against pint's own conversion and by hand -------------------------------


@pytest.mark.parametrize(
    "text, dimension, unit",
    [
        ("2.5 mA", units.CURRENT, "A"),
        ("40 uA", units.CURRENT, "A"),
        ("300 K", units.TEMPERATURE, "K"),
        ("50 mK", units.TEMPERATURE, "K"),
        ("20 ms", units.TIME, "s"),
        ("30 min", units.TIME, "s"),
        ("4 nm", units.LENGTH, "m"),
        ("40 um", units.LENGTH, "m"),
        ("40 uohm*cm", units.RESISTIVITY, "ohm*m"),
        ("2e11 A/m^2", units.CURRENT_DENSITY, "A/m**2"),
        ("1e7 A/cm^2", units.CURRENT_DENSITY, "A/m**2"),
        ("10 V", units.VOLTAGE, "V"),
        ("1.8 kohm", units.RESISTANCE, "ohm"),
        ("60 Hz", units.FREQUENCY, "Hz"),
        ("2 K/min", units.TEMPERATURE_RATE, "K/s"),
        ("1 rad", units.ANGLE, "deg"),
        ("10 deg/s", units.ANGLE_RATE, "deg/s"),
    ],
)
def test_same_as_pint(text: str, dimension: units.Dimension, unit: str) -> None:
    expected = REFERENCE.Quantity(text).to(unit).magnitude
    assert to_si(text, dimension) == pytest.approx(expected, rel=PREFIX_REL)


@pytest.mark.parametrize(
    "text, dimension, expected",
    [
        ("3 mA", units.CURRENT, 3e-3),
        ("250 uA", units.CURRENT, 250e-6),
        ("90 deg", units.ANGLE, 90.0),  # angles stay in degrees (the project's one exception)
        ("1 rad", units.ANGLE, 180 / math.pi),  # 1 rad = 180/pi deg, by definition
        ("0.5 rad/s", units.ANGLE_RATE, 90 / math.pi),
        ("4.2 K", units.TEMPERATURE, 4.2),
        ("500 ms", units.TIME, 0.5),
        ("2 min", units.TIME, 120.0),
        ("5 nm", units.LENGTH, 5e-9),
        ("4 um", units.LENGTH, 4e-6),
        ("40 µm", units.LENGTH, 40e-6),  # micro sign U+00B5
        ("40 μm", units.LENGTH, 40e-6),  # Greek mu U+03BC
        ("30 uohm*cm", units.RESISTIVITY, 30e-8),  # 1 uOhm cm = 1e-6 ohm * 1e-2 m = 1e-8 ohm m
        ("150 µΩ*cm", units.RESISTIVITY, 150e-8),
        ("1.6e11 A/m^2", units.CURRENT_DENSITY, 1.6e11),
        ("1e7 A/cm^2", units.CURRENT_DENSITY, 1e11),  # 1 cm^2 = 1e-4 m^2
        ("5 K/min", units.TEMPERATURE_RATE, 5 / 60),
    ],
)
def test_by_hand(text: str, dimension: units.Dimension, expected: float) -> None:
    assert to_si(text, dimension) == pytest.approx(expected, rel=PREFIX_REL)


# --- no guessing ------------------------------------------------------------------------------


@pytest.mark.parametrize("value", [5, 5.0, 0, "5", " 2.5 ", "-3"])
def test_a_missing_unit_is_an_error(value: object) -> None:
    with pytest.raises(UnitError, match="has no unit"):
        to_si(value, units.CURRENT)


@pytest.mark.parametrize("value", [None, True, [1, "mA"], {"value": 1}])
def test_not_a_quantity_at_all(value: object) -> None:
    with pytest.raises(UnitError, match="1 mA"):  # the message shows how to write it
        to_si(value, units.CURRENT)


def test_a_bare_number_is_an_error_for_every_dimension() -> None:
    for dimension in units.ALL_DIMENSIONS:
        with pytest.raises(UnitError, match="has no unit"):
            to_si(1.0, dimension)


@pytest.mark.parametrize(
    "text, dimension",
    [
        ("2 mA", units.FIELD),
        ("1 T", units.CURRENT),
        ("1 mT", units.ANGLE),
        ("10 deg/s", units.ANGLE),
        ("10 deg", units.ANGLE_RATE),
        ("300 K", units.TIME),
        ("1 T", units.FIELD_RATE),
        ("1 T/min", units.FIELD),
        ("1 A/m", units.CURRENT_DENSITY),
        ("5 uohm", units.RESISTIVITY),
        ("5 K", units.LENGTH),
    ],
)
def test_wrong_dimension_is_an_error(text: str, dimension: units.Dimension) -> None:
    with pytest.raises(UnitError) as error:
        to_si(text, dimension)
    message = str(error.value)
    assert f"is not {units.article(dimension.name)}" in message
    assert dimension.example in message  # says how to write it


@pytest.mark.parametrize("text", ["one mA", "5 furlongs per mA", "3 mA +", "inf mA", "nan mA"])
def test_unreadable_or_not_finite(text: str) -> None:
    with pytest.raises(UnitError):
        to_si(text, units.CURRENT)


def test_messages_use_the_right_article() -> None:
    with pytest.raises(UnitError, match="is not an angle;"):
        to_si("3 mA", units.ANGLE)
    with pytest.raises(UnitError, match="is not a current;"):
        to_si("3 deg", units.CURRENT)


def test_format_si_spells_the_si_unit() -> None:
    assert units.format_si(0.03, units.FIELD) == "0.03 T"
    assert units.format_si(4e-7, units.RESISTIVITY) == "4e-07 ohm*m"


# --- one number and a unit, nothing computed -------------------------------------------------


@pytest.mark.parametrize("text", ["10**10**10 mA", "2 mA * 3", "1 mA + 1 mA", "(2+3) mA",
                                  "2 mA / 2", "1 mA**100", "3 mA^10", "1e5000 mA"])
def test_arithmetic_is_never_evaluated(text: str) -> None:
    with pytest.raises(UnitError, match=r"not|cannot read"):
        to_si(text, units.CURRENT)


@pytest.mark.parametrize("text, expected", [("2e11 A/m^2", 2e11), ("1e7 A/cm**2", 1e11),
                                            ("3 A / m ^ 2", 3.0), ("4 A m^-2", 4.0)])
def test_unit_powers_and_products_are_read(text: str, expected: float) -> None:
    # 1 cm^2 = 1e-4 m^2
    assert to_si(text, units.CURRENT_DENSITY) == pytest.approx(expected, rel=PREFIX_REL)


# --- exact CGS fields: one rounding rule for values and limits --------------------------------


@pytest.mark.parametrize("text, tesla", [("20 kOe", 2.0), ("1 Oe", 1e-4), ("1 G", 1e-4),
                                         ("25 kG", 2.5), ("-3 kOe", -0.3)])
def test_oersted_and_gauss_are_exact(text: str, tesla: float) -> None:
    # CGS definitions (SI Brochure 8th ed., Table 9): 1 G = 1e-4 T; 1 Oe = 1000/(4 pi) A/m,
    # which is 1e-4 T as mu0*H with the CGS-era mu0 = 4 pi 1e-7 exactly. Exact to the last
    # digit (the decimal rendering of the product), so a limit and a value written alike are
    # the same float.
    assert to_si(text, units.FIELD) == tesla


def test_a_field_rate_in_oersted_is_exact() -> None:
    assert to_si("6 kOe/min", units.FIELD_RATE) == 0.01  # 0.6 T per 60 s


# --- temperatures are absolute, in kelvin ------------------------------------------------------


@pytest.mark.parametrize("text, absolute, difference", [
    # T/K = t/degC + 273.15 and T/K = (t/degF - 32) * 5/9 + 273.15 (SI Brochure 9th ed.,
    # sec. 2.3.1 for Celsius; the Fahrenheit relation from memory)
    ("0.05 degC", "273.2 K", "0.05 K"),
    ("20 degC", "293.15 K", "20 K"),
    ("50 degF", "283.15 K", "27.7778 K"),
])
def test_relative_temperatures_are_refused_with_both_readings(
    text: str, absolute: str, difference: str
) -> None:
    with pytest.raises(UnitError) as error:
        to_si(text, units.TEMPERATURE)
    message = str(error.value)
    assert f"'{absolute}'" in message and f"'{difference}'" in message


@pytest.mark.parametrize("text, dimension", [("2 degC/min", units.TEMPERATURE_RATE),
                                             ("0.1 delta_degC", units.TEMPERATURE)])
def test_relative_temperature_rates_and_deltas_are_refused(
    text: str, dimension: units.Dimension
) -> None:
    with pytest.raises(UnitError, match="kelvin"):
        to_si(text, dimension)
