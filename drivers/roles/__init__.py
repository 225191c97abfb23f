"""The registry of instrument roles: every module in this package that defines `ROLE`.

Adding a role is one module here (its `Role`), one dialect file (drivers/dialects/<role>.yaml),
its simulated behaviour (sim_instruments/roles/<role>.py) and its tests; nothing else lists
roles by name.
"""

from __future__ import annotations

import importlib
import pkgutil
from functools import cache
from typing import Annotated, Any, Union

from pydantic import Discriminator

from drivers.roles.base import Axis, Role


@cache
def all_roles() -> tuple[Role[Any], ...]:
    """Every role, in registry order."""
    found: list[Role[Any]] = []
    for module_info in pkgutil.iter_modules(__path__):
        if module_info.name == "base":
            continue
        module = importlib.import_module(f"{__name__}.{module_info.name}")
        role = getattr(module, "ROLE", None)
        if isinstance(role, Role):
            found.append(role)
    return tuple(sorted(found, key=lambda role: (role.order, role.name)))


def role_names() -> tuple[str, ...]:
    return tuple(role.name for role in all_roles())


def role_named(name: str) -> Role[Any]:
    for role in all_roles():
        if role.name == name:
            return role
    raise KeyError(f"unknown role {name!r}; valid: {', '.join(role_names())}")


@cache
def movable_axes() -> tuple[Axis, ...]:
    """The loop axes roles move between points, in table-column order."""
    axes = [role.axis for role in all_roles() if role.axis is not None]
    return tuple(sorted(axes, key=lambda axis: axis.order))


def axis_named(name: str) -> Axis:
    for axis in movable_axes():
        if axis.name == name:
            return axis
    raise KeyError(f"no role moves the axis {name!r}")


def role_of_axis(name: str) -> Role[Any]:
    for role in all_roles():
        if role.axis is not None and role.axis.name == name:
            return role
    raise KeyError(f"no role moves the axis {name!r}")


@cache
def instrument_entry_type() -> Any:
    """The rig file's instrument entry: one spec model per role, chosen by `role:`."""
    specs = tuple(role.spec for role in all_roles())
    return Annotated[Union[specs], Discriminator("role")]
