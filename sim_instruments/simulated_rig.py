"""A rig's instruments simulated: pyvisa-sim devices in each instrument's dialect, at its
resource address, coupled to one SimulatedWorld around the sample model.

The runner opens the drivers on `resource_manager` exactly as on real hardware.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import pyvisa

from drivers.rig import Rig
from sim_instruments.live import couple
from sim_instruments.pyvisa_sim_definitions import simulator_rig, write_rig_definitions
from sim_instruments.roles import build_world
from sim_instruments.world import Clock, Sample, SimulatedWorld


@dataclass
class SimulatedRig:
    resource_manager: pyvisa.ResourceManager
    world: SimulatedWorld
    definitions: Path | None = field(default=None)  # kept only when a folder was given
    # The rig as simulated (sim_instruments.pyvisa_sim_definitions.simulator_rig): open the
    # drivers with this one (addresses pyvisa-sim can open; `driver:` only if asked for).
    rig: Rig | None = None

    def truth(self) -> dict[str, object]:
        """The sample model's true parameters and the world's settings, JSON-ready."""
        return {"sample": self.world.sample.truth(), "world": self.world.settings()}

    def close(self) -> None:
        self.resource_manager.close()


def open_simulated_rig(
    rig: Rig, sample: Sample, clock: Clock, definitions_dir: Path | None = None
) -> SimulatedRig:
    """Simulate every instrument of `rig`; write the definitions into `definitions_dir`
    (kept, e.g. beside a run's output) or into a temporary folder (removed once loaded).

    Initial state: field 0 T, angle 0 deg, output off at 0 A, bath at 300 K (or the rig's
    `simulation: {start_temperature_K: ...}`).
    """
    rig = simulator_rig(rig)
    # pyvisa caches a library per definitions path while it is in use: a unique file name
    # keeps two simulated rigs apart.
    folder = definitions_dir or Path(tempfile.mkdtemp(prefix="flipsweep-sim-"))
    folder.mkdir(parents=True, exist_ok=True)
    handle, name = tempfile.mkstemp(prefix="simulated-rig-", suffix=".yaml", dir=folder)
    path = Path(name)
    try:
        os.close(handle)
        write_rig_definitions(rig, path)
        # pyvisa-sim reads the whole file now; nothing reads it later.
        manager = pyvisa.ResourceManager(f"{path}@sim")
    finally:
        if definitions_dir is None:
            shutil.rmtree(folder, ignore_errors=True)
    world = build_world(clock, sample, rig)
    couple(manager, world, rig)
    return SimulatedRig(manager, world, path if definitions_dir is not None else None, rig)
