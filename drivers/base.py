"""What every dialect-driven driver does, whatever its role: identity, reset, errors, session."""

from __future__ import annotations

import pyvisa

from acquire.rig import Instrument
from drivers.dialect import dialect_for
from drivers.interface import InstrumentError
from drivers.transport import Transport


class DialectDriver:
    """Base of the built-in role drivers.

    The constructor `(name, spec, resource_manager)` is also the one a user's
    `driver: package.module:Class` must accept; such a class may subclass this one to speak
    its role's dialect (with the rig's overrides) and so also run on the simulated rig.
    """

    role = ""

    def __init__(
        self, name: str, spec: Instrument, resource_manager: pyvisa.ResourceManager
    ) -> None:
        self.name = name
        self.spec = spec
        self.transport = Transport(name, spec, resource_manager, dialect_for(name, spec))

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

    def _refuse(self, template: str, value: float, why: str) -> InstrumentError:
        """An error for a command the driver will not send because it breaks a rig limit."""
        return InstrumentError(self.name, self.transport.dialect.render(template, value), why)

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.name!r}, {self.spec.resource!r})"
