"""The simulated device a protocol describes: its channel and stack, with the sample-model
settings of the rig's `simulation:` section (checked with the rig, before any rehearsal)."""

from __future__ import annotations

from typing import Any

from acquire.inputs.stack import LayerShare, carrier_index, channel_resistance, current_fractions
from acquire.inputs.yaml_source import SourceMap
from sim_instruments.pyvisa_sim_definitions import OWN_DRIVERS
from sim_instruments.sample_model import BilayerSample, SampleParameters
from sim_instruments.world import sample_overrides


def simulated_sample(protocol: Any, simulation: dict[str, Any], source: SourceMap,
                     seed: int | None) -> BilayerSample:
    """Raises InputError located at the rig's `simulation:` (via `source`, the rig file's map)
    for an unknown or bad parameter.

    The simulated device is the stack the protocol describes (its layers, not a measured sheet
    resistance: that is what a real device might disagree with).
    """
    sample = protocol.sample
    layers = [LayerShare(layer.name, layer.thickness, layer.resistivity, layer is sample.carrier)
              for layer in sample.layers]
    length, width = sample.channel.length, sample.channel.width
    carrier = carrier_index(layers)
    channel: dict[str, object] = {
        "resistance_ohm": channel_resistance(length, width, layers),
        "length_m": length, "width_m": width,
        "carrier_thickness_m": layers[carrier].thickness_m,
        "carrier_fraction": current_fractions(layers)[carrier],
        # The model takes the spin Hall sign from the carrier's material unless the rig sets it.
        "carrier_material": layers[carrier].name,
    }
    model_settings = {key: value for key, value in simulation.items() if key != OWN_DRIVERS}
    try:
        # The rig's settings win: a rehearsal may stand in a device unlike the protocol's.
        parameters = SampleParameters.with_overrides(
            **{**channel, **sample_overrides(model_settings)})
    except (TypeError, ValueError) as error:
        raise source.error(str(error), ("simulation",)) from None
    return BilayerSample(parameters, protocol.rotation_plane, seed)
