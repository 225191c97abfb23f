"""The voltmeter: integration time, range, autozero, one triggered reading in volts."""

from __future__ import annotations

from typing import Literal, Protocol

from pydantic import Field

from drivers.driver_base import DialectDriver
from drivers.errors import InstrumentError
from drivers.interface import Instrument
from drivers.quantities import NoiseDensity, Voltage
from drivers.roles.base import Role
from drivers.spec import InstrumentSpec

# SCPI writes +infinity as 9.9E37 (and not-a-number as 9.91E37): a reading beyond the range.
SCPI_OVERRANGE_V = 9.9e37
DEFAULT_NPLC = 1.0
# Autozero measures the zero as well: about twice the integration (common practice).
AUTOZERO_TIME_FACTOR = 2.0
# Input voltage noise of a good nanovoltmeter-class DC meter on its lowest ranges is some
# 10-50 nV/rtHz (common practice); the default is a middle value. The simulated meter uses the
# same number, so the noise budget `estimate` predicts is what a rehearsal shows.
DEFAULT_NOISE_DENSITY_V_PER_RTHZ = 20e-9


class Voltmeter(Instrument, Protocol):
    def configure(self, nplc: float, range_V: float | None, autozero: bool) -> None: ...
    def read(self) -> float: ...  # trigger one reading and return it in volts


class VoltmeterSpec(InstrumentSpec):
    role: Literal["voltmeter"]
    nplc: float | None = Field(
        default=None, gt=0, le=100, description="integration time in power-line cycles (1)"
    )
    range: Voltage | Literal["auto"] | None = Field(
        default=None, description="a fixed range like '100 mV', or 'auto' (the default)"
    )
    autozero: bool | None = Field(default=None, description="measure the zero at every reading")
    noise_density: NoiseDensity | None = Field(
        default=None, gt=0,
        description="input voltage noise density of the meter, white, one-sided, like "
        "'20 nV/rtHz' (20 nV/rtHz when unset); `estimate` predicts each point's error from it, "
        "and the simulated meter adds this noise",
    )
    probe: Literal["longitudinal", "transverse"] | None = Field(
        default=None, description="what the voltage pair measures (from its name when unset)"
    )

    @property
    def nplc_or_default(self) -> float:
        return self.nplc if self.nplc is not None else DEFAULT_NPLC

    @property
    def noise_density_or_default(self) -> float:
        if self.noise_density is not None:
            return self.noise_density
        return DEFAULT_NOISE_DENSITY_V_PER_RTHZ

    @property
    def range_V(self) -> float | None:
        return self.range if isinstance(self.range, float) else None


def integration_s(spec: VoltmeterSpec | None, mains_frequency_Hz: float) -> float:
    """Seconds one reading integrates (with autozero, the zero's integration too)."""
    if spec is None:
        return DEFAULT_NPLC / mains_frequency_Hz
    factor = AUTOZERO_TIME_FACTOR if spec.autozero else 1.0
    return factor * spec.nplc_or_default / mains_frequency_Hz


class DialectVoltmeter(DialectDriver):
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


def _configure(driver: Voltmeter, spec: VoltmeterSpec) -> None:
    driver.configure(spec.nplc_or_default, spec.range_V, bool(spec.autozero))


ROLE: Role[Voltmeter] = Role(
    name="voltmeter",
    interface=Voltmeter,
    driver=DialectVoltmeter,
    spec=VoltmeterSpec,
    summary="a DC voltmeter, one per channel (integration time, range, autozero)",
    at_most_one=False,
    configure=_configure,
    order=1,
)
