"""Open a rig's instruments: one driver per instrument, by role or by the rig's `driver:`."""

from __future__ import annotations

import importlib
from typing import Any

import pyvisa

from drivers.dialect import validate_dialects
from drivers.errors import InputError
from drivers.rig import Rig
from drivers.roles import role_named
from drivers.spec import InstrumentSpec

__all__ = ["driver_class", "open_instruments", "protocol_methods"]


def protocol_methods(protocol: type) -> tuple[str, ...]:
    """The method names a role interface asks for, inherited ones included."""
    names: set[str] = set()
    for klass in protocol.__mro__:
        if klass is object or not getattr(klass, "_is_protocol", False):
            continue
        names.update(n for n, v in vars(klass).items() if callable(v) and not n.startswith("_"))
    return tuple(sorted(names))


def _user_driver_class(name: str, spec: InstrumentSpec) -> type:
    assert spec.driver is not None
    key = ("instruments", name, "driver")
    module_name, _, class_name = spec.driver.partition(":")
    try:
        module = importlib.import_module(module_name)
    except ImportError as error:
        raise InputError(
            f"cannot import {module_name!r}: {error}", key=key,
            fix="install the package or put it on PYTHONPATH",
        ) from None
    found = getattr(module, class_name, None)
    if not isinstance(found, type):
        raise InputError(
            f"{module_name!r} has no class {class_name!r}", key=key,
            fix="write the driver as 'package.module:ClassName'",
        )
    role = role_named(spec.role)
    missing = [m for m in protocol_methods(role.interface)
               if not callable(getattr(found, m, None))]
    if missing:
        raise InputError(
            f"{spec.driver} lacks what a {spec.role} driver needs: {', '.join(missing)}",
            key=key, fix=f"implement the role's methods (see drivers/roles/{spec.role}.py)",
        )
    return found


def driver_class(name: str, spec: InstrumentSpec) -> type:
    return role_named(spec.role).driver if spec.driver is None else _user_driver_class(name, spec)


def open_instruments(rig: Rig, resource_manager: pyvisa.ResourceManager) -> dict[str, Any]:
    """Rig instrument name -> opened driver.

    Every dialect and driver class is checked first (InputError, nothing sent); then each
    instrument is opened as `Class(name, spec, resource_manager)`. If one fails to open, the
    ones already open are closed and the error (CommunicationError) propagates.
    """
    validate_dialects(rig.instruments)
    classes = {name: driver_class(name, spec) for name, spec in rig.instruments.items()}
    opened: dict[str, Any] = {}
    try:
        for name, spec in rig.instruments.items():
            opened[name] = classes[name](name, spec, resource_manager)
    except BaseException:
        for driver in opened.values():
            driver.close()
        raise
    return opened
