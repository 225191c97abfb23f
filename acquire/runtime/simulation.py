"""The simulated rig for a protocol (`run --simulate`, `flipsweep serve`, the benches)."""

from __future__ import annotations

from acquire.inputs.load import LoadedProtocol, LoadedRig
from acquire.inputs.simulated_sample import simulated_sample
from sim_instruments.sample_model import BilayerSample
from sim_instruments.simulated_rig import SimulatedRig, open_simulated_rig
from sim_instruments.world import Clock


def sample_for(loaded: LoadedProtocol, rig: LoadedRig, seed: int | None) -> BilayerSample:
    return simulated_sample(loaded.protocol, dict(rig.rig.simulation), rig.document.source, seed)


def simulate(loaded: LoadedProtocol, rig: LoadedRig, clock: Clock, seed: int | None
             ) -> SimulatedRig:
    return open_simulated_rig(rig.rig, sample_for(loaded, rig, seed), clock)
