"""The true parameters of the simulated bilayer (MODEL.md documents each one).

Two parameters may be left to the model: `spin_hall_sign` (None: from the carrier material's
name, sim_instruments/spin_hall.py) and `planar_hall_ohm` (None: from the longitudinal
anisotropy and the channel's squares). `truth()` of the sample records the values used and
which rule gave them.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

from sim_instruments.spin_hall import SpinHallSign, spin_hall_sign_for

# The demo device: an invented scenario. CoFeB 2 nm (150 uohm cm) / W 5 nm (120 uohm cm, the
# carrier), channel 40 um x 4 um between the voltage probes. Its resistance and the carrier's
# share of the current follow from the parallel-resistor model (acquire.inputs.stack, tested
# against these numbers): sheet conductances 1.3333 mS + 4.1667 mS, R0 = 10 squares / 5.5 mS.
DEMO_LENGTH_M = 40e-6
DEMO_WIDTH_M = 4e-6
DEMO_RESISTANCE_OHM = 1e4 / 5.5
DEMO_CARRIER_FRACTION = 25.0 / 33.0
DEMO_CARRIER_THICKNESS_M = 5e-9
DEMO_CARRIER_MATERIAL = "W"

PLANAR_HALL_FROM_GEOMETRY = "geometry: (amr_ratio + smr_ratio) * R0 * w / (2 L)"

# Quantities that must be > 0 for the equations to mean anything.
_POSITIVE = (
    "resistance_ohm",
    "reference_temperature_K",
    "umr_magnon_field_T",
    "umr_threshold_density_A_m2",
    "length_m",
    "width_m",
    "carrier_thickness_m",
    "carrier_fraction",
)
_NON_NEGATIVE = (
    "thermal_resistance_K_per_W",
    "noise_density_V_per_rtHz",
    "anisotropy_field_T",
    "umr_magnon_oscillator_K",
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
    carrier_material: str = DEMO_CARRIER_MATERIAL  # the carrier layer's name in the protocol
    # Temperature
    reference_temperature_K: float = 300.0
    temperature_coefficient_per_K: float = 5e-4  # (dR/dT) / R0 at T_ref
    thermal_resistance_K_per_W: float = 1500.0  # Joule heating: dT = R_th * I^2 * R
    # Even magnetoresistance and Hall
    amr_ratio: float = 5e-4  # R(m||x)/R(m||z) - 1
    smr_ratio: float = 1e-3  # 1 - R(m||y)/R(m||z)
    planar_hall_ohm: float | None = None  # R_PHE at T_ref; None: from AMR, SMR and geometry
    anomalous_hall_ohm: float = 1.5  # R_xy at m = +z
    transverse_misalignment_fraction: float = 1e-3  # share of R_xx seen by the Hall pair
    # Unidirectional magnetoresistance, ratio to R0 per unit carrier current density
    umr_ratio_per_A_m2: float = 2e-17  # field-independent (spin-dependent) part
    umr_magnon_ratio_per_A_m2: float = 3e-17  # magnon part at T_ref, B -> 0
    umr_magnon_field_T: float = 2.0  # B_m in 1 / (1 + |B| / B_m)
    umr_magnon_oscillator_K: float = 200.0  # T_w = hbar w / k_B of the magnon oscillator
    umr_threshold_density_A_m2: float = 6e10  # J_c: the superlinear part starts here
    umr_threshold_ratio_per_A_m2: float = 2e-17  # added slope beyond J_c
    spin_hall_sign: int | None = None  # +1 or -1; None: from carrier_material
    # Thermal and instrumental voltages
    thermal_V_per_A2: float = 0.4  # anomalous-Nernst-like: V_xx = c * I^2 * m_y
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
            if f.name == "carrier_material":
                if not isinstance(value, str):
                    raise ValueError(f"carrier_material must be a name, got {value!r}")
                continue
            if f.name == "spin_hall_sign":
                if value is not None and (value not in (1, -1) or isinstance(value, bool)):
                    raise ValueError(f"spin_hall_sign must be +1 or -1, got {value!r}")
                object.__setattr__(self, f.name, None if value is None else int(value))
                continue
            if f.name == "planar_hall_ohm" and value is None:
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

    def as_dict(self) -> dict[str, float | int | str | None]:
        """Every parameter by name as given (None where the model derives it)."""
        return dataclasses.asdict(self)

    # --- values the model derives -----------------------------------------------------

    @property
    def spin_hall(self) -> SpinHallSign:
        """The sign simulated and its source: given, from the table, or the default."""
        return spin_hall_sign_for(self.carrier_material, self.spin_hall_sign)

    @property
    def planar_hall_amplitude_ohm(self) -> float:
        """R_PHE at T_ref: the given value, or (AMR + SMR) R0 w / (2 L) for a single domain."""
        if self.planar_hall_ohm is not None:
            return self.planar_hall_ohm
        anisotropy_ohm = (self.amr_ratio + self.smr_ratio) * self.resistance_ohm
        return anisotropy_ohm * self.width_m / (2.0 * self.length_m)

    @property
    def planar_hall_source(self) -> str:
        return PLANAR_HALL_FROM_GEOMETRY if self.planar_hall_ohm is None else "set: planar_hall_ohm"

    @property
    def carrier_density_per_A(self) -> float:
        """Current density in the carrier per ampere of total current, A/m^2 per A."""
        return self.carrier_fraction / (self.width_m * self.carrier_thickness_m)

    def carrier_current_density(self, current_A: float) -> float:
        """Current density in the carrier layer, A/m^2 (signed like the current)."""
        return current_A * self.carrier_density_per_A
