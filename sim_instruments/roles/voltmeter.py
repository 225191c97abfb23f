"""A simulated voltmeter: reads the sample's voltage at its probe pair, integrating on the
clock; settings as the dialect sets them."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from drivers.roles.voltmeter import AUTOZERO_TIME_FACTOR
from sim_instruments.world import SimulatedWorld, positive

DEFAULT_NPLC = 1.0
# Voltmeters commonly read up to 20 % beyond a fixed range before they report overload.
OVERRANGE_FRACTION = 1.2
SCPI_OVERRANGE_V = 9.9e37  # SCPI's +infinity, what a voltmeter reads beyond its range


@dataclass
class MeterState:
    probe: str
    latency_s: float
    noise_density_V_per_rtHz: float | None = None  # None: the sample model's parameter
    nplc: float = DEFAULT_NPLC
    autozero: bool = True
    range_V: float | None = None  # None: autorange


class SimulatedVoltmeter:
    def __init__(self, world: SimulatedWorld, name: str, spec: Any) -> None:
        self.world = world
        self.name = name
        # The rig's `noise_density` (the same key the estimate's noise budget reads) wins
        # over the simulation's `noise_density_V_per_rtHz`; the defaults are equal.
        self.state = MeterState(spec.probe or "longitudinal", spec.latency,
                                getattr(spec, "noise_density", None),
                                nplc=spec.nplc or DEFAULT_NPLC)

    @property
    def nplc(self) -> float:
        return self.state.nplc

    def set_nplc(self, nplc: float) -> None:
        self.state.nplc = positive(nplc, "nplc")

    def set_range(self, volts: float | None) -> None:
        self.state.range_V = None if volts is None else positive(volts, "range")

    def set_autozero(self, on: bool) -> None:
        self.state.autozero = on

    def integration_s(self) -> float:
        """The reading's own integration: what averages the signal's noise."""
        return self.state.nplc / self.world.mains_frequency_Hz

    def reading_time_s(self) -> float:
        # Autozero takes a zero reading of the same length for every reading: it doubles the
        # time, and its noise adds to the reading's (the sample model's `autozero`), so a
        # longer reading does not mean less noise.
        factor = AUTOZERO_TIME_FACTOR if self.state.autozero else 1.0
        return factor * self.integration_s()

    def read_voltage(self) -> float:
        world, state = self.world, self.state
        now = world.clock.now()
        world.place_sample()
        volts = world.sample.voltage(
            state.probe, world.state("current_A"), world.state("temperature_K"), now,
            self.integration_s(), autozero=state.autozero,
            meter_noise_V_per_rtHz=state.noise_density_V_per_rtHz,
        )
        world.clock.sleep(self.reading_time_s() + state.latency_s)
        if state.range_V is not None and abs(volts) > state.range_V * OVERRANGE_FRACTION:
            return SCPI_OVERRANGE_V
        return volts

    def bindings(self) -> dict[str, Callable[..., object]]:
        return {
            "dc_voltage": lambda: None,
            "nplc": self.set_nplc,
            "range": self.set_range,
            "autorange": lambda: self.set_range(None),
            "autozero_on": lambda: self.set_autozero(True),
            "autozero_off": lambda: self.set_autozero(False),
            "read": self.read_voltage,
        }

    def reset(self) -> None:
        self.state = MeterState(self.state.probe, self.state.latency_s,
                                self.state.noise_density_V_per_rtHz)

    def settings(self) -> dict[str, object]:
        return {"overrange_fraction": OVERRANGE_FRACTION,
                "voltmeter_probes": {self.name: self.state.probe}}


def build(world: SimulatedWorld, name: str, spec: Any) -> SimulatedVoltmeter:
    return SimulatedVoltmeter(world, name, spec)
