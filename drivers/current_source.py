"""The current source: level, output, compliance. Refuses currents beyond the rig's limit."""

from __future__ import annotations

import pyvisa

from acquire.rig import Instrument
from drivers.base import DialectDriver


class DialectCurrentSource(DialectDriver):
    role = "current_source"

    def __init__(
        self, name: str, spec: Instrument, resource_manager: pyvisa.ResourceManager
    ) -> None:
        super().__init__(name, spec, resource_manager)
        # The last guard between a typo in a protocol and a burnt device.
        self.current_limit_A = spec.limits.current

    def configure(self, compliance_V: float | None) -> None:
        if self._supports("source_current_mode"):
            self.transport.send("source_current_mode")
        if compliance_V is not None:
            self.transport.send("compliance", compliance_V)
        self.transport.check_errors()

    def set_current(self, amperes: float) -> None:
        limit = self.current_limit_A
        sent = self.transport.dialect.sent_value("set_current", amperes)
        if limit is not None and max(abs(amperes), abs(sent)) > limit:
            raise self._refuse(
                "set_current", amperes,
                f"refused: {amperes:g} A exceeds the rig's limit {limit:g} A",
            )
        self.transport.send("set_current", amperes)

    def set_output(self, on: bool) -> None:
        self.transport.send("output_on" if on else "output_off")

    def compliance_tripped(self) -> bool:
        # Without a trip query the source cannot tell; the readings will show it.
        return self.transport.ask_flag("tripped") if self._supports("tripped") else False

    def read_current(self) -> float:
        return self.transport.ask_number("read_current")
