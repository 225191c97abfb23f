"""The temperature controller: setpoint and reading in kelvin, ramp rate in K/s.
A controller that takes K/min uses {per_minute} in its ramp_rate template."""

from __future__ import annotations

from drivers.base import DialectDriver


class DialectTemperatureController(DialectDriver):
    role = "temperature"

    def configure(self, rate_K_per_s: float | None) -> None:
        if rate_K_per_s is not None and self._supports("ramp_rate"):
            self.transport.send("ramp_rate", rate_K_per_s)
        self.transport.check_errors()

    def set_setpoint(self, kelvin: float) -> None:
        self.transport.send("setpoint", kelvin)

    def temperature(self) -> float:
        return self.transport.ask_number("temperature")
