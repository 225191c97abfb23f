"""How a current divides between the layers of a stack: the parallel-resistor model.

Each layer of thickness t and resistivity rho is a resistor of conductance w*t/(rho*L); the
layers share the voltage, so each carries I * (t/rho) / sum(t_k/rho_k). With a measured sheet
resistance of the whole stack, a layer's share is its own sheet conductance over the measured
one (any unlisted or interface conduction stays unassigned). This is the project's one copy of
the model: planning, reduction, analysis and the simulated sample all take it from here.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class LayerShare:
    name: str
    thickness_m: float
    resistivity_ohm_m: float
    carrier: bool

    @property
    def sheet_conductance_S(self) -> float:
        return self.thickness_m / self.resistivity_ohm_m


def sheet_conductance(layers: Sequence[LayerShare]) -> float:
    """Conductance per square of the stack, in siemens."""
    return sum(layer.sheet_conductance_S for layer in layers)


def current_fractions(
    layers: Sequence[LayerShare], sheet_resistance_ohm: float | None = None
) -> list[float]:
    """Fraction of the total current in each layer."""
    total = (1.0 / sheet_resistance_ohm) if sheet_resistance_ohm else sheet_conductance(layers)
    return [layer.sheet_conductance_S / total for layer in layers]


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


def carrier_index(layers: Sequence[LayerShare]) -> int:
    """The layer marked as the carrier; a lone layer is the carrier even if not marked."""
    return next((i for i, layer in enumerate(layers) if layer.carrier), 0)


def carrier_density_per_ampere(
    width_m: float, layers: Sequence[LayerShare], sheet_resistance_ohm: float | None = None
) -> float:
    """Current density in the carrier layer per ampere of total current (A/m^2 per A)."""
    return layer_current_densities(1.0, width_m, layers, sheet_resistance_ohm)[
        carrier_index(layers)
    ]


def channel_resistance(
    length_m: float,
    width_m: float,
    layers: Sequence[LayerShare],
    sheet_resistance_ohm: float | None = None,
) -> float:
    """Resistance between the voltage probes: R = L / (w * sum(t_i / rho_i)), or the measured
    sheet resistance times the number of squares."""
    if sheet_resistance_ohm:
        return sheet_resistance_ohm * length_m / width_m
    return length_m / (width_m * sheet_conductance(layers))


def layers_from_records(records: Sequence[Any]) -> list[LayerShare]:
    """Layers from run.json's normalised protocol (dicts with SI-suffixed keys)."""
    return [
        LayerShare(str(record.get("name", "")), float(record["thickness_m"]),
                   float(record["resistivity_ohm_m"]), bool(record.get("carrier", False)))
        for record in records
    ]


@dataclass(frozen=True)
class StackGeometry:
    """The protocol's sample section as the numbers the rest of the code needs."""

    length_m: float
    width_m: float
    layers: tuple[LayerShare, ...]
    sheet_resistance_ohm: float | None

    @classmethod
    def from_sample(cls, sample: Any) -> StackGeometry:
        carrier = sample.carrier
        layers = tuple(
            LayerShare(layer.name, layer.thickness, layer.resistivity, layer is carrier)
            for layer in sample.layers
        )
        return cls(sample.channel.length, sample.channel.width, layers, sample.sheet_resistance)

    @property
    def carrier(self) -> LayerShare:
        return self.layers[carrier_index(self.layers)]

    @property
    def carrier_name(self) -> str:
        return self.carrier.name

    @property
    def carrier_fraction(self) -> float:
        return current_fractions(self.layers, self.sheet_resistance_ohm)[
            carrier_index(self.layers)
        ]

    @property
    def resistance_ohm(self) -> float:
        return channel_resistance(
            self.length_m, self.width_m, self.layers, self.sheet_resistance_ohm
        )

    @property
    def carrier_density_per_ampere(self) -> float:
        return carrier_density_per_ampere(self.width_m, self.layers, self.sheet_resistance_ohm)

    def densities(self, current_A: float) -> dict[str, float]:
        values = layer_current_densities(
            current_A, self.width_m, self.layers, self.sheet_resistance_ohm
        )
        return {layer.name: value for layer, value in zip(self.layers, values)}
