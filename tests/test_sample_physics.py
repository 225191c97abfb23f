"""The sample model's spin Hall sign, threshold, magnon oscillator, Nernst geometry, planar
Hall and autozero noise, each against an outside formula or library."""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from scipy import constants  # CODATA values, independent of the model's literals

from acquire.inputs.load import load_protocol, load_rig
from acquire.runtime.simulation import sample_for
from sim_instruments.oscillator import oscillator_mean_energy_K
from sim_instruments.sample_model import BilayerSample, SampleParameters
from sim_instruments.spin_hall import DEFAULT_SIGN, spin_hall_sign_for
from tests.conftest import PROTOCOLS, SIMULATED_RIG
from tests.test_drivers_support import make_rig, simulated

SATURATING_T = 5.0  # far above B_k + B_d = 0.805 T of the defaults
TINY_A = 1e-6  # Joule heating ~1e-6 K: the resistances move by < 1e-9 relative
# Only the odd part under test: the other unidirectional terms switched off.
NO_UMR = {"umr_ratio_per_A_m2": 0.0, "umr_magnon_ratio_per_A_m2": 0.0,
          "umr_threshold_ratio_per_A_m2": 0.0}


def _sample(plane: str = "xy", seed: int | None = 0, **overrides: object) -> BilayerSample:
    return BilayerSample(SampleParameters(**overrides), rotation_plane=plane,  # type: ignore[arg-type]
                         seed=seed)


# --- spin Hall sign from the carrier ------------------------------------------------------


@pytest.mark.parametrize(
    ("material", "sign"),
    [
        # Morota et al., Phys. Rev. B 83, 174405 (2011): Pt, Pd positive; Ta, Nb, Mo negative.
        ("Pt", 1), ("Pd", 1), ("Ta", -1), ("Nb", -1), ("Mo", -1),  # from memory
        # Liu et al., Science 336, 555 (2012): beta-Ta negative, opposite to Pt. # from memory
        ("beta-Ta", -1), ("β-Ta", -1), ("ta", -1),
        # Pai et al., Appl. Phys. Lett. 101, 122404 (2012): beta-W negative. # from memory
        ("W", -1), ("beta-W", -1), ("Tungsten", -1),
        ("Pt(111)", 1), ("Au", 1), ("Hf", -1), ("Ir", 1),  # from memory
    ],
)
def test_spin_hall_sign_from_the_table(material: str, sign: int) -> None:
    found = spin_hall_sign_for(material)
    assert found.sign == sign
    assert found.source.startswith("table: ")


@pytest.mark.parametrize("material", ["PtMn", "WTe2", "CuBi", "Pt5", ""])
def test_unknown_material_gets_the_stated_default(material: str) -> None:
    # An alloy or compound is not its first element: the default applies and says why.
    found = spin_hall_sign_for(material)
    assert found.sign == DEFAULT_SIGN == 1
    assert found.source.startswith("default: ") and "not in the table" in found.source


def test_a_given_sign_overrides_the_table() -> None:
    found = spin_hall_sign_for("W", 1)
    assert (found.sign, found.source) == (1, "set: spin_hall_sign")


def test_ta_and_pt_give_opposite_spin_parts_and_the_same_thermal_part() -> None:
    # Common practice: the spin-dependent UMR changes sign with the spin Hall angle; the
    # Nernst-like part comes from heating and the ferromagnet, not from the heavy metal.
    parts = {}
    for material in ("Pt", "Ta"):
        sample = _sample(carrier_material=material)
        sample.apply_field(0.5, 90.0)
        parts[material] = sample.unidirectional_parts("longitudinal", 3e-3, 300.0)
    assert parts["Pt"].spin_ohm > 0.0 and parts["Pt"].threshold_ohm > 0.0
    assert parts["Ta"].spin_ohm == pytest.approx(-parts["Pt"].spin_ohm, rel=1e-12)
    assert parts["Ta"].threshold_ohm == pytest.approx(-parts["Pt"].threshold_ohm, rel=1e-12)
    assert parts["Ta"].thermal_ohm == parts["Pt"].thermal_ohm > 0.0


