"""The simulated sample and rig for a protocol: geometry from its sample section, the rest
from the rig's `simulation:` settings. Shared by `run --simulate` and `flipsweep serve`."""

from __future__ import annotations

from acquire.inputs.load import LoadedProtocol, LoadedRig
from acquire.inputs.stack import LayerShare, carrier_index, channel_resistance, current_fractions
from sim_instruments.sample_model import BilayerSample, SampleParameters
from sim_instruments.simulated_rig import SimulatedRig, open_simulated_rig
from sim_instruments.world import Clock, sample_overrides


def sample_for(loaded: LoadedProtocol, rig: LoadedRig, seed: int | None) -> BilayerSample:
    """Raises InputError located at the rig's `simulation:` for an unknown or bad parameter.

    The simulated device is the stack the protocol describes (its layers, not a measured sheet
    resistance: that is what a real device might disagree with).
    """
    sample = loaded.protocol.sample
    layers = [LayerShare(layer.name, layer.thickness, layer.resistivity, layer is sample.carrier)
              for layer in sample.layers]
    length, width = sample.channel.length, sample.channel.width
    channel: dict[str, object] = {
        "resistance_ohm": channel_resistance(length, width, layers),
        "length_m": length, "width_m": width,
        "carrier_thickness_m": layers[carrier_index(layers)].thickness_m,
        "carrier_fraction": current_fractions(layers)[carrier_index(layers)],
    }
    try:
        # The rig's settings win: a rehearsal may stand in a device unlike the protocol's.
        parameters = SampleParameters.with_overrides(
            **{**channel, **sample_overrides(rig.rig.simulation)})
    except (TypeError, ValueError) as error:
        raise rig.document.source.error(str(error), ("simulation",)) from None
    return BilayerSample(parameters, loaded.protocol.rotation_plane, seed)


def simulate(loaded: LoadedProtocol, rig: LoadedRig, clock: Clock, seed: int | None
             ) -> SimulatedRig:
    return open_simulated_rig(rig.rig, sample_for(loaded, rig, seed), clock)
