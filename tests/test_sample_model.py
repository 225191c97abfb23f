"""The simulated bilayer's resistances, unidirectional term and noise against outside sources."""

from __future__ import annotations

import dataclasses
import itertools
import json
import math

import numpy as np
import pytest
from scipy.constants import k as BOLTZMANN  # CODATA value, independent of the model's

from acquire.inputs.stack import LayerShare, channel_resistance, current_fractions
from sim_instruments.sample_model import BilayerSample, ExpectedPoint, SampleParameters

SATURATING_T = 5.0  # well above B_k + mu0*M_eff = 0.805 T of the defaults
ANGLES = [0.0, 15.0, 30.0, 45.0, 60.0, 75.0, 90.0, 120.0, 150.0, 180.0, 225.0, 300.0]
# A current small enough that Joule heating (R_th I^2 R ~ 3e-6 K) changes R by < 1e-9.
TINY_A = 1e-6


def _sample(plane: str = "xy", seed: int | None = 0, **overrides: float) -> BilayerSample:
    return BilayerSample(SampleParameters(**overrides), rotation_plane=plane, seed=seed)


def _angle_to_current_deg(m: tuple[float, float, float]) -> float:
    return math.degrees(math.acos(max(-1.0, min(1.0, m[0]))))


# --- parallel-resistor model ---------------------------------------------------------


def test_parallel_resistor_worked_example() -> None:
    # By hand, sheet conductances t / rho:
    #   W     5 nm / 120 uohm*cm = 5e-9 m / 1.2e-6 ohm*m = 4.16667e-3 S
    #   CoFeB 2 nm / 150 uohm*cm = 2e-9 m / 1.5e-6 ohm*m = 1.33333e-3 S
    #   sum 5.5e-3 S -> sheet resistance 181.818 ohm; L / w = 40 um / 4 um = 10 squares
    #   R = 1818.18 ohm; W carries 4.16667 / 5.5 = 0.757576 of the current.
    layers = [LayerShare("CoFeB", 2e-9, 150e-8, False), LayerShare("W", 5e-9, 120e-8, True)]
    # The hand values are rounded to 6 digits.
    assert channel_resistance(40e-6, 4e-6, layers) == pytest.approx(1818.18, rel=1e-5)
    assert current_fractions(layers)[1] == pytest.approx(0.757576, rel=1e-5)
    # The simulated demo device is this stack: its defaults agree with the model to rounding.
    params = SampleParameters()
    assert params.resistance_ohm == pytest.approx(channel_resistance(40e-6, 4e-6, layers),
                                                  rel=1e-14)
    assert params.carrier_fraction == pytest.approx(current_fractions(layers)[1], rel=1e-14)
    assert params.carrier_thickness_m == 5e-9
    # j in W at 1 mA: 1e-3 A * 0.757576 / (4e-6 m * 5e-9 m) = 3.78788e10 A/m^2
    assert params.carrier_current_density(1e-3) == pytest.approx(3.78788e10, rel=1e-5)


def test_single_layer_is_rho_l_over_wt() -> None:
    # Textbook bar resistance: 50 uohm*cm, 10 nm, 100 um x 10 um -> 5e-7 * 1e-4 / (1e-5 * 1e-8)
    # = 500 ohm, all of the current in the one layer.
    layers = [LayerShare("Pt", 10e-9, 50e-8, True)]
    assert channel_resistance(100e-6, 10e-6, layers) == pytest.approx(500.0, rel=1e-12)
    assert current_fractions(layers) == [1.0]


def test_unknown_parameter_is_named_with_the_valid_ones() -> None:
    with pytest.raises(ValueError) as info:
        SampleParameters.with_overrides(amr_ration=1e-3)
    message = str(info.value)
    assert "amr_ration" in message
    assert "amr_ratio" in message and "spin_hall_sign" in message


def test_overrides_are_kept() -> None:
    params = SampleParameters.with_overrides(spin_hall_sign=1, amr_ratio=3e-3)
    assert params.spin_hall_sign == 1
    assert params.amr_ratio == 3e-3


@pytest.mark.parametrize(
    ("key", "value"),
    [("spin_hall_sign", 0), ("resistance_ohm", -1.0), ("carrier_fraction", 1.5)],
)
def test_invalid_parameters_are_refused(key: str, value: float) -> None:
    with pytest.raises(ValueError, match=key):
        SampleParameters(**{key: value})


