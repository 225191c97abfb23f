"""The simulated laboratory's dynamic state, on the runner's clock.

One SimulatedWorld holds what the instruments have been told and what follows from it:
the current through the sample (with compliance), the field ramping toward its target, the
rotator turning toward its angle, the bath temperature approaching its setpoint, each
voltmeter's settings. A voltmeter reading asks the sample model for the voltage at the
present state and lets the reading's integration time pass on the clock, so a VirtualClock
advances and a RealClock really waits.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Protocol

from acquire.clock import Clock
from acquire.rig import DEFAULT_NPLC, DEFAULT_ROTATOR_SPEED, DEFAULT_TEMPERATURE_RATE, Rig
from sim_instruments.motion import LinearRamp, ThermalApproach

START_TEMPERATURE_K = 300.0
# A cryostat's bath follows its setpoint with a lag of this order (the time constant of the
# exponential approach; the ramp rate limits it further away).
TEMPERATURE_TIME_CONSTANT_S = 30.0
DEFAULT_FIELD_RATE_T_PER_S = 1.0 / 60.0
DEFAULT_COMPLIANCE_V = 10.0
# The load's resistance rises with the current it heats it by only a few percent at a
# current the compliance allows, so the fixed point converges in a few steps.
COMPLIANCE_ITERATIONS = 5
# Voltmeters commonly read up to 20 % beyond a fixed range before they report overload.
OVERRANGE_FRACTION = 1.2
SCPI_OVERRANGE_V = 9.9e37  # SCPI's +infinity, what a voltmeter reads beyond its range
# Keys of a rig's `simulation:` that belong to the world, not to the sample model.
WORLD_SETTINGS = ("start_temperature_K", "temperature_time_constant_s")


class Sample(Protocol):
    """What the world needs of sim_instruments.sample_model.BilayerSample."""

    def apply_field(self, field_T: float, angle_deg: float) -> None: ...
    def voltage(self, probe: str, current_A: float, temperature_K: float, time_s: float,
                integration_s: float) -> float: ...
    def expected(self, probe: str, current_A: float, temperature_K: float) -> Any: ...
    def truth(self) -> dict[str, object]: ...


def sample_overrides(simulation: Mapping[str, object]) -> dict[str, object]:
    """A rig's `simulation:` without the world's keys: the sample-model parameters."""
    return {key: value for key, value in simulation.items() if key not in WORLD_SETTINGS}


@dataclass
class SourceState:
    level_A: float = 0.0
    output: bool = False
    compliance_V: float = DEFAULT_COMPLIANCE_V
    tripped: bool = False
    load_ohm: float = 0.0  # the sample's resistance when the level was last set


@dataclass
class MeterState:
    probe: str
    latency_s: float
    nplc: float = DEFAULT_NPLC
    autozero: bool = True
    range_V: float | None = None  # None: autorange


@dataclass
class Extremes:
    """The most the instruments were asked to do (and the field and angle they read back) over
    the world's life: a rehearsal's record of what a real rig would have been told. Unset
    values stay None; magnitudes are absolute values. A setter records the value it was sent
    before judging it, so a value the instrument refuses still shows; NaN is not a value and is
    skipped. Each update is O(1)."""

    current_A: float | None = None  # largest |level| set on the source
    field_target_T: float | None = None  # largest |target| set on the field supply
    field_read_T: float | None = None  # largest |field| read back
    field_rate_T_per_s: float | None = None  # largest ramp rate set
    angle_target_deg: tuple[float, float] | None = None  # (smallest, largest) rotator target
    angle_read_deg: tuple[float, float] | None = None  # (smallest, largest) position read
    temperature_setpoint_K: tuple[float, float] | None = None  # (lowest, highest) setpoint

    @staticmethod
    def larger(old: float | None, value: float) -> float | None:
        if math.isnan(value):
            return old
        return value if old is None or value > old else old

    @staticmethod
    def spread(
        old: tuple[float, float] | None, value: float
    ) -> tuple[float, float] | None:
        if math.isnan(value):
            return old
        if old is None:
            return (value, value)
        low, high = old
        return (value, high) if value < low else (low, value) if value > high else old


def _positive(value: float, what: str) -> float:
    if not (math.isfinite(value) and value > 0.0):
        raise ValueError(f"{what} must be > 0, got {value!r}")
    return value


class SimulatedWorld:
    def __init__(self, clock: Clock, sample: Sample, rig: Rig) -> None:
        self.clock = clock
        self.sample = sample
        self.mains_frequency_Hz = rig.mains_frequency
        settings = rig.simulation
        self.start_temperature_K = float(settings.get("start_temperature_K", START_TEMPERATURE_K))
        self.time_constant_s = float(
            settings.get("temperature_time_constant_s", TEMPERATURE_TIME_CONSTANT_S)
        )
        now = clock.now()
        self.source = SourceState()
        self.meters: dict[str, MeterState] = {}
        field_rate, speed, temperature_rate = (
            DEFAULT_FIELD_RATE_T_PER_S, DEFAULT_ROTATOR_SPEED, DEFAULT_TEMPERATURE_RATE
        )
        for name, spec in rig.instruments.items():
            if spec.role == "current_source" and spec.compliance is not None:
                self.source.compliance_V = spec.compliance
            elif spec.role == "voltmeter":
                self.meters[name] = MeterState(spec.probe or "longitudinal", spec.latency,
                                               nplc=spec.nplc or DEFAULT_NPLC)
            elif spec.role == "field":
                field_rate = spec.ramp_rate or spec.limits.ramp_rate or field_rate
            elif spec.role == "rotator":
                speed = spec.speed or speed
            elif spec.role == "temperature":
                temperature_rate = spec.rate or temperature_rate
        self.roles = {name: spec.role for name, spec in rig.instruments.items()}
        self.field = LinearRamp(0.0, now, 0.0, field_rate)
        self.angle = LinearRamp(0.0, now, 0.0, speed)
        self.bath = ThermalApproach(
            self.start_temperature_K, now, self.start_temperature_K, temperature_rate,
            self.time_constant_s,
        )
        self._applied: tuple[float, float] | None = None
        self.extremes = Extremes()

    # -- current source ----------------------------------------------------------------
    def set_current(self, amperes: float) -> None:
        self.extremes.current_A = Extremes.larger(self.extremes.current_A, abs(amperes))
        if not math.isfinite(amperes):
            raise ValueError(f"current must be finite, got {amperes!r}")
        self.source.level_A = amperes
        self._update_compliance()

    def set_output(self, on: bool) -> None:
        self.source.output = on
        self._update_compliance()

    def set_compliance(self, volts: float) -> None:
        self.source.compliance_V = _positive(volts, "compliance")
        self._update_compliance()

    def _update_compliance(self) -> None:
        source = self.source
        if not source.output or source.level_A == 0.0:
            source.tripped = False
            return
        load = self._load_ohm(source.level_A)
        source.tripped = abs(source.level_A) * load > source.compliance_V
        if source.tripped:
            # In compliance the current is what the compliance voltage drives through a load
            # that itself depends on the current (Joule heating): a few fixed-point steps.
            for _ in range(COMPLIANCE_ITERATIONS):
                load = self._load_ohm(source.compliance_V / load)
        source.load_ohm = load

    def _place_sample(self, now: float) -> None:
        """Give the sample the present field and angle (only when they changed: the
        magnetisation's equilibrium is the sample model's costly part)."""
        placed = (self.field.value(now), self.angle.value(now))
        if placed != self._applied:
            self.sample.apply_field(*placed)
            self._applied = placed

    def _load_ohm(self, amperes: float) -> float:
        self._place_sample(self.clock.now())
        try:
            return float(
                self.sample.expected("longitudinal", amperes, self.temperature_K()).resistance_ohm
            )
        except ValueError:  # thermal runaway: no finite voltage drives this current
            return math.inf

    def applied_current(self) -> float:
        source = self.source
        if not source.output:
            return 0.0
        if source.tripped:
            # In compliance the source holds the voltage: the current is what it drives.
            return math.copysign(source.compliance_V / source.load_ohm, source.level_A)
        return source.level_A

    def programmed_current(self) -> float:
        return self.source.level_A

    def compliance_tripped(self) -> bool:
        return self.source.tripped

    # -- field, angle, temperature --------------------------------------------------------
    def set_field_target(self, tesla: float) -> None:
        self.field.retarget(self.clock.now(), tesla)
        self.extremes.field_target_T = Extremes.larger(self.extremes.field_target_T, abs(tesla))

    def set_field_rate(self, tesla_per_s: float) -> None:
        self.extremes.field_rate_T_per_s = Extremes.larger(
            self.extremes.field_rate_T_per_s, tesla_per_s
        )
        self.field.set_rate(self.clock.now(), _positive(tesla_per_s, "field ramp rate"))

    def field_T(self) -> float:
        tesla = self.field.value(self.clock.now())
        self.extremes.field_read_T = Extremes.larger(self.extremes.field_read_T, abs(tesla))
        return tesla

    def move_rotator(self, degrees: float) -> None:
        self.angle.retarget(self.clock.now(), degrees)
        self.extremes.angle_target_deg = Extremes.spread(self.extremes.angle_target_deg, degrees)

    def set_rotator_speed(self, deg_per_s: float) -> None:
        self.angle.set_rate(self.clock.now(), _positive(deg_per_s, "rotator speed"))

    def angle_deg(self) -> float:
        degrees = self.angle.value(self.clock.now())
        self.extremes.angle_read_deg = Extremes.spread(self.extremes.angle_read_deg, degrees)
        return degrees

    def rotator_moving(self) -> bool:
        return not self.angle.arrived(self.clock.now())

    def set_temperature_setpoint(self, kelvin: float) -> None:
        self.extremes.temperature_setpoint_K = Extremes.spread(
            self.extremes.temperature_setpoint_K, kelvin
        )
        self.bath.retarget(self.clock.now(), _positive(kelvin, "temperature setpoint"))

    def set_temperature_rate(self, kelvin_per_s: float) -> None:
        self.bath.set_rate(self.clock.now(), _positive(kelvin_per_s, "temperature ramp rate"))

    def temperature_K(self) -> float:
        return self.bath.value(self.clock.now())

    # -- voltmeters -----------------------------------------------------------------------
    def set_nplc(self, meter: str, nplc: float) -> None:
        self.meters[meter].nplc = _positive(nplc, "nplc")

    def set_range(self, meter: str, volts: float | None) -> None:
        self.meters[meter].range_V = None if volts is None else _positive(volts, "range")

    def set_autozero(self, meter: str, on: bool) -> None:
        self.meters[meter].autozero = on

    def integration_s(self, meter: str) -> float:
        state = self.meters[meter]
        # Autozero takes a zero reading for every reading: twice the integration time.
        return state.nplc / self.mains_frequency_Hz * (2.0 if state.autozero else 1.0)

    def read_voltage(self, meter: str) -> float:
        state = self.meters[meter]
        now = self.clock.now()
        self._place_sample(now)
        integration = self.integration_s(meter)
        volts = self.sample.voltage(
            state.probe, self.applied_current(), self.bath.value(now), now, integration
        )
        self.clock.sleep(integration + state.latency_s)
        if state.range_V is not None and abs(volts) > state.range_V * OVERRANGE_FRACTION:
            return SCPI_OVERRANGE_V
        return volts

    # -- IEEE 488.2 *RST -------------------------------------------------------------------
    def reset(self, instrument: str) -> None:
        """The instrument's power-on state; a moving axis stops where it is."""
        role = self.roles[instrument]
        now = self.clock.now()
        if role == "current_source":
            self.source = SourceState()
        elif role == "voltmeter":
            old = self.meters[instrument]
            self.meters[instrument] = MeterState(old.probe, old.latency_s)
        elif role == "field":
            self.field.stop(now)
        elif role == "rotator":
            self.angle.stop(now)

    def settings(self) -> dict[str, object]:
        """The world's fixed choices, JSON-ready, for run.json."""
        return {
            "start_temperature_K": self.start_temperature_K,
            "temperature_time_constant_s": self.time_constant_s,
            "temperature_rate_K_per_s": self.bath.rate,
            "field_ramp_rate_T_per_s": self.field.rate,
            "rotator_speed_deg_per_s": self.angle.rate,
            "mains_frequency_Hz": self.mains_frequency_Hz,
            "overrange_fraction": OVERRANGE_FRACTION,
            "voltmeter_probes": {name: state.probe for name, state in self.meters.items()},
        }
