"""What `check` can tell about a rig's addresses and code before anything is opened: VISA
resource strings, `driver:` modules and the `visa_library`. Nothing here opens a resource,
loads a library or imports (runs) a driver module: a module is only looked for.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

from pyvisa import rname

# A rig template's address to be filled in, e.g. "GPIB0::<address>::INSTR".
PLACEHOLDER_MARKS = ("<", ">")
RESOURCE_EXAMPLES = ("'GPIB0::5::INSTR', 'TCPIP0::10.0.0.21::INSTR', "
                     "'TCPIP0::10.0.0.21::5025::SOCKET', 'ASRL/dev/ttyUSB0::INSTR'")
GPIB_PRIMARY = range(0, 31)  # IEEE 488.1: primary addresses 0..30
GPIB_SECONDARY = range(0, 32)  # VISA numbers secondary addresses 0..31
TCP_PORTS = range(1, 65536)
# Backends pyvisa itself provides; any other "@name" is the package pyvisa_<name>.
BUILT_IN_BACKENDS = ("ivi",)
SIM_SUFFIX = "@sim"


Problem = tuple[str, str]  # (what is wrong, the fix)


def resource_problem(resource: str) -> Problem | None:
    """Why `resource` is not a usable VISA resource string, or None."""
    if any(mark in resource for mark in PLACEHOLDER_MARKS):
        return (f"{resource!r} is still a placeholder",
                "write the instrument's VISA address ('flipsweep instruments' lists what VISA "
                f"finds), e.g. {RESOURCE_EXAMPLES}")
    try:
        parsed = rname.parse_resource_name(resource)
    except rname.InvalidResourceName:
        return (f"{resource!r} is not a VISA resource string",
                f"write it like {RESOURCE_EXAMPLES}")
    number_ranges = {"primary_address": GPIB_PRIMARY, "secondary_address": GPIB_SECONDARY,
                     "port": TCP_PORTS}
    for part, allowed in number_ranges.items():
        value = getattr(parsed, part, None)
        if value is None:
            continue
        if not str(value).isdigit() or int(value) not in allowed:
            return (f"{resource!r} has {part.replace('_', ' ')} {value!r}, not a whole number "
                    f"in {allowed.start}..{allowed.stop - 1}", f"write it like {RESOURCE_EXAMPLES}")
    if getattr(parsed, "host_address", "x") == "":
        return (f"{resource!r} names no host", f"write it like {RESOURCE_EXAMPLES}")
    return None


def _find_module(name: str) -> bool:
    """Is module `name` importable? Found through the import system's finders, without
    importing it or any package above it."""
    if name in sys.modules:
        return True
    search: list[str] | None = None
    parts = name.split(".")
    for depth in range(1, len(parts) + 1):
        prefix = ".".join(parts[:depth])
        if prefix in sys.modules:
            spec = getattr(sys.modules[prefix], "__spec__", None)
        else:
            spec = None
            for finder in sys.meta_path:
                find = getattr(finder, "find_spec", None)
                if find is None:
                    continue
                try:
                    spec = find(prefix, search)
                except (ImportError, ValueError, TypeError):
                    spec = None
                if spec is not None:
                    break
        if spec is None:
            return False
        locations = spec.submodule_search_locations
        if depth < len(parts) and locations is None:
            return False
        search = list(locations) if locations is not None else None
    return True


def driver_problem(driver: str) -> Problem | None:
    """Why `driver` ('package.module:ClassName') cannot name a driver class, or None. The
    module is looked for, not imported: the class itself is checked when a real run opens it."""
    module, _, class_name = driver.partition(":")
    if not all(part.isidentifier() for part in module.split(".")) \
            or not class_name.isidentifier():
        return (f"{driver!r} is not a 'package.module:ClassName'",
                "write the driver as 'package.module:ClassName'")
    if not _find_module(module):
        return (f"module {module!r} of {driver!r} cannot be found",
                "install the package or put it on PYTHONPATH (check the spelling)")
    return None


def visa_library_problem(library: str, rig_folder: Path) -> Problem | None:
    """Why `visa_library` cannot be loaded as written, or None. Nothing is loaded."""
    fix = ("use '@py' (pyvisa-py), '@sim', 'definitions.yaml@sim', '' (the system's VISA) or "
           "the path of a VISA shared library")
    if library in ("", SIM_SUFFIX):
        return None
    path_text, at, backend = library.rpartition("@")
    if not at:
        path_text, backend = library, ""
    if backend and not path_text:
        found = backend.isidentifier() and (
            backend in BUILT_IN_BACKENDS
            or importlib.util.find_spec(f"pyvisa_{backend}") is not None)
        return None if found else (f"no VISA backend '@{backend}' is installed", fix)
    if backend == "sim":
        path = Path(path_text)
        path = path if path.is_absolute() else rig_folder / path
        return None if path.is_file() else (f"no simulation definitions at {str(path)!r}",
                                            "give a pyvisa-sim YAML file, relative to the rig")
    if not Path(path_text).is_file():
        return (f"no VISA library at {path_text!r}", fix)
    return None
