"""The field supply: target and ramp rate in SI (tesla, T/s); refuses fields beyond the rig's
limit. A supply that takes T/min uses {per_minute} in its ramp_rate template."""

from __future__ import annotations

import pyvisa

from acquire.rig import Instrument
from drivers.base import DialectDriver


class DialectFieldSupply(DialectDriver):
    role = "field"

    def __init__(
        self, name: str, spec: Instrument, resource_manager: pyvisa.ResourceManager
    ) -> None:
        super().__init__(name, spec, resource_manager)
        self.field_limit_T = spec.limits.field
        self.ramp_limit_T_per_s = spec.limits.ramp_rate

    def configure(self, ramp_rate_T_per_s: float) -> None:
        limit = self.ramp_limit_T_per_s
        if limit is not None and ramp_rate_T_per_s > limit:
            raise self._refuse(
                "ramp_rate", ramp_rate_T_per_s,
                f"refused: {ramp_rate_T_per_s:g} T/s exceeds the rig's limit {limit:g} T/s",
            )
        # Without a rate command the supply ramps at the rate set on the instrument itself.
        if self._supports("ramp_rate"):
            # A rate equal to the limit must not round up past it in the command text.
            command = self.transport.dialect.render_not_above("ramp_rate", ramp_rate_T_per_s)
            self.transport.write_text(command)
        self.transport.check_errors()

    def set_target(self, tesla: float) -> None:
        limit = self.field_limit_T
        sent = self.transport.dialect.sent_value("set_target", tesla)
        if limit is not None and max(abs(tesla), abs(sent)) > limit:
            raise self._refuse(
                "set_target", tesla, f"refused: {tesla:g} T exceeds the rig's limit {limit:g} T"
            )
        self.transport.send("set_target", tesla)

    def field(self) -> float:
        return self.transport.ask_number("field")
