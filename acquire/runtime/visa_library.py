"""The pyvisa ResourceManager a rig's `visa_library` names.

    "@py"         pyvisa-py (pure Python: GPIB via linux-gpib, serial, USB, TCP/IP)
    "@sim"        flipsweep's generated simulated instruments (pyvisa-sim, static replies:
                  the runner's `--simulate` couples them to the sample model instead)
    "file.yaml@sim"  a pyvisa-sim definitions file, relative to `base_dir` (the rig's folder)
    anything else passed to pyvisa as is (e.g. "" for the system's VISA library)
"""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import pyvisa

from acquire.errors import InputError
from drivers.rig import Rig

SIM_SUFFIX = "@sim"


def _manager(library: str) -> pyvisa.ResourceManager:
    try:
        return pyvisa.ResourceManager(library)
    except (OSError, ValueError, pyvisa.errors.Error) as error:
        raise InputError(
            f"cannot load the VISA library {library!r}: {error}", key=("visa_library",),
            fix="use '@py', '@sim' or 'definitions.yaml@sim', or install the VISA library",
        ) from None


def generated_simulation(rig: Rig) -> pyvisa.ResourceManager:
    """A ResourceManager on pyvisa-sim definitions generated for this rig's dialects."""
    from sim_instruments.pyvisa_sim_definitions import write_rig_definitions

    # pyvisa-sim parses the file when the manager opens, and pyvisa caches libraries by
    # path: a fresh folder per call keeps two simulated rigs apart.
    folder = Path(tempfile.mkdtemp(prefix="flipsweep-sim-"))
    try:
        path = write_rig_definitions(rig, folder / "rig.yaml")
        return _manager(f"{path}{SIM_SUFFIX}")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def resource_manager_for(
    visa_library: str, rig: Rig | None = None, base_dir: Path | None = None
) -> pyvisa.ResourceManager:
    if visa_library == SIM_SUFFIX:
        if rig is not None:
            return generated_simulation(rig)
        from sim_instruments.pyvisa_sim_definitions import GENERIC_DEFINITIONS

        return _manager(f"{GENERIC_DEFINITIONS}{SIM_SUFFIX}")
    if visa_library.endswith(SIM_SUFFIX):
        path = Path(visa_library[: -len(SIM_SUFFIX)])
        if not path.is_absolute() and base_dir is not None:
            path = base_dir / path
        if not path.is_file():
            raise InputError(
                f"no simulation definitions at {path}", key=("visa_library",),
                fix="give the path of a pyvisa-sim YAML file, relative to the rig file",
            )
        return _manager(f"{path}{SIM_SUFFIX}")
    return _manager(visa_library)
