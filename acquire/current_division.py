"""How a current divides between the layers of a stack: the parallel-resistor model.

Each layer of thickness t and resistivity rho is a resistor of conductance w*t/(rho*L); the
layers share the voltage, so each carries I * (t/rho) / sum(t_k/rho_k).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass


@dataclass(frozen=True)
class LayerShare:
    name: str
    thickness_m: float
    resistivity_ohm_m: float
    carrier: bool


def sheet_conductance(layers: Sequence[LayerShare]) -> float:
    """Conductance per square of the stack, in siemens."""
    return sum(layer.thickness_m / layer.resistivity_ohm_m for layer in layers)


def current_fractions(
    layers: Sequence[LayerShare], sheet_resistance_ohm: float | None = None
) -> list[float]:
    """Fraction of the total current in each layer.

    With a measured sheet resistance of the whole stack, a layer's share is its own sheet
    conductance over the measured one (any unlisted or interface conduction stays unassigned).
    """
    total = (1.0 / sheet_resistance_ohm) if sheet_resistance_ohm else sheet_conductance(layers)
    return [(layer.thickness_m / layer.resistivity_ohm_m) / total for layer in layers]


def layer_current_densities(
    current_A: float,
    width_m: float,
    layers: Sequence[LayerShare],
    sheet_resistance_ohm: float | None = None,
) -> list[float]:
    fractions = current_fractions(layers, sheet_resistance_ohm)
    return [
        current_A * fraction / (width_m * layer.thickness_m)
        for fraction, layer in zip(fractions, layers)
    ]


def carrier_density_per_ampere(
    width_m: float, layers: Sequence[LayerShare], sheet_resistance_ohm: float | None = None
) -> float:
    """Current density in the carrier layer per ampere of total current (A/m^2 per A)."""
    carrier_index = next((i for i, layer in enumerate(layers) if layer.carrier), 0)
    return layer_current_densities(1.0, width_m, layers, sheet_resistance_ohm)[carrier_index]


def channel_resistance(
    length_m: float,
    width_m: float,
    layers: Sequence[LayerShare],
    sheet_resistance_ohm: float | None = None,
) -> float:
    """Resistance between the voltage probes: sheet resistance times the number of squares."""
    sheet = sheet_resistance_ohm if sheet_resistance_ohm else 1.0 / sheet_conductance(layers)
    return sheet * length_m / width_m
