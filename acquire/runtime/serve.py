"""The simulated rig of a protocol served on loopback sockets (`flipsweep serve`)."""

from __future__ import annotations

from pathlib import Path

from acquire.inputs.load import LoadedProtocol, LoadedRig, check_pair, load_protocol, load_rig
from acquire.runtime.clock import RealClock
from acquire.runtime.simulation import sample_for
from sim_instruments.faults import FaultPlan
from sim_instruments.socket_server import SocketRig


def served_rig(
    protocol: Path | LoadedProtocol, rig: Path | LoadedRig, *, port_base: int = 0,
    seed: int | None = None, faults: FaultPlan | None = None,
) -> SocketRig:
    """A SocketRig around the protocol's simulated sample, on a real clock (not started)."""
    loaded = protocol if isinstance(protocol, LoadedProtocol) else load_protocol(protocol)
    loaded_rig = rig if isinstance(rig, LoadedRig) else load_rig(rig)
    check_pair(loaded, loaded_rig)
    return SocketRig(
        loaded_rig.rig, sample_for(loaded, loaded_rig, seed), RealClock(),
        rig_data=loaded_rig.document.data, rig_label=loaded_rig.path.name,
        port_base=port_base, faults=faults,
    )
