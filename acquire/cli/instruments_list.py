"""`flipsweep instruments`: what VISA sees, and who answers *IDN? (read-only, nothing is set)."""

from __future__ import annotations

import warnings
from pathlib import Path


def list_instruments(rig_path: Path | None) -> int:
    from acquire.runtime.visa_library import resource_manager_for

    if rig_path is None:
        manager = resource_manager_for("@py")
        with warnings.catch_warnings():
            # pyvisa-py warns about optional discovery packages; the survey goes on without.
            warnings.simplefilter("ignore")
            resources = manager.list_resources()
        if not resources:
            print("no VISA resources found (LAN instruments on raw sockets are not discoverable;"
                  " list them in a rig file and use --rig)")
        for resource in resources:
            print(f"{resource}  {_identity(manager, resource)}")
        return 0
    from acquire.inputs.load import load_rig

    loaded = load_rig(rig_path)
    rig = loaded.rig
    manager = resource_manager_for(rig.visa_library, rig, rig_path.parent)
    for name, spec in rig.instruments.items():
        print(f"{name:<10} {spec.role:<15} {spec.resource:<28} "
              f"{_identity(manager, spec.resource, spec.timeout)}")
    return 0


def _identity(manager: object, resource: str, timeout_s: float = 2.0) -> str:
    try:
        handle = manager.open_resource(resource)  # type: ignore[attr-defined]
        handle.timeout = int(timeout_s * 1000)
        handle.read_termination = "\n"
        handle.write_termination = "\n"
        try:
            return str(handle.query("*IDN?")).strip()
        finally:
            handle.close()
    except Exception as error:  # report and go on: this is a survey, not a run
        return f"(no answer: {type(error).__name__})"
