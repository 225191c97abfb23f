"""Magnetisation of the simulated film against the single-domain theory.

Reference: E. C. Stoner and E. P. Wohlfarth, Phil. Trans. R. Soc. A 240, 599 (1948),
"SW 1948" below. Fields are in units of the anisotropy field B_k (h = B / B_k).
"""

from __future__ import annotations

import math

import pytest

from sim_instruments.sample_model import BilayerSample, SampleParameters
from sim_instruments.stoner_wohlfarth import FilmAnisotropy, Macrospin, field_direction

B_K = 5e-3
B_D = 0.8


def _astroid_switching_field(psi_deg: float) -> float:
    # SW 1948: h_sw = (cos^(2/3) psi + sin^(2/3) psi)^(-3/2), psi from the easy axis.
    c = abs(math.cos(math.radians(psi_deg)))
    s = abs(math.sin(math.radians(psi_deg)))
    return (c ** (2 / 3) + s ** (2 / 3)) ** -1.5


def _angle_between_deg(a: tuple[float, ...], b: tuple[float, ...]) -> float:
    dot = sum(x * y for x, y in zip(a, b, strict=True))
    return math.degrees(math.acos(max(-1.0, min(1.0, dot))))


def _switching_field(sample: BilayerSample, angle_deg: float, step: float) -> float:
    """Sweep h from +1.5 down to -1.5 along angle_deg; return h at the largest jump of m."""
    sample.apply_field(1.5 * B_K, angle_deg)
    previous = sample.magnetisation
    biggest, where = 0.0, math.nan
    n = round(3.0 / step)
    for i in range(1, n + 1):
        h = 1.5 - i * step
        sample.apply_field(h * B_K, angle_deg)
        jump = _angle_between_deg(previous, sample.magnetisation)
        if jump > biggest:
            biggest, where = jump, h
        previous = sample.magnetisation
    assert biggest > 20.0, "no irreversible jump found in the sweep"
    return where


@pytest.mark.parametrize(
    ("psi_deg", "easy_axis_deg"),
    [(0.0, 0.0), (10.0, 0.0), (30.0, 0.0), (45.0, 0.0), (60.0, 0.0), (80.0, 0.0), (30.0, 20.0)],
)
def test_switching_field_follows_the_astroid(psi_deg: float, easy_axis_deg: float) -> None:
    params = SampleParameters(
        anisotropy_field_T=B_K, demag_field_T=B_D, easy_axis_deg=easy_axis_deg
    )
    sample = BilayerSample(params, rotation_plane="xy")
    step = 5e-4
    h_found = _switching_field(sample, easy_axis_deg + psi_deg, step)
    # The jump shows at the first sweep point past -h_sw, so it lies within one step
    # below it; the relaxation itself converges to 1e-11 of the field, far below that.
    h_sw = _astroid_switching_field(psi_deg)
    assert -h_sw - 1.5 * step <= h_found <= -h_sw + 1e-9


def test_perpendicular_film_switches_on_the_astroid_of_its_effective_anisotropy() -> None:
    # A negative mu0*M_eff is a uniaxial anisotropy along z of strength |mu0*M_eff|: the
    # same SW 1948 astroid applies with psi measured from the film normal.
    b_perp = 0.3
    psi = 30.0
    spin = Macrospin(FilmAnisotropy(0.0, -b_perp, 0.0), "zx", m0=(0.0, 0.0, 1.0))
    step = 1e-3
    spin.apply_field(1.5 * b_perp, psi)
    previous = spin.magnetisation
    biggest, where = 0.0, math.nan
    for i in range(1, round(3.0 / step) + 1):
        h = 1.5 - i * step
        m = spin.apply_field(h * b_perp, psi)
        jump = _angle_between_deg(previous, m)
        if jump > biggest:
            biggest, where = jump, h
        previous = m
    h_sw = _astroid_switching_field(psi)  # 0.5240 at 30 deg
    # Resolution of one sweep step, as above.
    assert -h_sw - 1.5 * step <= where <= -h_sw + 1e-9


@pytest.mark.parametrize("h", [0.1, 0.4, 0.7, 0.95])
def test_in_plane_hard_axis_magnetisation_is_linear(h: float) -> None:
    # SW 1948, psi = 90 deg: below saturation the component along the field is m = h.
    spin = Macrospin(FilmAnisotropy(B_K, B_D, 0.0), "xy")
    m = spin.apply_field(h * B_K, 90.0)
    # Relaxation tolerance 1e-11 of the field scale (~0.8 T) over a curvature >= 0.05 B_k.
    assert m[1] == pytest.approx(h, abs=1e-6)
    assert m[2] == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize("field_T", [0.05, 0.4, 0.7])
