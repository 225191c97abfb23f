"""What the runner asks of an instrument, by role. Drivers implement these; nothing else.

A driver knows its command dialect and nothing about sweeps, waits or retries: those are the
runner's. Every method is one or a few transactions and returns promptly (no sleeping).
"""

from __future__ import annotations

from typing import Protocol


class InstrumentError(Exception):
    """The instrument reported a problem (SCPI error queue) or answered nonsense."""

    def __init__(self, instrument: str, command: str, message: str) -> None:
        self.instrument = instrument
        self.command = command
        self.message = message
        super().__init__(f"{instrument}: {message} (after {command!r})")


class CommunicationError(Exception):
    """A transient transport fault (VISA timeout, I/O error, dropped connection)."""

    def __init__(self, instrument: str, command: str, cause: str) -> None:
        self.instrument = instrument
        self.command = command
        self.cause = cause
        super().__init__(f"{instrument}: {cause} (during {command!r})")


class Instrument(Protocol):
    name: str

    def identify(self) -> str: ...  # the *IDN? reply
    def reset(self) -> None: ...  # *RST, *CLS
    def errors(self) -> list[str]: ...  # drain the SCPI error queue; [] when "0,No error"
    def reconnect(self) -> None: ...  # close and reopen the VISA session
    def close(self) -> None: ...


class CurrentSource(Instrument, Protocol):
    def configure(self, compliance_V: float | None) -> None: ...
    def set_current(self, amperes: float) -> None: ...
    def set_output(self, on: bool) -> None: ...
    def compliance_tripped(self) -> bool: ...
    def read_current(self) -> float: ...


class Voltmeter(Instrument, Protocol):
    def configure(self, nplc: float, range_V: float | None, autozero: bool) -> None: ...
    def read(self) -> float: ...  # trigger one reading and return it in volts


class FieldSupply(Instrument, Protocol):
    def configure(self, ramp_rate_T_per_s: float) -> None: ...
    def set_target(self, tesla: float) -> None: ...
    def field(self) -> float: ...  # readback, tesla (mu0*H)


class Rotator(Instrument, Protocol):
    def configure(self, speed_deg_per_s: float) -> None: ...
    def move_to(self, degrees: float) -> None: ...  # absolute, returns at once
    def position(self) -> float: ...
    def moving(self) -> bool: ...
    def home(self) -> None: ...


class TemperatureController(Instrument, Protocol):
    def configure(self, rate_K_per_s: float | None) -> None: ...  # setpoint ramp rate, K/s
    def set_setpoint(self, kelvin: float) -> None: ...
    def temperature(self) -> float: ...


# The protocol each rig role must implement (a user's `driver:` class is checked against it).
ROLE_PROTOCOLS: dict[str, type] = {
    "current_source": CurrentSource,
    "voltmeter": Voltmeter,
    "field": FieldSupply,
    "rotator": Rotator,
    "temperature": TemperatureController,
}
