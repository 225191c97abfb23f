"""`flipsweep instruments`: what VISA sees, and who answers *IDN? (read-only, nothing is set).

Without a rig file only pyvisa-py is used, and serial ports are listed but not opened unless
`--probe` asks: opening a serial port toggles its control lines, which resets some devices,
and what listens on an unknown port may not take kindly to "*IDN?".
"""

from __future__ import annotations

import warnings
from pathlib import Path

# What a VISA resource's interface needs installed (pyvisa-py's backends), by resource prefix.
PACKAGES = {
    "ASRL": "pyserial (pip install pyserial)",
    "GPIB": "linux-gpib's Python bindings or gpib-ctypes (pip install gpib-ctypes), or a "
            "vendor VISA library (visa_library: '' in the rig file)",
    "USB": "pyusb (pip install pyusb) and the libusb system library",
    "TCPIP": "nothing extra for raw sockets; psutil or zeroconf only widen discovery",
}


def interface_of(resource: str) -> str:
    for prefix in PACKAGES:
        if resource.upper().startswith(prefix):
            return prefix
    return ""


def describe_failure(resource: str, error: BaseException) -> str:
    """The underlying error in one line, and the package that fixes it when one is missing."""
    text = " ".join(str(error).split()) or type(error).__name__
    shown = f"no answer: {type(error).__name__}: {text}"
    missing = "please install" in text.lower() or "no module named" in text.lower()
    package = PACKAGES.get(interface_of(resource))
    if missing and package:
        shown += f" -- fix: install {package}"
    return f"({shown})"


def list_instruments(rig_path: Path | None, probe: bool = False) -> int:
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
            if interface_of(resource) == "ASRL" and not probe:
                print(f"{resource}  (serial port, not opened; --probe asks it for *IDN?)")
                continue
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
        return describe_failure(resource, error)
