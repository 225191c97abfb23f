"""The simulated laboratory's dynamic state, on the runner's clock.

One SimulatedWorld holds the sample, the clock and one simulated instrument per rig entry
(sim_instruments/roles/<role>.py builds it). The instruments share the physical state through
the world: the current through the sample, the field and angle it sits in, the bath
temperature. An instrument that provides one of them registers a reader; a rig without such an
instrument leaves it at its default (no current, zero field and angle, the start temperature).
A voltmeter reading asks the sample model for the voltage at the present state and lets the
reading's integration time pass on the clock, so a VirtualClock advances and a RealClock waits.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

START_TEMPERATURE_K = 300.0
# A cryostat's bath follows its setpoint with a lag of this order (the time constant of the
# exponential approach; the ramp rate limits it further away).
TEMPERATURE_TIME_CONSTANT_S = 30.0
# Keys of a rig's `simulation:` that belong to the world, not to the sample model.
WORLD_SETTINGS = ("start_temperature_K", "temperature_time_constant_s")
# The physical state instruments share, and its value when no instrument provides it (the
# temperature's is the start temperature).
SHARED_DEFAULTS: Mapping[str, float] = {"current_A": 0.0, "field_T": 0.0, "angle_deg": 0.0}


class Clock(Protocol):
    def now(self) -> float: ...
    def sleep(self, seconds: float) -> None: ...


class Sample(Protocol):
    """What the world needs of sim_instruments.sample_model.BilayerSample."""

    def apply_field(self, field_T: float, angle_deg: float) -> None: ...
    def voltage(self, probe: str, current_A: float, temperature_K: float, time_s: float,
                integration_s: float, autozero: bool = False,
                meter_noise_V_per_rtHz: float | None = None) -> float: ...
    def expected(self, probe: str, current_A: float, temperature_K: float) -> Any: ...
    def truth(self) -> dict[str, object]: ...


class SimulatedInstrument(Protocol):
    """One rig instrument's simulated behaviour (built by its role's module)."""

    def bindings(self) -> dict[str, Callable[..., object]]:
        """Dialect template name -> reader (query), action or setter (command with a value)."""

    def reset(self) -> None:
        """IEEE 488.2 *RST: the instrument's power-on state."""

    def settings(self) -> dict[str, object]:
        """Its fixed choices, JSON-ready, for run.json."""


def sample_overrides(simulation: Mapping[str, object]) -> dict[str, object]:
    """A rig's `simulation:` without the world's keys: the sample-model parameters."""
    return {key: value for key, value in simulation.items() if key not in WORLD_SETTINGS}


def positive(value: float, what: str) -> float:
    if not (math.isfinite(value) and value > 0.0):
        raise ValueError(f"{what} must be > 0, got {value!r}")
    return value


@dataclass
class Extremes:
    """The most the instruments were asked to do (and read back) over the world's life: a
    rehearsal's record of what a real rig would have been told. A setter records the value it
    was sent before judging it, so a value the instrument refuses still shows; NaN is skipped.
    `largest` keeps the largest magnitude, `span` the (lowest, highest) pair."""

    largest: dict[str, float] = field(default_factory=dict)
    span: dict[str, tuple[float, float]] = field(default_factory=dict)
    # (instrument, template, value) of every command refused for a hardware limit
    refused: list[tuple[str, str, float]] = field(default_factory=list)

    def magnitude(self, name: str, value: float) -> None:
        if not math.isnan(value):
            self.largest[name] = max(abs(value), self.largest.get(name, abs(value)))

    def extent(self, name: str, value: float) -> None:
        if math.isnan(value):
            return
        low, high = self.span.get(name, (value, value))
        self.span[name] = (min(low, value), max(high, value))


class SimulatedWorld:
    def __init__(self, clock: Clock, sample: Sample, rig: Any) -> None:
        """The world without instruments; sim_instruments.roles.build_world adds the rig's."""
        self.clock = clock
        self.sample = sample
        self.mains_frequency_Hz = float(rig.mains_frequency)
        settings = rig.simulation
        self.start_temperature_K = float(settings.get("start_temperature_K", START_TEMPERATURE_K))
        self.temperature_time_constant_s = float(
            settings.get("temperature_time_constant_s", TEMPERATURE_TIME_CONSTANT_S)
        )
        self.extremes = Extremes()
        self._defaults = {**SHARED_DEFAULTS, "temperature_K": self.start_temperature_K}
        self._providers: dict[str, Callable[[], float]] = {}
        self._applied: tuple[float, float] | None = None
        self.instruments: dict[str, SimulatedInstrument] = {}

    # -- the shared physical state ------------------------------------------------------
    def provide(self, quantity: str, read: Callable[[], float]) -> None:
        """`read()` gives `quantity` from now on (one provider per quantity)."""
        if quantity in self._providers:
            raise ValueError(f"two simulated instruments provide {quantity}")
        self._providers[quantity] = read

    def state(self, quantity: str) -> float:
        read = self._providers.get(quantity)
        return read() if read is not None else self._defaults[quantity]

    def place_sample(self) -> None:
        """Give the sample the present field and angle (only when they changed: the
        magnetisation's equilibrium is the sample model's costly part)."""
        placed = (self.state("field_T"), self.state("angle_deg"))
        if placed != self._applied:
            self.sample.apply_field(*placed)
            self._applied = placed

    def load_ohm(self, amperes: float) -> float:
        """The sample's longitudinal resistance at this current (Joule heating included)."""
        self.place_sample()
        try:
            return float(self.sample.expected(
                "longitudinal", amperes, self.state("temperature_K")).resistance_ohm)
        except ValueError:  # thermal runaway: no finite voltage drives this current
            return math.inf

    def reset(self, instrument: str) -> None:
        self.instruments[instrument].reset()

    def settings(self) -> dict[str, object]:
        """The world's fixed choices, JSON-ready, for run.json."""
        found: dict[str, object] = {
            "start_temperature_K": self.start_temperature_K,
            "temperature_time_constant_s": self.temperature_time_constant_s,
            "mains_frequency_Hz": self.mains_frequency_Hz,
        }
        for instrument in self.instruments.values():
            for key, value in instrument.settings().items():
                if isinstance(value, dict) and isinstance(found.get(key), dict):
                    found[key] = {**found[key], **value}  # type: ignore[dict-item]
                else:
                    found[key] = value
        return found
