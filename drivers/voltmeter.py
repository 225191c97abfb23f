"""The voltmeter: integration time, range, autozero, one triggered reading in volts."""

from __future__ import annotations

from drivers.base import DialectDriver
from drivers.interface import InstrumentError

# SCPI writes +infinity as 9.9E37 (and not-a-number as 9.91E37): a reading beyond the range.
SCPI_OVERRANGE_V = 9.9e37


class DialectVoltmeter(DialectDriver):
    role = "voltmeter"

    def configure(self, nplc: float, range_V: float | None, autozero: bool) -> None:
        send = self.transport.send
        if self._supports("dc_voltage"):
            send("dc_voltage")
        if self._supports("nplc"):
            send("nplc", nplc)
        if range_V is None:
            if self._supports("autorange"):
                send("autorange")
        else:
            send("range", range_V)
        switch = "autozero_on" if autozero else "autozero_off"
        if self._supports(switch):
            send(switch)
        self.transport.check_errors()

    def read(self) -> float:
        volts = self.transport.ask_number("read")
        if abs(volts) >= SCPI_OVERRANGE_V:
            raise InstrumentError(
                self.name, self.transport.dialect.render("read"), "reading beyond the range"
            )
        return volts
