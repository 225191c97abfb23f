"""Physical model of a ferromagnet / heavy-metal bilayer channel for the simulated rig.

Pure numpy, no I/O. Everything is SI: ohm, metre, ampere, kelvin, tesla (mu0*H), volt,
second. MODEL.md beside this file documents every equation, parameter, unit and default.
Axes: x is the current direction, y the other in-plane direction, z the film normal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sim_instruments.oscillator import oscillator_factor
from sim_instruments.sample_parameters import SampleParameters
from sim_instruments.stoner_wohlfarth import (
    ROTATION_PLANES,
    FilmAnisotropy,
    Macrospin,
    Vec3,
)

MODEL_VERSION = "2"
PROBES: tuple[str, ...] = ("longitudinal", "transverse")
# Exact since the 2019 SI redefinition; kept literal so the model needs numpy only.
BOLTZMANN_J_PER_K = 1.380649e-23
ELEMENTARY_CHARGE_C = 1.602176634e-19  # exact since 2019 too

__all__ = [
    "MODEL_VERSION", "PROBES", "BilayerSample", "ExpectedPoint", "SampleParameters",
    "UnidirectionalParts",
]


@dataclass(frozen=True)
class UnidirectionalParts:
    """The odd-in-current resistance of one probe pair split by origin, ohm, at |I|.

    spin_ohm: the spin-dependent part linear in j (zeta(B, T) j); threshold_ohm: the intrinsic
    superlinear part beyond J_c; thermal_ohm: the anomalous-Nernst-like part of Joule heating.
    """

    spin_ohm: float
    threshold_ohm: float
    thermal_ohm: float

    @property
    def total_ohm(self) -> float:
        return self.spin_ohm + self.threshold_ohm + self.thermal_ohm


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
        # Resolved once: the name lookup and the geometry do not change during a run.
        self._spin_hall_sign = params.spin_hall.sign
        self._planar_hall_ohm = params.planar_hall_amplitude_ohm

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

    def _thermal_factor(self, device_K: float) -> float:
        p = self._params
        factor = 1.0 + p.temperature_coefficient_per_K * (device_K - p.reference_temperature_K)
        if factor <= 0.0:
            raise ValueError(
                f"resistance not positive at {device_K!r} K: temperature coefficient too large"
            )
        return factor

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
        return p.resistance_ohm * self._thermal_factor(device_K) * self._magnetic_factor(
            self.magnetisation
        )

    def _transverse_ohm(self, device_K: float, longitudinal_ohm: float) -> float:
        # The planar Hall term is the off-diagonal part of the same anisotropic resistivity
        # as R_xx's AMR and SMR, so it follows R_xx's temperature factor; the anomalous Hall
        # term is taken as temperature-independent.
        p = self._params
        mx, my, mz = self.magnetisation
        planar = self._planar_hall_ohm * self._thermal_factor(device_K) * 2.0 * mx * my
        return (
            planar
            + p.anomalous_hall_ohm * mz
            + p.transverse_misalignment_fraction * longitudinal_ohm
        )

    # --- odd part --------------------------------------------------------------------

    def magnon_temperature_factor(self, device_K: float) -> float:
        """<E>(T) / <E>(T_ref) of an oscillator of temperature T_w (zero-point included)."""
        p = self._params
        return oscillator_factor(p.umr_magnon_oscillator_K, device_K, p.reference_temperature_K)

    def umr_zeta_per_A_m2(self, device_K: float) -> float:
        """zeta(B, T): linear unidirectional resistance over R0 per unit carrier current
        density, at the present field."""
        p = self._params
        field = 1.0 / (1.0 + abs(self.field_T) / p.umr_magnon_field_T)
        magnon = p.umr_magnon_ratio_per_A_m2 * self.magnon_temperature_factor(device_K) * field
        return p.umr_ratio_per_A_m2 + magnon

    def _parts(self, probe: str, current_A: float, device_K: float) -> UnidirectionalParts:
        """Odd-in-current resistance for a signed current (so current * this is even)."""
        p = self._params
        mx, my, _ = self.magnetisation
        if probe == "transverse":
            # The Nernst field E ~ grad(T) x m has E_y ~ +m_x where E_x ~ -m_y (MODEL.md):
            # the Hall pair sees it over the width w, the longitudinal pair over L.
            thermal = -p.thermal_V_per_A2 * (p.width_m / p.length_m) * current_A * mx
            return UnidirectionalParts(0.0, 0.0, thermal)
        j = p.carrier_current_density(current_A)
        scale = self._spin_hall_sign * p.resistance_ohm * my
        spin = scale * self.umr_zeta_per_A_m2(device_K) * j
        beyond = max(0.0, abs(j) - p.umr_threshold_density_A_m2)
        threshold = scale * p.umr_threshold_ratio_per_A_m2 * math.copysign(beyond, j)
        return UnidirectionalParts(spin, threshold, p.thermal_V_per_A2 * current_A * my)

    def unidirectional_parts(
        self, probe: str, current_A: float, temperature_K: float
    ) -> UnidirectionalParts:
        """The noise-free unidirectional resistance at |current_A| split by origin; the sum
        is expected(...).unidirectional_ohm."""
        _check_probe(probe)
        amplitude = abs(current_A)
        return self._parts(probe, amplitude, self.device_temperature_K(amplitude, temperature_K))

    # --- readings --------------------------------------------------------------------

    def _even_ohm(self, probe: str, device_K: float) -> float:
        longitudinal = self._longitudinal_ohm(device_K)
        if probe == "longitudinal":
            return longitudinal
        return self._transverse_ohm(device_K, longitudinal)

    def expected(self, probe: str, current_A: float, temperature_K: float) -> ExpectedPoint:
        """Noise-free values at current amplitude |current_A| for the present state.

        resistance_ohm = (R(+I) + R(-I))/2, unidirectional_ohm = (R(+I) - R(-I))/2, no
        offset, drift or noise: what a current-reversal reduction recovers.
        """
        _check_probe(probe)
        amplitude = abs(current_A)
        device_K = self.device_temperature_K(amplitude, temperature_K)
        return ExpectedPoint(
            resistance_ohm=self._even_ohm(probe, device_K),
            unidirectional_ohm=self._parts(probe, amplitude, device_K).total_ohm,
        )

    def noise_sigma_V(
        self,
        probe: str,
        current_A: float,
        temperature_K: float,
        integration_s: float,
        autozero: bool = False,
        meter_noise_V_per_rtHz: float | None = None,
    ) -> float:
        """Standard deviation of one reading, volts; `meter_noise_V_per_rtHz` is the
        voltmeter's own input noise (None: the parameter `noise_density_V_per_rtHz`).

        A reading averages for integration_s; its equivalent noise bandwidth is
        df = 1 / (2 * integration_s). Voltmeter noise and the sample's Johnson-Nyquist
        noise (at the device temperature, through the resistance between the probes)
        are independent, so their powers add. With autozero the voltmeter subtracts a zero
        reading of the same length taken on its internal short: that adds the voltmeter's
        input noise once more (not the sample's), so the meter's share of the variance
        doubles.
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
        meter = p.noise_density_V_per_rtHz if meter_noise_V_per_rtHz is None else (
            meter_noise_V_per_rtHz)
        meter2 = meter**2 * (2.0 if autozero else 1.0)
        density2 = meter2 + 4.0 * BOLTZMANN_J_PER_K * device_K * source_ohm
        return math.sqrt(density2 * bandwidth_Hz)

    def voltage(
        self,
        probe: str,
        current_A: float,
        temperature_K: float,
        time_s: float,
        integration_s: float,
        autozero: bool = False,
        meter_noise_V_per_rtHz: float | None = None,
    ) -> float:
        """One voltmeter reading at signed current_A, bath temperature and run time;
        integration_s is the reading's own integration (an autozero's zero comes on top);
        meter_noise_V_per_rtHz as in noise_sigma_V."""
        _check_probe(probe)
        p = self._params
        device_K = self.device_temperature_K(current_A, temperature_K)
        resistance = (
            self._even_ohm(probe, device_K) + self._parts(probe, current_A, device_K).total_ohm
        )
        offset = p.thermoelectric_offset_V if probe == "longitudinal" else p.transverse_offset_V
        clean = offset + p.drift_V_per_s * time_s + current_A * resistance
        sigma = self.noise_sigma_V(probe, current_A, temperature_K, integration_s, autozero,
                                   meter_noise_V_per_rtHz)
        return clean + sigma * float(self._rng.standard_normal())

    def truth(self) -> dict[str, object]:
        """Every parameter with the values the model used (the spin Hall sign and planar
        Hall amplitude resolved, with their sources), plus derived numbers an analysis
        compares with. Built again with SampleParameters(**{parameters}), it simulates the
        same device."""
        p = self._params
        out: dict[str, object] = dict(p.as_dict())
        spin_hall = p.spin_hall
        out["spin_hall_sign"] = spin_hall.sign
        out["spin_hall_sign_source"] = spin_hall.source
        out["planar_hall_ohm"] = p.planar_hall_amplitude_ohm
        out["planar_hall_source"] = p.planar_hall_source
        out["carrier_density_per_A_A_m2"] = p.carrier_density_per_A
        out["umr_threshold_current_A"] = p.umr_threshold_density_A_m2 / p.carrier_density_per_A
        out["umr_magnon_oscillator_energy_meV"] = (
            BOLTZMANN_J_PER_K * p.umr_magnon_oscillator_K / ELEMENTARY_CHARGE_C * 1e3
        )
        out["umr_magnon_factor_at_0K"] = self.magnon_temperature_factor(0.0)
        out["thermal_transverse_V_per_A2"] = -p.thermal_V_per_A2 * p.width_m / p.length_m
        out["rotation_plane"] = self._plane
        out["model_version"] = MODEL_VERSION
        out["seed"] = self._seed
        return out


def _check_probe(probe: str) -> None:
    if probe not in PROBES:
        raise ValueError(f"unknown probe {probe!r}; valid: {', '.join(PROBES)}")
