"""Pydantic types for quantities with units: SI floats inside, text with a unit in the schema."""

from __future__ import annotations

from typing import Annotated

from pydantic import BeforeValidator, WithJsonSchema

from drivers import units


def quantity_type(dimension: units.Dimension) -> object:
    def parse(value: object) -> float:
        try:
            return units.to_si(value, dimension)
        except units.UnitError as error:
            raise ValueError(str(error)) from None

    schema = {
        "type": "string",
        "description": (
            f"{units.article(dimension.name)} with its unit, e.g. '{dimension.example}'"
        ),
        "examples": [dimension.example],
    }
    return Annotated[float, BeforeValidator(parse), WithJsonSchema(schema)]


Current = quantity_type(units.CURRENT)
Field = quantity_type(units.FIELD)
Angle = quantity_type(units.ANGLE)
Temperature = quantity_type(units.TEMPERATURE)
Duration = quantity_type(units.TIME)
Length = quantity_type(units.LENGTH)
Resistivity = quantity_type(units.RESISTIVITY)
Resistance = quantity_type(units.RESISTANCE)
CurrentDensity = quantity_type(units.CURRENT_DENSITY)
Voltage = quantity_type(units.VOLTAGE)
FieldRate = quantity_type(units.FIELD_RATE)
AngleRate = quantity_type(units.ANGLE_RATE)
TemperatureRate = quantity_type(units.TEMPERATURE_RATE)
Frequency = quantity_type(units.FREQUENCY)