def test_protocol_carrier_sets_the_sign_on_the_built_in_rig(
    make_protocol: Callable[..., Path], write: Callable[[str, str], Path]
) -> None:
    rig = load_rig(SIMULATED_RIG)
    demo = sample_for(load_protocol(PROTOCOLS / "angle_scan.yaml"), rig, 0).truth()
    assert (demo["spin_hall_sign"], demo["spin_hall_sign_source"]) == (1, "table: Pt")
    ta_stack = """{id: ta-1, channel: {length: 40 um, width: 5 um}, layers: [
        {name: CoFeB, thickness: 1 nm, resistivity: 150 uohm*cm},
        {name: beta-Ta, thickness: 4 nm, resistivity: 190 uohm*cm, carrier: true}]}"""
    ta = load_protocol(make_protocol("{axis: current, values: [1 mA]}", sample=ta_stack))
    truth = sample_for(ta, rig, 0).truth()
    assert (truth["spin_hall_sign"], truth["spin_hall_sign_source"]) == (-1, "table: Ta")
    assert truth["carrier_material"] == "beta-Ta"
    # The rig may still stand in another device: its sign wins and the record says so.
    text = SIMULATED_RIG.read_text(encoding="utf-8").replace(
        "simulation: {start_temperature_K: 300}",
        "simulation: {start_temperature_K: 300, spin_hall_sign: 1}",
    )
    override = load_rig(write("rig.yaml", text))
    truth = sample_for(ta, override, 0).truth()
    assert (truth["spin_hall_sign"], truth["spin_hall_sign_source"]) == (1, "set: spin_hall_sign")


# --- threshold --------------------------------------------------------------------------


def test_superlinear_term_above_the_threshold_density() -> None:
    # The documented form (MODEL.md): dR = s R0 [zeta_0 j + zeta_c sgn(j) max(0, |j| - J_c)] m_y,
    # written here with numpy. No heating, magnon or Nernst part, m along +y (B >> B_k).
    r0, zeta0, zeta_c, j_c = SampleParameters().resistance_ohm, 2e-17, 1e-17, 6e10
    sample = _sample(umr_ratio_per_A_m2=zeta0, umr_magnon_ratio_per_A_m2=0.0,
                     umr_threshold_ratio_per_A_m2=zeta_c, umr_threshold_density_A_m2=j_c,
                     thermal_V_per_A2=0.0, thermal_resistance_K_per_W=0.0, spin_hall_sign=1)
    sample.apply_field(0.5, 90.0)
    assert sample.magnetisation[1] == pytest.approx(1.0, abs=1e-12)
    currents = np.arange(0.5e-3, 4.01e-3, 0.25e-3)
    # j per ampere in the W demo carrier: 0.757576 / (4 um * 5 nm) = 3.78788e13 A/m^2 per A.
    j = currents * (25.0 / 33.0) / (4e-6 * 5e-9)
    expected = r0 * (zeta0 * j + zeta_c * np.maximum(0.0, j - j_c))
    got = [sample.expected("longitudinal", i, 300.0).unidirectional_ohm for i in currents]
    # Float rounding only.
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    # By hand at 3 mA: j = 1.13636e11, excess 5.36364e10 A/m^2,
    # dR = 1818.18 * (2e-17 * 1.13636e11 + 1e-17 * 5.36364e10) = 5.10744e-3 ohm.
    at_3mA = sample.unidirectional_parts("longitudinal", 3e-3, 300.0)
    assert at_3mA.total_ohm == pytest.approx(5.10744e-3, rel=1e-5)  # 6-digit hand values
    assert at_3mA.threshold_ohm == pytest.approx(1818.18 * 1e-17 * 5.36364e10, rel=1e-5)
    # Below J_c (1.584 mA by hand: 6e10 / 3.78788e13) nothing of it; the readings are odd in I:
    assert sample.unidirectional_parts("longitudinal", 1.5e-3, 300.0).threshold_ohm == 0.0
    assert sample.truth()["umr_threshold_current_A"] == pytest.approx(1.584e-3, rel=1e-5)
    quiet = _sample(umr_threshold_ratio_per_A_m2=zeta_c, noise_density_V_per_rtHz=0.0,
                    drift_V_per_s=0.0, thermal_resistance_K_per_W=0.0)
    quiet.apply_field(0.5, 90.0)
    v = {s: quiet.voltage("longitudinal", s * 3e-3, 0.0, 0.0, 1.0) for s in (1, 0, -1)}
    # The reduction's half sum over I (common practice): 2 I dR from V(+I) + V(-I) - 2 V(0);
    # Johnson noise at 0 K bath is zero, so only rounding of ~1e-16 V remains.
    odd = (v[1] + v[-1] - 2.0 * v[0]) / (2.0 * 3e-3)
    assert odd == pytest.approx(quiet.expected("longitudinal", 3e-3, 0.0).unidirectional_ohm,
                                rel=1e-9)