def test_parameters_and_truth_are_json_ready() -> None:
    sample = _sample("zy", seed=7)
    truth = json.loads(json.dumps(sample.truth()))
    names = {f.name for f in dataclasses.fields(SampleParameters)}
    assert names <= set(truth)
    assert truth["rotation_plane"] == "zy"
    assert truth["model_version"]
    assert truth["seed"] == 7
    # The demo device's carrier is W: the table's negative sign, and the record says so.
    assert truth["spin_hall_sign"] == -1
    assert truth["spin_hall_sign_source"] == "table: W"
    # The parameters of the truth rebuild the same device: same readings from the same seed.
    again = BilayerSample(
        SampleParameters(**{k: v for k, v in truth.items() if k in names}), "zy", seed=7
    )
    for model in (sample, again):
        model.apply_field(0.3, 60.0)
    assert [again.voltage("longitudinal", 3e-3, 300.0, 0.0, 0.02) for _ in range(3)] == [
        sample.voltage("longitudinal", 3e-3, 300.0, 0.0, 0.02) for _ in range(3)
    ]


# --- even part -----------------------------------------------------------------------


def test_amr_follows_the_cos_squared_law() -> None:
    # McGuire and Potter, IEEE Trans. Magn. 11, 1018 (1975):
    # rho(theta) = rho_perp + (rho_par - rho_perp) cos^2(theta), theta between m and current.
    # In the zx plane m_y = 0, so the spin Hall term (set large here) must not show up.
    amr, r0 = 2e-3, 1000.0
    sample = _sample("zx", amr_ratio=amr, smr_ratio=0.05, resistance_ohm=r0)
    r_par, r_perp = r0 * (1 + amr), r0  # m along the current / along the film normal
    for angle in ANGLES:
        sample.apply_field(SATURATING_T, angle)
        theta = math.radians(_angle_to_current_deg(sample.magnetisation))
        expected = r_perp + (r_par - r_perp) * math.cos(theta) ** 2
        got = sample.expected("longitudinal", TINY_A, 300.0).resistance_ohm
        # Only float rounding and the < 1e-9 heating at TINY_A separate them.
        assert got == pytest.approx(expected, rel=1e-9)


def test_spin_hall_magnetoresistance_lowers_r_for_m_along_y() -> None:
    # Chen et al., Phys. Rev. B 87, 144411 (2013) (from memory): rho = rho_0 - d_rho * m_y^2,
    # lowest for m along the spin polarisation (y). The zy plane has m_x = 0: no AMR.
    smr, r0 = 4e-3, 1000.0
    sample = _sample("zy", amr_ratio=0.05, smr_ratio=smr, resistance_ohm=r0)
    for angle in ANGLES:
        sample.apply_field(SATURATING_T, angle)
        my = sample.magnetisation[1]
        got = sample.expected("longitudinal", TINY_A, 300.0).resistance_ohm
        # Rounding and heating below 1e-9, as above.
        assert got == pytest.approx(r0 * (1 - smr * my**2), rel=1e-9)


def test_joule_heating_is_self_consistent() -> None:
    # T_dev = T_bath + R_th I^2 R(T_dev), R(T) = R0 (1 + alpha (T - T_ref)), solved here by
    # plain fixed-point iteration, independently of the model's closed form.
    r0, alpha, r_th, t_ref = 1800.0, 2e-3, 3000.0, 300.0
    sample = _sample(
        amr_ratio=0.0,
        smr_ratio=0.0,
        resistance_ohm=r0,
        temperature_coefficient_per_K=alpha,
        thermal_resistance_K_per_W=r_th,
        reference_temperature_K=t_ref,
    )
    current, bath = 4e-3, 250.0
    t_dev = bath
    for _ in range(500):  # loop gain R_th I^2 R0 alpha = 0.17: converges to ~1e-300
        t_dev = bath + r_th * current**2 * r0 * (1 + alpha * (t_dev - t_ref))
    got = sample.expected("longitudinal", current, bath).resistance_ohm
    assert got == pytest.approx(r0 * (1 + alpha * (t_dev - t_ref)), rel=1e-12)
    assert sample.device_temperature_K(current, bath) == pytest.approx(t_dev, rel=1e-12)


