"""What each rotation plane's angle fit gives, by channel kind: the convention table.

The harmonic coefficients are in the magnetisation angle alpha (phi_M in xy, theta_M in zx
and zy): R = c0 + a1 cos(alpha) + b1 sin(alpha) + a2 cos(2 alpha) + b2 sin(2 alpha). With
m = (cos phi_M, sin phi_M, 0) in xy, (sin theta_M, 0, cos theta_M) in zx and
(0, sin theta_M, cos theta_M) in zy, and R_xx = R0 (1 + AMR m_x^2 - SMR m_y^2) (McGuire and
Potter 1975 for the AMR; Nakayama et al. 2013 for the SMR, lowest with m along the spin
polarisation y):

- xy: m_x^2 = (1 + cos 2phi_M)/2, m_y^2 = (1 - cos 2phi_M)/2: a2 = (AMR + SMR) R0 / 2; an
  in-plane rotation cannot tell the two apart.
- zx: m_x^2 = (1 - cos 2theta_M)/2, m_y = 0: a2 = -AMR R0 / 2.
- zy: m_x = 0, m_y^2 = (1 - cos 2theta_M)/2: a2 = +SMR R0 / 2.

The transverse R_xy = R_PHE 2 m_x m_y + R_AHE m_z: R_PHE sin 2phi_M in xy (b2), R_AHE cos
theta_M in zx and zy (a1). The unidirectional part (R(+I) - R(-I))/2 is odd in m_y: its
m_y term (b1 in xy and zy) is `umr_ohm`. The literature's full difference
R(+I) - R(-I) at m = +y, equal to R(+m_y) - R(-m_y) at one current for this part, is
2 * umr_ohm.
"""

from __future__ import annotations

from dataclasses import dataclass

TERM_INDEX: dict[str, int] = {"c0": 0, "cos1": 1, "sin1": 2, "cos2": 3, "sin2": 4}


@dataclass(frozen=True)
class NamedAmplitude:
    quantity: str
    source: str  # "resistance" or "unidirectional"
    term: str  # a HARMONIC_TERMS name
    factor: float
    model: str
    ratio: bool = False  # also give quantity/c0 as <stem>_ratio


LONGITUDINAL: dict[str, tuple[NamedAmplitude, ...]] = {
    "xy": (
        NamedAmplitude("amr_plus_smr_ohm", "resistance", "cos2", 2.0,
                       "R(m||x) - R(m||y) = (AMR + SMR) R0 = 2*a2", ratio=True),
        NamedAmplitude("umr_ohm", "unidirectional", "sin1", 1.0,
                       "m_y-odd part of (R(+I) - R(-I))/2: b1 (sin phi_M = m_y)"),
    ),
    "zx": (
        NamedAmplitude("amr_ohm", "resistance", "cos2", -2.0,
                       "R(m||x) - R(m||z) = AMR R0 = -2*a2", ratio=True),
        NamedAmplitude("umr_ohm", "unidirectional", "sin1", 1.0,
                       "b1 of (R(+I) - R(-I))/2 (sin theta_M = m_x; m_y = 0 in zx)"),
    ),
    "zy": (
        NamedAmplitude("smr_ohm", "resistance", "cos2", 2.0,
                       "R(m||z) - R(m||y) = SMR R0 = 2*a2", ratio=True),
        NamedAmplitude("umr_ohm", "unidirectional", "sin1", 1.0,
                       "m_y-odd part of (R(+I) - R(-I))/2: b1 (sin theta_M = m_y)"),
    ),
}
TRANSVERSE: dict[str, tuple[NamedAmplitude, ...]] = {
    "xy": (
        NamedAmplitude("planar_hall_ohm", "resistance", "sin2", 1.0,
                       "R_xy = R_PHE sin 2phi_M: b2"),
        NamedAmplitude("transverse_odd_mx_ohm", "unidirectional", "cos1", 1.0,
                       "m_x-odd part of the transverse (R(+I) - R(-I))/2: a1 (cos phi_M = m_x)"),
    ),
    "zx": (
        NamedAmplitude("anomalous_hall_ohm", "resistance", "cos1", 1.0,
                       "R_xy = R_AHE m_z: a1 (cos theta_M = m_z)"),
    ),
    "zy": (
        NamedAmplitude("anomalous_hall_ohm", "resistance", "cos1", 1.0,
                       "R_xy = R_AHE m_z: a1 (cos theta_M = m_z)"),
    ),
}
ANISOTROPY_QUANTITY: dict[str, str] = {
    "xy": "anisotropy_field_T",
    "zx": "effective_demag_field_T",
    "zy": "effective_demag_field_T",
}

CONVENTION_NOTES: dict[str, str] = {
    "amr_plus_smr_ohm": "xy only: R(m||x) - R(m||y) = (AMR + SMR) R0, 2*a2 in phi_M",
    "amr_ohm": "zx only: anisotropic MR, R(m||x) - R(m||z) = AMR R0, -2*a2 in theta_M",
    "smr_ohm": "zy only: spin Hall MR, R(m||z) - R(m||y) = SMR R0, 2*a2 in theta_M",
    "amr_plus_smr_ratio, amr_ratio, smr_ratio": "the amplitude over the mean resistance c0",
    "planar_hall_ohm": "xy transverse: R_xy = R_PHE sin 2phi_M (b2)",
    "anomalous_hall_ohm": "zx/zy transverse: R_xy = R_AHE m_z (a1 in theta_M)",
    "umr_ohm": "longitudinal: m_y-odd part of (R(+I) - R(-I))/2 (b1); the full difference "
    "R(+I) - R(-I) at m = +y is 2*umr_ohm",
    "umr_ratio": "umr_ohm over the mean resistance c0",
    "transverse_odd_mx_ohm": "xy transverse: m_x-odd part of (R(+I) - R(-I))/2 (a1)",
    "umr_thermal_ohm": "xy: thermal (anomalous-Nernst-like) part of umr_ohm, -(L/w) times "
    "the transverse m_x-odd part; assumes a field-independent thermal term and no "
    "current-induced torque contribution",
    "umr_spin_ohm": "xy: spin-dependent part, umr_ohm - umr_thermal_ohm",
    "umr_thermal_ratio, umr_spin_ratio": "the parts over the mean resistance c0",
    "anisotropy_field_T": "xy: in-plane uniaxial anisotropy field B_k (easy axis along the "
    "current; < 0: across it), fitted or given",
    "effective_demag_field_T": "zx/zy: effective demagnetising field B_eff = mu0*M_eff "
    "(zx includes an in-plane B_k along x), fitted or given",
}