# --- magnon oscillator --------------------------------------------------------------------


def _planck_mean_energy_J(omega_rad_s: float, temperature_K: float) -> float:
    # Textbook form with the zero point: <E> = hbar w (1/2 + 1 / (exp(hbar w / k T) - 1)),
    # algebraically (hbar w / 2) coth(hbar w / 2 k T); constants from scipy (CODATA).
    quantum = constants.hbar * omega_rad_s
    return quantum * (0.5 + 1.0 / math.expm1(quantum / (constants.k * temperature_K)))


@pytest.mark.parametrize("frequency_THz", [1.0, 4.2])
@pytest.mark.parametrize("temperature_K", [1.0, 10.0, 77.0, 300.0, 1000.0])
def test_oscillator_mean_energy_against_scipy_constants(
    frequency_THz: float, temperature_K: float
) -> None:
    omega = 2.0 * math.pi * frequency_THz * 1e12
    oscillator_K = constants.hbar * omega / constants.k  # 48 K and 202 K
    got_J = oscillator_mean_energy_K(oscillator_K, temperature_K) * constants.k
    # Two algebraic forms of one function in float64: agreement to ~1e-15, allow 1e-12.
    assert got_J == pytest.approx(_planck_mean_energy_J(omega, temperature_K), rel=1e-12)


def test_oscillator_textbook_limits() -> None:
    hbar_omega = constants.k * 200.0
    # T -> 0: the zero-point energy hbar w / 2, exactly at 0 and within exp(-hbar w / kT)
    # (e^-40 ~ 4e-18) at T = T_w / 40.
    assert oscillator_mean_energy_K(200.0, 0.0) * constants.k == pytest.approx(hbar_omega / 2)
    assert oscillator_mean_energy_K(200.0, 5.0) * constants.k == pytest.approx(
        hbar_omega / 2, rel=1e-15)
    # High T: k T (equipartition) plus (hbar w)^2 / (12 k T), the first term of the series
    # x coth x = 1 + x^2/3 - ...; at T = 100 T_w the next term is ~ 1e-10 relative.
    for temperature in (2e4, 1e5):
        k_t = constants.k * temperature
        got = oscillator_mean_energy_K(200.0, temperature) * constants.k
        assert got == pytest.approx(k_t, rel=1e-5)
        assert got - k_t == pytest.approx(hbar_omega**2 / (12 * k_t), rel=1e-3)
    # The classical oscillator (T_w = 0) is k T at every temperature.
    assert oscillator_mean_energy_K(0.0, 77.0) == 77.0


def test_magnon_part_follows_the_oscillator_normalised_at_t_ref() -> None:
    # No spin-independent, threshold or Nernst part; no heating; B small against B_m.
    oscillator_K, t_ref = 200.0, 300.0
    sample = _sample(umr_ratio_per_A_m2=0.0, umr_threshold_ratio_per_A_m2=0.0,
                     thermal_V_per_A2=0.0, thermal_resistance_K_per_W=0.0,
                     umr_magnon_oscillator_K=oscillator_K)
    sample.apply_field(0.1, 90.0)
    omega = constants.k * oscillator_K / constants.hbar
    reference = sample.expected("longitudinal", 1e-3, t_ref).unidirectional_ohm
    for bath in (2.0, 20.0, 100.0, 200.0, 400.0):
        ratio = sample.expected("longitudinal", 1e-3, bath).unidirectional_ohm / reference
        expected = _planck_mean_energy_J(omega, bath) / _planck_mean_energy_J(omega, t_ref)
        assert ratio == pytest.approx(expected, rel=1e-12)  # rounding only
    truth = sample.truth()
    # Saturation value T_w / 2 / <E>(T_ref), and the oscillator energy in meV (CODATA e).
    assert truth["umr_magnon_factor_at_0K"] == pytest.approx(
        constants.hbar * omega / 2 / _planck_mean_energy_J(omega, t_ref), rel=1e-12)
    assert truth["umr_magnon_oscillator_energy_meV"] == pytest.approx(
        constants.k * oscillator_K / constants.e * 1e3, rel=1e-12)


