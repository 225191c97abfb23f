"""Shared by the driver and simulator tests (no tests here): a stand-in sample whose voltages
are known exactly, rig builders, and a simulated rig opened through the real drivers."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any

from acquire.runtime.clock import VirtualClock
from drivers.factory import open_instruments
from drivers.rig import Rig
from sim_instruments.simulated_rig import SimulatedRig, open_simulated_rig


@dataclass(frozen=True)
class Expected:
    resistance_ohm: float
    unidirectional_ohm: float = 0.0


@dataclass
class OhmicSample:
    """V = offset + I * R, exactly; remembers what the simulated world asked of it."""

    resistance_ohm: float = 1000.0
    offset_V: float = 0.0
    placements: list[tuple[float, float]] = field(default_factory=list)
    readings: list[dict[str, Any]] = field(default_factory=list)

    def apply_field(self, field_T: float, angle_deg: float) -> None:
        self.placements.append((field_T, angle_deg))

    def voltage(self, probe: str, current_A: float, temperature_K: float, time_s: float,
                integration_s: float, autozero: bool = False,
                meter_noise_V_per_rtHz: float | None = None) -> float:
        self.readings.append({"probe": probe, "current_A": current_A,
                              "temperature_K": temperature_K, "time_s": time_s,
                              "integration_s": integration_s, "autozero": autozero,
                              "meter_noise_V_per_rtHz": meter_noise_V_per_rtHz})
        return self.offset_V + current_A * self.resistance_ohm

    def expected(self, probe: str, current_A: float, temperature_K: float) -> Expected:
        return Expected(self.resistance_ohm)

    def truth(self) -> dict[str, object]:
        return {"resistance_ohm": self.resistance_ohm}


def standard_instruments() -> dict[str, dict[str, Any]]:
    return {
        "source": {"role": "current_source", "resource": "GPIB0::5::INSTR",
                   "compliance": "8 V", "limits": {"current": "20 mA"}},
        "vxx": {"role": "voltmeter", "resource": "GPIB0::21::INSTR", "nplc": 1},
        "vxy": {"role": "voltmeter", "resource": "GPIB0::22::INSTR", "probe": "transverse"},
        "magnet": {"role": "field", "resource": "GPIB0::14::INSTR",
                   "limits": {"field": "2 T", "ramp_rate": "1 T/min"}},
        "stage": {"role": "rotator", "resource": "ASRL3::INSTR", "speed": "10 deg/s"},
        "cryo": {"role": "temperature", "resource": "GPIB0::17::INSTR", "rate": "2 K/min"},
    }


def make_rig(instruments: dict[str, dict[str, Any]] | None = None, **extra: Any) -> Rig:
    return Rig.model_validate({
        "name": "test rig", "visa_library": "@sim",
        "instruments": instruments if instruments is not None else standard_instruments(),
        **extra,
    })


@contextmanager
def simulated(
    rig: Rig, sample: Any, clock: VirtualClock | None = None, driver_rig: Rig | None = None
) -> Iterator[tuple[SimulatedRig, dict[str, Any]]]:
    """The rig simulated around `sample`, with drivers opened for `driver_rig` (the same rig
    unless a test wants the drivers to speak a different dialect than the instruments)."""
    simulated_rig = open_simulated_rig(rig, sample, clock or VirtualClock())
    drivers = open_instruments(driver_rig or rig, simulated_rig.resource_manager)
    try:
        yield simulated_rig, drivers
    finally:
        for driver in drivers.values():
            driver.close()
        simulated_rig.close()
