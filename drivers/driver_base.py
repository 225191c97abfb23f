"""What every dialect-driven driver does, whatever its role: identity, reset, errors, session."""

from __future__ import annotations

from typing import Any

import pyvisa

from drivers.command_limits import CommandLimits
from drivers.dialect import dialect_for
from drivers.roles.base import TemplateLimit
from drivers.transport import Transport


class DialectDriver:
    """Base of the built-in role drivers.

    The constructor `(name, spec, resource_manager)` is also the one a user's
    `driver: package.module:Class` must accept; such a class may subclass a role's built-in
    driver to speak its dialect (with the rig's overrides), keep its limits, and so also run on
    the simulated rig.
    """

    # The role's limits on the numbers it sends (drivers/roles/<role>.py sets them).
    template_limits: tuple[TemplateLimit, ...] = ()

    def __init__(self, name: str, spec: Any, resource_manager: pyvisa.ResourceManager) -> None:
        self.name = name
        self.spec = spec
        self.transport = Transport(
            name, spec, resource_manager, dialect_for(name, spec),
            CommandLimits(self.template_limits, spec),
        )

    @property
    def limits(self) -> CommandLimits:
        return self.transport.limits

    def identify(self) -> str:
        return self.transport.identify()

    def reset(self) -> None:
        self.transport.reset()

    def errors(self) -> list[str]:
        return self.transport.errors()

    def reconnect(self) -> None:
        self.transport.reconnect()

    def close(self) -> None:
        self.transport.close()

    def _supports(self, template: str) -> bool:
        return self.transport.dialect.supports(template)

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.name!r}, {self.spec.resource!r})"