def test_out_of_plane_field_tilts_m_against_shape_and_crystal_anisotropy(field_T: float) -> None:
    # By hand: with m = (cos t, 0, sin t) and B along z the energy over M_s is
    # -(B_k/2) cos^2 t + (B_d/2) sin^2 t - B sin t = ((B_k + B_d)/2) sin^2 t - B sin t + const,
    # minimal at sin t = B / (B_k + B_d): the SW hard-axis line with B_k -> B_k + B_d.
    spin = Macrospin(FilmAnisotropy(B_K, B_D, 0.0), "zx")
    m = spin.apply_field(field_T, 0.0)
    # Same tolerance argument as the in-plane hard axis.
    assert m[2] == pytest.approx(field_T / (B_K + B_D), abs=1e-6)


def test_remanence_along_the_field_is_cos_psi() -> None:
    # SW 1948: after saturation along psi and return to zero field, m rests on the easy
    # axis nearest the field, so its component along the field direction is cos psi.
    psi = 30.0
    spin = Macrospin(FilmAnisotropy(B_K, B_D, 0.0), "xy")
    spin.apply_field(10 * B_K, psi)
    m = spin.apply_field(0.0, psi)
    along = sum(a * b for a, b in zip(m, field_direction(psi, "xy"), strict=True))
    assert along == pytest.approx(math.cos(math.radians(psi)), abs=1e-9)
    # and from the opposite saturation the other branch: -cos psi (hysteresis)
    spin.apply_field(-10 * B_K, psi)
    m = spin.apply_field(0.0, psi)
    along = sum(a * b for a, b in zip(m, field_direction(psi, "xy"), strict=True))
    assert along == pytest.approx(-math.cos(math.radians(psi)), abs=1e-9)


@pytest.mark.parametrize(("h", "reverses"), [(0.7, True), (0.4, False)])
def test_rotating_field_reverses_m_only_above_the_astroid_minimum(h: float, reverses: bool) -> None:
    # SW 1948: the astroid's smallest switching field is h = 0.5 (at psi = 45 deg). A field
    # turned by 180 deg in one call must therefore drag m round at h = 0.7 and leave it
    # on its branch at h = 0.4; this exercises the path the field takes between calls.
    spin = Macrospin(FilmAnisotropy(B_K, B_D, 0.0), "xy")
    spin.apply_field(h * B_K, 0.0)
    m = spin.apply_field(h * B_K, 180.0)
    assert (m[0] < -0.9) is reverses
    assert (m[0] > 0.9) is not reverses


def test_negative_field_is_the_opposite_direction() -> None:
    a = Macrospin(FilmAnisotropy(B_K, B_D, 0.0), "zy")
    b = Macrospin(FilmAnisotropy(B_K, B_D, 0.0), "zy")
    ma = a.apply_field(-0.5, 30.0)
    mb = b.apply_field(0.5, 210.0)
    assert ma == pytest.approx(mb, abs=1e-9)


@pytest.mark.parametrize("plane", ["xy", "zx", "zy"])
def test_magnetisation_stays_a_unit_vector(plane: str) -> None:
    sample = BilayerSample(SampleParameters(), rotation_plane=plane)
    for field_T, angle in [(0.01, 10.0), (0.3, 75.0), (2.0, 200.0), (-0.002, 5.0)]:
        sample.apply_field(field_T, angle)
        assert math.fsum(c * c for c in sample.magnetisation) == pytest.approx(1.0, abs=1e-12)


def test_field_directions_of_the_rotation_planes() -> None:
    # The conventions of docs/conventions.md: xy from +x to +y, zx from +z to +x, zy from +z
    # to +y.
    assert field_direction(90.0, "xy") == pytest.approx((0.0, 1.0, 0.0), abs=1e-15)
    assert field_direction(90.0, "zx") == pytest.approx((1.0, 0.0, 0.0), abs=1e-15)
    assert field_direction(90.0, "zy") == pytest.approx((0.0, 1.0, 0.0), abs=1e-15)
    assert field_direction(0.0, "zx") == pytest.approx((0.0, 0.0, 1.0), abs=1e-15)
    with pytest.raises(ValueError, match="rotation plane"):
        field_direction(0.0, "yz")
