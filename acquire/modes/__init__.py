"""The registry of acquisition modes: every package here whose __init__ defines `MODE`.

Adding a mode is one package here (its protocol section, measurement, tables, reduction) and
its tests; the runner, planning and storage find it by the protocol's `mode:`.
"""

from __future__ import annotations

import importlib
import pkgutil
from functools import cache

from acquire.modes.base import AcquisitionMode

DEFAULT_MODE = "dc_reversal"


@cache
def all_modes() -> tuple[AcquisitionMode, ...]:
    found = []
    for module_info in pkgutil.iter_modules(__path__):
        if not module_info.ispkg:
            continue
        module = importlib.import_module(f"{__name__}.{module_info.name}")
        mode = getattr(module, "MODE", None)
        if isinstance(mode, AcquisitionMode):
            found.append(mode)
    return tuple(sorted(found, key=lambda mode: (mode.name != DEFAULT_MODE, mode.name)))


def mode_names() -> tuple[str, ...]:
    return tuple(mode.name for mode in all_modes())


def mode_named(name: str) -> AcquisitionMode:
    for mode in all_modes():
        if mode.name == name:
            return mode
    raise KeyError(f"unknown mode {name!r}; valid: {', '.join(mode_names())}")
