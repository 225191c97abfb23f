"""The protocol's sample section as the numbers the rest of the code needs."""

from __future__ import annotations

from dataclasses import dataclass

from acquire.current_division import (
    LayerShare,
    carrier_density_per_ampere,
    channel_resistance,
    layer_current_densities,
)
from acquire.protocol import Sample


@dataclass(frozen=True)
class SampleGeometry:
    length_m: float
    width_m: float
    layers: tuple[LayerShare, ...]
    sheet_resistance_ohm: float | None

    @classmethod
    def from_sample(cls, sample: Sample) -> SampleGeometry:
        carrier = sample.carrier
        layers = tuple(
            LayerShare(layer.name, layer.thickness, layer.resistivity, layer is carrier)
            for layer in sample.layers
        )
        return cls(sample.channel.length, sample.channel.width, layers, sample.sheet_resistance)

    @property
    def carrier_name(self) -> str:
        return next(layer.name for layer in self.layers if layer.carrier)

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