def test_thermal_runaway_is_an_error() -> None:
    sample = _sample(temperature_coefficient_per_K=1e-2, thermal_resistance_K_per_W=1e4)
    with pytest.raises(ValueError, match="runaway"):
        sample.expected("longitudinal", 0.1, 300.0)


def test_hall_resistances() -> None:
    # Common practice: R_xy = R_AHE m_z + R_PHE sin(2 phi) sin^2(theta) for a single domain.
    r_ahe, r_phe = 1.7, 0.3
    sample = _sample(
        "zx", anomalous_hall_ohm=r_ahe, planar_hall_ohm=r_phe, transverse_misalignment_fraction=0.0
    )
    sample.apply_field(SATURATING_T, 0.0)
    assert sample.expected("transverse", TINY_A, 300.0).resistance_ohm == pytest.approx(r_ahe)
    sample.apply_field(SATURATING_T, 180.0)
    assert sample.expected("transverse", TINY_A, 300.0).resistance_ohm == pytest.approx(-r_ahe)
    in_plane = _sample(
        "xy", anomalous_hall_ohm=r_ahe, planar_hall_ohm=r_phe, transverse_misalignment_fraction=0.0
    )
    for angle, sin2phi in [(45.0, 1.0), (135.0, -1.0), (90.0, 0.0)]:
        in_plane.apply_field(SATURATING_T, angle)
        got = in_plane.expected("transverse", TINY_A, 300.0).resistance_ohm
        # m lags the 5 T field by < B_k / B ~ 1e-3 rad in plane: sin(2 phi) off by < 1e-5.
        assert got == pytest.approx(r_phe * sin2phi, abs=1e-5 * r_phe)


# --- unidirectional part -------------------------------------------------------------


def test_unidirectional_resistance_worked_example_and_linear_in_current_density() -> None:
    # Delta R = sign * R0 * zeta * j * m_y (MODEL.md). By hand for the demo channel with
    # zeta = 2e-17 m^2/A and m along +y, sign -1: at 40 uA,
    #   j = 40e-6 * 0.757576 / (4e-6 * 5e-9) = 1.51515e9 A/m^2
    #   Delta R = -1818.18 * 2e-17 * 1.51515e9 = -5.50964e-5 ohm.
    sample = _sample(
        umr_ratio_per_A_m2=2e-17,
        umr_magnon_ratio_per_A_m2=0.0,
        thermal_V_per_A2=0.0,
        spin_hall_sign=-1,
    )
    sample.apply_field(0.5, 90.0)
    got = sample.expected("longitudinal", 40e-6, 300.0).unidirectional_ohm
    assert got == pytest.approx(-5.50964e-5, rel=1e-5)  # hand values to 6 digits

    # Common practice: at low current the UMR is linear in j. Heating at 80 uA is
    # R_th I^2 R = 0.017 K, shifting the magnon part by < 1e-4 relative.
    magnon = _sample(thermal_V_per_A2=0.0)
    magnon.apply_field(0.1, 90.0)
    slopes = []
    for current in (10e-6, 20e-6, 40e-6, 80e-6):
        u = magnon.expected("longitudinal", current, 300.0).unidirectional_ohm
        slopes.append(u / magnon.params.carrier_current_density(current))
    assert slopes == pytest.approx([slopes[0]] * 4, rel=2e-4)


def test_unidirectional_sign_follows_the_spin_hall_angle() -> None:
    # Common practice: the UMR changes sign with the heavy metal's spin Hall angle.
    values = {}
    for sign in (1, -1):
        sample = _sample(spin_hall_sign=sign, thermal_V_per_A2=0.0)
        sample.apply_field(0.2, 90.0)
        values[sign] = sample.expected("longitudinal", 2e-3, 300.0).unidirectional_ohm
    assert values[1] > 0.0
    assert values[-1] == pytest.approx(-values[1], rel=1e-12)


def test_unidirectional_part_is_odd_in_m_y() -> None:
    # Common practice: the longitudinal UMR (and the Nernst term of the same symmetry)
    # goes as m_y = sin(phi) in an in-plane rotation at saturation.
    sample = _sample("xy")
    sample.apply_field(SATURATING_T, 90.0)
    at_90 = sample.expected("longitudinal", 2e-3, 300.0).unidirectional_ohm
    assert at_90 != 0.0
    for angle in ANGLES:
        sample.apply_field(SATURATING_T, angle)
        got = sample.expected("longitudinal", 2e-3, 300.0).unidirectional_ohm
        # m lags the field by < 1e-3 rad: sin(phi) off by < 1e-3 of the amplitude.
        assert got == pytest.approx(at_90 * math.sin(math.radians(angle)), abs=1e-3 * abs(at_90))


