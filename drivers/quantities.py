"""Pydantic types for quantities with units: SI floats inside, text with a unit in the schema.

Each type is `Annotated[float, <parse with its dimension>, <its JSON schema>]`, so type
checkers see a float and pydantic parses the text ("20 mT") into SI.
"""

from __future__ import annotations

from typing import Annotated

from pydantic import BeforeValidator, WithJsonSchema

from drivers import units


def parsed_as(dimension: units.Dimension) -> BeforeValidator:
    def parse(value: object) -> float:
        try:
            return units.to_si(value, dimension)
        except units.UnitError as error:
            raise ValueError(str(error)) from None

    return BeforeValidator(parse)


def schema_of(dimension: units.Dimension) -> WithJsonSchema:
    return WithJsonSchema({
        "type": "string",
        "description": f"{units.article(dimension.name)} with its unit, e.g. "
                       f"'{dimension.example}'",
        "examples": [dimension.example],
    })


Current = Annotated[float, parsed_as(units.CURRENT), schema_of(units.CURRENT)]
Field = Annotated[float, parsed_as(units.FIELD), schema_of(units.FIELD)]
Angle = Annotated[float, parsed_as(units.ANGLE), schema_of(units.ANGLE)]
Temperature = Annotated[float, parsed_as(units.TEMPERATURE), schema_of(units.TEMPERATURE)]
Duration = Annotated[float, parsed_as(units.TIME), schema_of(units.TIME)]
Length = Annotated[float, parsed_as(units.LENGTH), schema_of(units.LENGTH)]
Resistivity = Annotated[float, parsed_as(units.RESISTIVITY), schema_of(units.RESISTIVITY)]
Resistance = Annotated[float, parsed_as(units.RESISTANCE), schema_of(units.RESISTANCE)]
CurrentDensity = Annotated[float, parsed_as(units.CURRENT_DENSITY),
                           schema_of(units.CURRENT_DENSITY)]
Voltage = Annotated[float, parsed_as(units.VOLTAGE), schema_of(units.VOLTAGE)]
FieldRate = Annotated[float, parsed_as(units.FIELD_RATE), schema_of(units.FIELD_RATE)]
AngleRate = Annotated[float, parsed_as(units.ANGLE_RATE), schema_of(units.ANGLE_RATE)]
TemperatureRate = Annotated[float, parsed_as(units.TEMPERATURE_RATE),
                            schema_of(units.TEMPERATURE_RATE)]
Frequency = Annotated[float, parsed_as(units.FREQUENCY), schema_of(units.FREQUENCY)]
Power = Annotated[float, parsed_as(units.POWER), schema_of(units.POWER)]
NoiseDensity = Annotated[float, parsed_as(units.NOISE_DENSITY), schema_of(units.NOISE_DENSITY)]
Ratio = Annotated[float, parsed_as(units.RATIO), schema_of(units.RATIO)]
