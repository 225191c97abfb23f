"""Physical model of a ferromagnet / heavy-metal bilayer channel for the simulated rig.

Pure numpy, no I/O. Everything is SI: ohm, metre, ampere, kelvin, tesla (mu0*H), volt,
second. MODEL.md beside this file documents every equation, parameter, unit and default.
Axes: x is the current direction, y the other in-plane direction, z the film normal.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from sim_instruments.stoner_wohlfarth import (
    ROTATION_PLANES,
    FilmAnisotropy,
    Macrospin,
    Vec3,
)

MODEL_VERSION = "1"
PROBES: tuple[str, ...] = ("longitudinal", "transverse")
# Exact since the 2019 SI redefinition; kept literal so the model needs numpy only.
BOLTZMANN_J_PER_K = 1.380649e-23


# The demo device: an invented scenario. CoFeB 2 nm (150 uohm cm) / W 5 nm (120 uohm cm, the
# carrier), channel 40 um x 4 um between the voltage probes. Its resistance and the carrier's
# share of the current follow from the parallel-resistor model (acquire.inputs.stack, tested
# against these numbers): sheet conductances 1.3333 mS + 4.1667 mS, R0 = 10 squares / 5.5 mS.
DEMO_LENGTH_M = 40e-6
DEMO_WIDTH_M = 4e-6
DEMO_RESISTANCE_OHM = 1e4 / 5.5
DEMO_CARRIER_FRACTION = 25.0 / 33.0
DEMO_CARRIER_THICKNESS_M = 5e-9

# Quantities that must be > 0 for the equations to mean anything.
_POSITIVE = (
    "resistance_ohm",
    "reference_temperature_K",
    "umr_magnon_field_T",
    "length_m",
    "width_m",
    "carrier_thickness_m",
    "carrier_fraction",
)
_NON_NEGATIVE = (
    "thermal_resistance_K_per_W",
    "noise_density_V_per_rtHz",
    "anisotropy_field_T",
    "umr_magnon_T0_K",
)


@dataclass(frozen=True)
class SampleParameters:
    """True parameters of the simulated device. Defaults are the invented demo device."""

    # Channel and stack
    resistance_ohm: float = DEMO_RESISTANCE_OHM  # R0: T_ref, zero current, m along z
    length_m: float = DEMO_LENGTH_M
    width_m: float = DEMO_WIDTH_M
    carrier_thickness_m: float = DEMO_CARRIER_THICKNESS_M
    carrier_fraction: float = DEMO_CARRIER_FRACTION
    # Temperature
    reference_temperature_K: float = 300.0
    temperature_coefficient_per_K: float = 5e-4  # (dR/dT) / R0 at T_ref
    thermal_resistance_K_per_W: float = 1500.0  # Joule heating: dT = R_th * I^2 * R
    # Even magnetoresistance and Hall
    amr_ratio: float = 5e-4  # R(m||x)/R(m||z) - 1
    smr_ratio: float = 1e-3  # 1 - R(m||y)/R(m||z)
    planar_hall_ohm: float = 0.14  # amplitude of sin(2 phi) in R_xy
    anomalous_hall_ohm: float = 1.5  # R_xy at m = +z
    transverse_misalignment_fraction: float = 1e-3  # share of R_xx seen by the Hall pair
    # Unidirectional magnetoresistance, ratio to R0 per unit carrier current density
    umr_ratio_per_A_m2: float = 2e-17  # field-independent (spin-dependent) part
    umr_magnon_ratio_per_A_m2: float = 3e-17  # magnon part at T_ref, B -> 0
    umr_magnon_field_T: float = 2.0  # B_m in 1 / (1 + |B| / B_m)
    umr_magnon_T0_K: float = 60.0  # floor of (T + T0) / (T_ref + T0) as T -> 0
    spin_hall_sign: int = -1  # sign of the heavy metal's spin Hall angle (W: -1, Pt: +1)
    # Thermal and instrumental voltages
    thermal_V_per_A2: float = 0.4  # anomalous-Nernst-like: V = c * I^2 * m_y
    thermoelectric_offset_V: float = 10e-6  # longitudinal pair, independent of current
    transverse_offset_V: float = 1e-6  # transverse pair
    drift_V_per_s: float = 2e-10  # linear in time, both pairs
    noise_density_V_per_rtHz: float = 20e-9  # voltmeter input noise, one-sided
    # Magnetisation (Stoner-Wohlfarth)
    anisotropy_field_T: float = 5e-3  # uniaxial in-plane, mu0*H_k
    demag_field_T: float = 0.8  # mu0*M_eff; > 0 keeps m in plane
    easy_axis_deg: float = 0.0  # in-plane, from +x towards +y

    def __post_init__(self) -> None:
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            if f.name == "spin_hall_sign":
                if value not in (1, -1) or isinstance(value, bool):
                    raise ValueError(f"spin_hall_sign must be +1 or -1, got {value!r}")
                object.__setattr__(self, f.name, int(value))
                continue
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ValueError(f"{f.name} must be a number, got {value!r}")
            if not math.isfinite(value):
                raise ValueError(f"{f.name} must be finite, got {value!r}")
            # Floats throughout so as_dict() is uniform JSON whatever the caller passed.
            object.__setattr__(self, f.name, float(value))
        for key in _POSITIVE:
            if not getattr(self, key) > 0.0:
                raise ValueError(f"{key} must be > 0, got {getattr(self, key)!r}")
        for key in _NON_NEGATIVE:
            if not getattr(self, key) >= 0.0:
                raise ValueError(f"{key} must be >= 0, got {getattr(self, key)!r}")
        if self.carrier_fraction > 1.0:
            raise ValueError(f"carrier_fraction must be <= 1, got {self.carrier_fraction!r}")

    @classmethod
    def field_names(cls) -> tuple[str, ...]:
        return tuple(f.name for f in dataclasses.fields(cls))

    @classmethod
    def with_overrides(cls, **values: Any) -> SampleParameters:
        """Parameters by keyword (the channel from a protocol, the rest from a rig's
        `simulation:`); an unknown name raises ValueError naming it and the valid ones."""
        valid = cls.field_names()
        for key in values:
            if key not in valid:
                raise ValueError(f"unknown sample parameter {key!r}; valid: {', '.join(valid)}")
        return cls(**values)

    def as_dict(self) -> dict[str, float | int | str]:
        """Every parameter by name: the JSON-ready truth of a simulated run."""
        return dataclasses.asdict(self)

    def carrier_current_density(self, current_A: float) -> float:
        """Current density in the carrier layer, A/m^2 (signed like the current)."""
        return current_A * self.carrier_fraction / (self.width_m * self.carrier_thickness_m)


@dataclass(frozen=True)
class ExpectedPoint:
    """Noise-free reduced values at one current amplitude and magnetisation state."""

    resistance_ohm: float
    unidirectional_ohm: float

    @property
    def unidirectional_ratio(self) -> float:
        if self.resistance_ohm == 0.0:
            return math.nan
        return self.unidirectional_ohm / self.resistance_ohm


class BilayerSample:
    """A bilayer channel in a field: magnetisation state plus voltages at the probes."""

    def __init__(
        self, params: SampleParameters, rotation_plane: str = "xy", seed: int | None = None
    ) -> None:
        if rotation_plane not in ROTATION_PLANES:
            raise ValueError(
                f"unknown rotation plane {rotation_plane!r}; valid: {', '.join(ROTATION_PLANES)}"
            )
        self._params = params
        self._plane = rotation_plane
        self._seed = seed
        self._rng = np.random.default_rng(seed)
        anisotropy = FilmAnisotropy(
            params.anisotropy_field_T, params.demag_field_T, params.easy_axis_deg
        )
        self._spin = Macrospin(anisotropy, rotation_plane)

    @property
    def params(self) -> SampleParameters:
        return self._params

    @property
    def rotation_plane(self) -> str:
        return self._plane

    @property
    def field_T(self) -> float:
        return self._spin.field_T

    @property
    def angle_deg(self) -> float:
        return self._spin.angle_deg

    def apply_field(self, field_T: float, angle_deg: float) -> None:
        self._spin.apply_field(field_T, angle_deg)

    @property
    def magnetisation(self) -> tuple[float, float, float]:
        return self._spin.magnetisation

    # --- even part -------------------------------------------------------------------

    def _magnetic_factor(self, m: Vec3) -> float:
        p = self._params
        return 1.0 + p.amr_ratio * m[0] * m[0] - p.smr_ratio * m[1] * m[1]

    def device_temperature_K(self, current_A: float, temperature_K: float) -> float:
        """Bath temperature plus Joule heating, solved self-consistently.

        T = T_bath + R_th I^2 R(T) with R linear in T has the closed form used here; a
        loop gain R_th I^2 R0' alpha >= 1 is thermal runaway, which no real run survives.
        """
        if not (math.isfinite(temperature_K) and temperature_K >= 0.0):
            raise ValueError(f"temperature_K must be finite and >= 0, got {temperature_K!r}")
        p = self._params
        k = p.thermal_resistance_K_per_W * current_A * current_A * p.resistance_ohm
        k *= self._magnetic_factor(self.magnetisation)
        alpha = p.temperature_coefficient_per_K
        gain = k * alpha
        if gain >= 1.0:
            raise ValueError(
                f"thermal runaway at {current_A!r} A: Joule-heating loop gain {gain:.3g} >= 1"
            )
        return (temperature_K + k * (1.0 - alpha * p.reference_temperature_K)) / (1.0 - gain)

    def _longitudinal_ohm(self, device_K: float) -> float:
        p = self._params
        thermal = 1.0 + p.temperature_coefficient_per_K * (device_K - p.reference_temperature_K)
        r = p.resistance_ohm * thermal * self._magnetic_factor(self.magnetisation)
        if r <= 0.0:
            raise ValueError(
                f"resistance not positive at {device_K!r} K: temperature coefficient too large"
            )
        return r

    def _transverse_ohm(self, longitudinal_ohm: float) -> float:
        p = self._params
        mx, my, mz = self.magnetisation
        return (
            p.planar_hall_ohm * 2.0 * mx * my
            + p.anomalous_hall_ohm * mz
            + p.transverse_misalignment_fraction * longitudinal_ohm
        )

    # --- odd part --------------------------------------------------------------------

    def umr_zeta_per_A_m2(self, device_K: float) -> float:
        """zeta(B, T): unidirectional resistance over R0 per unit carrier current density."""
        p = self._params
        thermal = (device_K + p.umr_magnon_T0_K) / (p.reference_temperature_K + p.umr_magnon_T0_K)
        field = 1.0 / (1.0 + abs(self.field_T) / p.umr_magnon_field_T)
        return p.umr_ratio_per_A_m2 + p.umr_magnon_ratio_per_A_m2 * thermal * field

    def _unidirectional_ohm(self, probe: str, current_A: float, device_K: float) -> float:
        """Odd-in-current resistance for a signed current (so current * this is even)."""
        p = self._params
        mx, my, _ = self.magnetisation
        if probe == "transverse":
            # The Nernst field E ~ grad(T) x m: along y for m along x, over the width.
            return p.thermal_V_per_A2 * (p.width_m / p.length_m) * current_A * mx
        j = p.carrier_current_density(current_A)
        umr = p.spin_hall_sign * p.resistance_ohm * self.umr_zeta_per_A_m2(device_K) * j * my
        return umr + p.thermal_V_per_A2 * current_A * my

    # --- readings --------------------------------------------------------------------

    def _even_ohm(self, probe: str, device_K: float) -> float:
        longitudinal = self._longitudinal_ohm(device_K)
        return longitudinal if probe == "longitudinal" else self._transverse_ohm(longitudinal)

    def expected(self, probe: str, current_A: float, temperature_K: float) -> ExpectedPoint:
        """Noise-free values at current amplitude |current_A| for the present state.

        resistance_ohm = (R(+I) + R(-I))/2, unidirectional_ohm = (R(+I) - R(-I))/2, no
        offset, drift or noise: the reduction of DESIGN.md applied to the model's truth.
        """
        _check_probe(probe)
        amplitude = abs(current_A)
        device_K = self.device_temperature_K(amplitude, temperature_K)
        return ExpectedPoint(
            resistance_ohm=self._even_ohm(probe, device_K),
            unidirectional_ohm=self._unidirectional_ohm(probe, amplitude, device_K),
        )

    def noise_sigma_V(
        self, probe: str, current_A: float, temperature_K: float, integration_s: float
    ) -> float:
        """Standard deviation of one reading, volts.

        A reading averages for integration_s; its equivalent noise bandwidth is
        df = 1 / (2 * integration_s). Voltmeter noise and the sample's Johnson-Nyquist
        noise (at the device temperature, through the resistance between the probes)
        are independent, so their powers add.
        """
        _check_probe(probe)
        if not (math.isfinite(integration_s) and integration_s > 0.0):
            raise ValueError(f"integration_s must be finite and > 0, got {integration_s!r}")
        device_K = self.device_temperature_K(current_A, temperature_K)
        longitudinal = self._longitudinal_ohm(device_K)
        # The Hall pair sees roughly one square of the channel where it crosses it.
        p = self._params
        source_ohm = (
            longitudinal if probe == "longitudinal" else longitudinal * p.width_m / p.length_m
        )
        bandwidth_Hz = 1.0 / (2.0 * integration_s)
        density2 = p.noise_density_V_per_rtHz**2 + 4.0 * BOLTZMANN_J_PER_K * device_K * source_ohm
        return math.sqrt(density2 * bandwidth_Hz)

    def voltage(
        self,
        probe: str,
        current_A: float,
        temperature_K: float,
        time_s: float,
        integration_s: float,
    ) -> float:
        """One voltmeter reading at signed current_A, bath temperature and run time."""
        _check_probe(probe)
        p = self._params
        device_K = self.device_temperature_K(current_A, temperature_K)
        resistance = self._even_ohm(probe, device_K) + self._unidirectional_ohm(
            probe, current_A, device_K
        )
        offset = p.thermoelectric_offset_V if probe == "longitudinal" else p.transverse_offset_V
        clean = offset + p.drift_V_per_s * time_s + current_A * resistance
        sigma = self.noise_sigma_V(probe, current_A, temperature_K, integration_s)
        return clean + sigma * float(self._rng.standard_normal())

    def truth(self) -> dict[str, object]:
        out: dict[str, object] = dict(self._params.as_dict())
        out["rotation_plane"] = self._plane
        out["model_version"] = MODEL_VERSION
        out["seed"] = self._seed
        return out


def _check_probe(probe: str) -> None:
    if probe not in PROBES:
        raise ValueError(f"unknown probe {probe!r}; valid: {', '.join(PROBES)}")