# --- transverse Nernst sign ---------------------------------------------------------------


def test_nernst_pickups_follow_grad_t_cross_m() -> None:
    # E = kappa (grad T x m) for a vertical gradient grad T = g z (anomalous Nernst effect,
    # textbook form); the longitudinal pair reads E_x over L, the transverse E_y over w,
    # both along +x / +y as the ohmic drop and the Hall voltage are read (MODEL.md).
    params = {**NO_UMR, "thermal_V_per_A2": 0.4, "thermal_resistance_K_per_W": 0.0}
    sample = _sample(**params)
    length, width, current = sample.params.length_m, sample.params.width_m, 2e-3
    sample.apply_field(SATURATING_T, 90.0)  # m = +y: fixes kappa * g from V_x
    m = np.array(sample.magnetisation)
    v_x = current * sample.expected("longitudinal", current, 300.0).unidirectional_ohm
    kappa_g = v_x / (np.cross([0.0, 0.0, 1.0], m)[0] * length)
    for angle in (0.0, 30.0, 45.0, 120.0, 200.0, 315.0):
        sample.apply_field(SATURATING_T, angle)
        field = kappa_g * np.cross([0.0, 0.0, 1.0], np.array(sample.magnetisation))
        got_x = current * sample.expected("longitudinal", current, 300.0).unidirectional_ohm
        got_y = current * sample.expected("transverse", current, 300.0).unidirectional_ohm
        # Rounding only; abs for the zeros of sin and cos.
        assert got_x == pytest.approx(field[0] * length, rel=1e-9, abs=1e-18)
        assert got_y == pytest.approx(field[1] * width, rel=1e-9, abs=1e-18)
    sample.apply_field(SATURATING_T, 45.0)  # m_x ~ m_y: opposite signs, ratio w / L
    along = sample.expected("longitudinal", current, 300.0).unidirectional_ohm
    across = sample.expected("transverse", current, 300.0).unidirectional_ohm
    assert along > 0.0 > across
    mx, my, _ = sample.magnetisation  # m lags the field by ~B_k / 2B = 5e-4 rad
    assert across / along == pytest.approx(-(width / length) * mx / my, rel=1e-9)
    assert sample.truth()["thermal_transverse_V_per_A2"] == pytest.approx(-0.4 * width / length)


# --- planar Hall from the geometry -------------------------------------------------------


def _tensor_hall_ohm(sample: BilayerSample, bath_K: float) -> tuple[float, float]:
    """R_xy from rho = rho_perp 1 + d_rho m m^T, d_rho from the model's own R_xx anisotropy.

    McGuire and Potter, IEEE Trans. Magn. 11, 1018 (1975) for the AMR tensor; Chen et al.,
    Phys. Rev. B 87, 144411 (2013), rho_xy = d_rho_1 m_x m_y for the SMR (from memory): both
    give the planar Hall term the coefficient of the in-plane longitudinal anisotropy.
    """
    p = sample.params
    r = {}
    for angle in (0.0, 90.0):
        sample.apply_field(SATURATING_T, angle)
        r[angle] = sample.expected("longitudinal", TINY_A, bath_K).resistance_ohm
    thickness = 1e-8  # any: it cancels
    d_rho = (r[0.0] - r[90.0]) * p.width_m * thickness / p.length_m
    sample.apply_field(SATURATING_T, 45.0 + 15.0)
    m = np.array(sample.magnetisation)
    rho = d_rho * np.outer(m, m)  # the isotropic part has no off-diagonal element
    current = 1e-3
    e_field = rho @ np.array([current / (p.width_m * thickness), 0.0, 0.0])
    got = sample.expected("transverse", TINY_A, bath_K).resistance_ohm
    return got, e_field[1] * p.width_m / current


