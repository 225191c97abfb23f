"""The simulated sample and rig for a protocol: geometry from its sample section, the rest
from the rig's `simulation:` settings. Shared by `run --simulate` and `flipsweep serve`."""

from __future__ import annotations

from acquire.clock import Clock
from acquire.load import LoadedProtocol, LoadedRig
from sim_instruments.sample_model import BilayerSample, LayerSI, SampleParameters
from sim_instruments.simulated_rig import SimulatedRig, open_simulated_rig
from sim_instruments.world import sample_overrides


def sample_for(loaded: LoadedProtocol, rig: LoadedRig, seed: int | None) -> BilayerSample:
    """Raises InputError located at the rig's `simulation:` for an unknown or bad parameter."""
    sample = loaded.protocol.sample
    layers = [LayerSI(layer.name, layer.thickness, layer.resistivity, layer is sample.carrier)
              for layer in sample.layers]
    try:
        parameters = SampleParameters.from_geometry(
            sample.channel.length, sample.channel.width, layers,
            **sample_overrides(rig.rig.simulation),
        )
    except (TypeError, ValueError) as error:
        raise rig.document.source.error(str(error), ("simulation",)) from None
    return BilayerSample(parameters, loaded.protocol.rotation_plane, seed)


def simulate(loaded: LoadedProtocol, rig: LoadedRig, clock: Clock, seed: int | None
             ) -> SimulatedRig:
    return open_simulated_rig(rig.rig, sample_for(loaded, rig, seed), clock)