@pytest.mark.parametrize("angle", ANGLES)
def test_no_unidirectional_part_in_the_zx_plane(angle: float) -> None:
    # Symmetry: in the zx plane m_y = 0, so neither the UMR nor the Nernst term of the
    # same symmetry survive, while the even part is unaffected.
    sample = _sample("zx")
    sample.apply_field(SATURATING_T, angle)
    point = sample.expected("longitudinal", 3e-3, 300.0)
    # A demo UMR at 3 mA is ~1e-2 ohm; zero here means rounding-level.
    assert abs(point.unidirectional_ohm) < 1e-15
    assert point.resistance_ohm > 1000.0


def test_even_part_does_not_depend_on_current_sign() -> None:
    sample = _sample("xy")
    sample.apply_field(0.1, 60.0)
    plus = sample.expected("longitudinal", 2e-3, 300.0)
    minus = sample.expected("longitudinal", -2e-3, 300.0)
    assert plus == minus


def test_readings_reduce_to_the_expected_point() -> None:
    # The reduction of docs/conventions.md applied to three readings must recover expected():
    # R = (V+ - V-) / 2I and Delta R = (V+ + V- - 2 V0) / 2I. A 1e6 s integration makes
    # sigma ~ 20 nV / sqrt(2e6) ~ 1.4e-11 V, i.e. ~7e-9 ohm on either value at 2 mA.
    sample = _sample("xy", seed=3, drift_V_per_s=0.0)
    sample.apply_field(0.1, 70.0)
    current, t_bath, tau = 2e-3, 300.0, 1e6
    v_plus = sample.voltage("longitudinal", current, t_bath, 0.0, tau)
    v_zero = sample.voltage("longitudinal", 0.0, t_bath, 0.0, tau)
    v_minus = sample.voltage("longitudinal", -current, t_bath, 0.0, tau)
    point = sample.expected("longitudinal", current, t_bath)
    # 1e-7 ohm is ~15 sigma of the residual noise.
    assert (v_plus - v_minus) / (2 * current) == pytest.approx(point.resistance_ohm, abs=1e-7)
    unidirectional = (v_plus + v_minus - 2 * v_zero) / (2 * current)
    assert unidirectional == pytest.approx(point.unidirectional_ohm, abs=1e-7)
    assert v_zero == pytest.approx(sample.params.thermoelectric_offset_V, abs=1e-9)
    assert point.unidirectional_ratio == point.unidirectional_ohm / point.resistance_ohm


def test_magnon_part_falls_with_field_and_grows_with_temperature() -> None:
    # The magnon population is suppressed by field and grows with temperature while the
    # UMR stays finite at T -> 0 (common practice for ferromagnet / heavy-metal bilayers).
    # Its exact temperature law is checked against the oscillator in test_sample_physics.py.
    sample = _sample(umr_ratio_per_A_m2=0.0, thermal_V_per_A2=0.0)
    by_field = []
    for field_T in (0.05, 0.5, 1.0, 2.0, 4.0):
        sample.apply_field(field_T, 90.0)
        by_field.append(abs(sample.expected("longitudinal", 1e-4, 300.0).unidirectional_ohm))
    assert all(a > b for a, b in itertools.pairwise(by_field))
    by_temperature = [
        abs(sample.expected("longitudinal", 1e-4, t).unidirectional_ohm)
        for t in (0.0, 100.0, 300.0)
    ]
    assert 0.0 < by_temperature[0] < by_temperature[1] < by_temperature[2]


def test_thermal_term_is_field_independent_in_size() -> None:
    sample = _sample(umr_ratio_per_A_m2=0.0, umr_magnon_ratio_per_A_m2=0.0, thermal_V_per_A2=0.4)
    sizes = []
    for field_T in (0.1, 2.0):
        sample.apply_field(field_T, 90.0)
        sizes.append(sample.expected("longitudinal", 1e-3, 300.0).unidirectional_ohm)
    # V = c I^2 m_y -> Delta R = c I m_y = 0.4 V/A^2 * 1e-3 A = 4e-4 ohm (by hand).
    assert sizes == pytest.approx([4e-4, 4e-4], rel=1e-6)