@pytest.mark.parametrize("bath_K", [300.0, 150.0])
def test_planar_hall_default_follows_the_longitudinal_anisotropy(bath_K: float) -> None:
    # In-plane (m_z = 0), no misalignment pick-up: R_xy is the planar Hall term alone; at
    # 150 K it checks that the term follows R_xx's temperature factor.
    sample = _sample(transverse_misalignment_fraction=0.0, amr_ratio=2e-3, smr_ratio=3e-3)
    got, expected = _tensor_hall_ohm(sample, bath_K)
    # m at the three fields lags by ~B_k / 2B ~ 5e-4 rad, and TINY_A heating is 1e-9: the
    # 1e-6 tolerance covers rounding of d_rho from a difference of two ~1e3-ohm values.
    assert got == pytest.approx(expected, rel=1e-6)


def test_planar_hall_amplitude_by_hand_and_overridable() -> None:
    # Demo device by hand: (5e-4 + 1e-3) * 1818.18 ohm * 4 um / (2 * 40 um) = 0.136364 ohm.
    truth = _sample().truth()
    assert truth["planar_hall_ohm"] == pytest.approx(0.136364, rel=1e-5)
    assert str(truth["planar_hall_source"]).startswith("geometry")
    given = _sample(planar_hall_ohm=0.3, transverse_misalignment_fraction=0.0)
    assert given.truth()["planar_hall_source"] == "set: planar_hall_ohm"
    given.apply_field(SATURATING_T, 45.0)
    # sin 2phi = 1 within (B_k / 2B)^2 at 5 T.
    assert given.expected("transverse", TINY_A, 300.0).resistance_ohm == pytest.approx(
        0.3, rel=1e-6)


# --- autozero noise ----------------------------------------------------------------------


def test_autozero_adds_the_meters_noise_once_more() -> None:
    # At a 0 K bath with no current there is no Johnson noise: the zero reading doubles the
    # variance exactly. Without meter noise, the zero (on the meter's own short) adds none.
    meter_only = _sample()
    plain = meter_only.noise_sigma_V("longitudinal", 0.0, 0.0, 0.02)
    assert meter_only.noise_sigma_V("longitudinal", 0.0, 0.0, 0.02, autozero=True) == (
        pytest.approx(math.sqrt(2.0) * plain, rel=1e-12))
    johnson_only = _sample(noise_density_V_per_rtHz=0.0)
    assert johnson_only.noise_sigma_V("longitudinal", 0.0, 300.0, 0.02, autozero=True) == (
        johnson_only.noise_sigma_V("longitudinal", 0.0, 300.0, 0.02))


def test_autozero_readings_through_the_simulated_voltmeter() -> None:
    # Many readings with autozero on and off through the driver and the simulated meter: the
    # spread follows sqrt(((1 + az) e_n^2 + 4 k T R) / (2 tau)) (Johnson 1928 / Nyquist 1928
    # with k from scipy; boxcar bandwidth 1 / 2 tau, MODEL.md), and the reading takes 2 tau.
    sample = BilayerSample(SampleParameters(drift_V_per_s=0.0), seed=4)
    n = 3000
    spreads, durations = {}, {}
    with simulated(make_rig(), sample) as (simulated_rig, drivers):
        meter = drivers["vxx"]
        tau = simulated_rig.world.instruments["vxx"].integration_s()  # type: ignore[attr-defined]
        for autozero in (False, True):
            meter.configure(1.0, None, autozero)
            clock = simulated_rig.world.clock
            start = clock.now()
            spreads[autozero] = float(np.std([meter.read() for _ in range(n)], ddof=1))
            durations[autozero] = (clock.now() - start) / n
    r = sample.expected("longitudinal", 0.0, 300.0).resistance_ohm
    e_n2 = SampleParameters().noise_density_V_per_rtHz ** 2
    johnson2 = 4.0 * constants.k * 300.0 * r
    for autozero in (False, True):
        expected = math.sqrt(((2.0 if autozero else 1.0) * e_n2 + johnson2) / (2.0 * tau))
        # Standard error of a sample std over 3000 readings is 1.3 %; 6 % is > 4 of them.
        assert spreads[autozero] == pytest.approx(expected, rel=0.06)
    # The old rule (twice the averaging) would give a ratio of 0.71; the right one is 1.39.
    assert spreads[True] / spreads[False] > 1.2
    assert durations[True] - durations[False] == pytest.approx(tau, rel=1e-9)