# --- noise, offset, drift --------------------------------------------------------------


def _reading_std(sample: BilayerSample, n: int, tau: float, temperature_K: float) -> float:
    readings = [sample.voltage("longitudinal", 0.0, temperature_K, 0.0, tau) for _ in range(n)]
    return float(np.std(readings, ddof=1))


@pytest.mark.parametrize("temperature_K", [300.0, 77.0])
def test_johnson_nyquist_floor(temperature_K: float) -> None:
    # Johnson (1928) / Nyquist (1928): v_rms = sqrt(4 k_B T R df), k_B from CODATA via scipy.
    # Noiseless voltmeter, no magnetoresistance, no temperature coefficient: R is R0.
    r0, tau, n = 1818.0, 0.1, 20000
    sample = _sample(
        resistance_ohm=r0,
        noise_density_V_per_rtHz=0.0,
        amr_ratio=0.0,
        smr_ratio=0.0,
        temperature_coefficient_per_K=0.0,
        seed=11,
    )
    df = 1.0 / (2.0 * tau)  # equivalent noise bandwidth of a tau-long average (MODEL.md)
    expected = math.sqrt(4.0 * BOLTZMANN * temperature_K * r0 * df)
    # Relative standard error of a sample std is 1/sqrt(2(n-1)) = 0.5%; allow 5 of them.
    assert _reading_std(sample, n, tau, temperature_K) == pytest.approx(expected, rel=0.025)


def test_noise_falls_as_inverse_square_root_of_integration_time() -> None:
    # Averaging white noise for tau leaves sigma ~ 1/sqrt(tau) (common practice).
    sample = _sample(seed=5)
    n = 20000
    short = _reading_std(sample, n, 0.01, 300.0)
    long = _reading_std(sample, n, 1.0, 300.0)
    # Two independent 0.5% standard errors -> 0.7% on the ratio; 3% is > 4 of them.
    assert short / long == pytest.approx(10.0, rel=0.03)
    # Voltmeter and Johnson noise are independent: their powers add (common practice).
    r = sample.expected("longitudinal", 0.0, 300.0).resistance_ohm
    density = math.sqrt(sample.params.noise_density_V_per_rtHz**2 + 4 * BOLTZMANN * 300.0 * r)
    assert long == pytest.approx(density / math.sqrt(2.0), rel=0.025)


def test_offset_and_linear_drift() -> None:
    offset, drift = 12e-6, 3e-10
    sample = _sample(thermoelectric_offset_V=offset, drift_V_per_s=drift)
    tau = 1e6  # sigma ~ 1.4e-11 V, see above
    v0 = sample.voltage("longitudinal", 0.0, 300.0, 0.0, tau)
    v1 = sample.voltage("longitudinal", 0.0, 300.0, 3600.0, tau)
    assert v0 == pytest.approx(offset, abs=1e-10)
    assert v1 - v0 == pytest.approx(drift * 3600.0, abs=1e-10)


def test_same_seed_same_readings() -> None:
    def readings(seed: int) -> list[float]:
        sample = _sample(seed=seed)
        return [sample.voltage("transverse", 1e-3, 300.0, t, 0.02) for t in range(5)]

    assert readings(1) == readings(1)
    assert readings(1) != readings(2)


# --- interface -----------------------------------------------------------------------


def test_bad_arguments_are_refused() -> None:
    sample = _sample()
    with pytest.raises(ValueError, match="probe"):
        sample.voltage("diagonal", 1e-3, 300.0, 0.0, 0.02)
    with pytest.raises(ValueError, match="integration"):
        sample.voltage("longitudinal", 1e-3, 300.0, 0.0, 0.0)
    with pytest.raises(ValueError, match="temperature"):
        sample.expected("longitudinal", 1e-3, -1.0)
    with pytest.raises(ValueError, match="rotation plane"):
        BilayerSample(SampleParameters(), rotation_plane="xz")


def test_ratio_of_a_zero_resistance_is_nan() -> None:
    assert math.isnan(
        ExpectedPoint(resistance_ohm=0.0, unidirectional_ohm=1e-3).unidirectional_ratio
    )
    assert ExpectedPoint(2.0, 1e-3).unidirectional_ratio == pytest.approx(5e-4)
