"""acquire.fits checked against sources outside the project, each named beside its check."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import curve_fit
from scipy.stats import chi2

from acquire.analysis.fit_quality import assess
from acquire.analysis.fits import (
    fit_field_dependence,
    fit_harmonics,
    fit_harmonics_by_group,
    ratio_with_error,
)
from acquire.inputs.stack import carrier_density_per_ampere, layers_from_records

TRUE_HARMONICS = np.array([850.0, 0.03, -0.5, 1.25, 0.4])
# curve_fit's default stopping tolerances (1.5e-8) leave ~1e-7 ohm on a 850 ohm baseline.
TIGHT = {"ftol": 1e-14, "xtol": 1e-14, "gtol": 1e-14}


def harmonic_model(phi_deg: np.ndarray, c0: float, a1: float, b1: float, a2: float, b2: float):
    # Written out here, independently of acquire.fits.harmonic_design.
    phi = np.radians(phi_deg)
    return c0 + a1 * np.cos(phi) + b1 * np.sin(phi) + a2 * np.cos(2 * phi) + b2 * np.sin(2 * phi)


def harmonic_jacobian(phi_deg: np.ndarray, *_: float) -> np.ndarray:
    # Analytic, so curve_fit's covariance carries no finite-difference error.
    phi = np.radians(phi_deg)
    return np.column_stack(
        [np.ones_like(phi), np.cos(phi), np.sin(phi), np.cos(2 * phi), np.sin(2 * phi)]
    )


def noisy_sweep(seed: int, n: int = 29) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unevenly spaced angles and unequal errors, so no orthogonality shortcut applies."""
    rng = np.random.default_rng(seed)
    angle = np.sort(rng.uniform(0, 360, n))
    sigma = rng.uniform(0.005, 0.03, n)
    values = harmonic_model(angle, *TRUE_HARMONICS) + rng.normal(0, sigma)
    return angle, values, sigma


def test_weighted_harmonic_fit_matches_numpy_lstsq_and_normal_equation_covariance() -> None:
    angle, values, sigma = noisy_sweep(seed=1)
    fit = fit_harmonics(angle, values, sigma)

    # Source: numpy.linalg.lstsq on the rows scaled by 1/sigma; covariance (A^T W A)^-1.
    phi = np.radians(angle)
    design = np.column_stack(
        [np.ones_like(phi), np.cos(phi), np.sin(phi), np.cos(2 * phi), np.sin(2 * phi)]
    )
    expected, *_ = np.linalg.lstsq(design / sigma[:, None], values / sigma, rcond=None)
    weight = np.diag(1 / sigma**2)
    covariance = np.linalg.inv(design.T @ weight @ design)
    chi2 = np.sum(((values - design @ expected) / sigma) ** 2)

    # Both solve the same well-conditioned 5x5 problem in double precision: agreement to
    # 1e-9 relative leaves room for the different factorisations (QR vs normal equations).
    np.testing.assert_allclose(fit.coefficients, expected, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(fit.errors, np.sqrt(np.diag(covariance)), rtol=1e-9)
    assert fit.reduced_chi2 == pytest.approx(chi2 / (angle.size - 5), rel=1e-9)
    assert fit.weighted


def test_weighted_harmonic_fit_matches_scipy_curve_fit() -> None:
    angle, values, sigma = noisy_sweep(seed=2)
    fit = fit_harmonics(angle, values, sigma)
    # Source: scipy.optimize.curve_fit (iterative Levenberg-Marquardt) with absolute sigma.
    expected, covariance = curve_fit(
        harmonic_model,
        angle,
        values,
        p0=np.zeros(5),
        sigma=sigma,
        absolute_sigma=True,
        jac=harmonic_jacobian,
        **TIGHT,
    )
    # LM stops at its convergence tolerances, tightened to 1e-14: compare to 1e-6.
    np.testing.assert_allclose(fit.coefficients, expected, rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(fit.errors, np.sqrt(np.diag(covariance)), rtol=1e-6)


def test_unweighted_harmonic_fit_matches_scipy_curve_fit_with_scaled_covariance() -> None:
    angle, values, _ = noisy_sweep(seed=3)
    fit = fit_harmonics(angle, values, errors=None)
    # Source: scipy.optimize.curve_fit without sigma scales the covariance by RSS/(n - p),
    # the same residual-based estimate the module documents.
    expected, covariance = curve_fit(
        harmonic_model, angle, values, p0=np.zeros(5), jac=harmonic_jacobian, **TIGHT
    )
    np.testing.assert_allclose(fit.coefficients, expected, rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(fit.errors, np.sqrt(np.diag(covariance)), rtol=1e-6)
    assert not fit.weighted and math.isnan(fit.reduced_chi2)


def test_one_missing_error_makes_the_group_unweighted() -> None:
    angle, values, sigma = noisy_sweep(seed=4)
    sigma[3] = np.nan
    assert not fit_harmonics(angle, values, sigma).weighted


@pytest.mark.parametrize("n_angles", [8, 24, 36])
def test_harmonic_errors_are_sigma_sqrt_2_over_n_for_even_angles(n_angles: int) -> None:
    # Source: discrete Fourier least squares (textbook): for N evenly spaced angles and white
    # noise sigma, cos/sin coefficients of order 1..N/2-1 have standard error sigma*sqrt(2/N)
    # and the mean sigma/sqrt(N), because the design columns are orthogonal.
    sigma = 0.02
    angle = np.arange(n_angles) * 360.0 / n_angles
    values = harmonic_model(angle, *TRUE_HARMONICS)
    fit = fit_harmonics(angle, values, np.full(n_angles, sigma))
    expected = [sigma / math.sqrt(n_angles)] + [sigma * math.sqrt(2 / n_angles)] * 4
    np.testing.assert_allclose(fit.errors, expected, rtol=1e-10)


def test_harmonic_errors_describe_the_actual_scatter() -> None:
    # Monte Carlo of the same textbook result, for the unweighted (residual-based) errors.
    rng = np.random.default_rng(5)
    n_angles, sigma, trials = 36, 0.02, 2000
    angle = np.arange(n_angles) * 10.0
    clean = harmonic_model(angle, *TRUE_HARMONICS)
    values = clean + rng.normal(0, sigma, (trials, n_angles))
    group = np.repeat(np.arange(trials), n_angles)
    fits = fit_harmonics_by_group(np.tile(angle, trials), values.ravel(), None, group, trials)
    textbook = sigma * math.sqrt(2 / n_angles)
    # The standard deviation of 2000 samples has a relative standard error 1/sqrt(2*2000)
    # = 1.6 %: 5 % is a 3-sigma band.
    np.testing.assert_allclose(fits.coefficients[:, 1:].std(axis=0), textbook, rtol=0.05)
    # Each reported error is s*sqrt(2/N) with s from 31 degrees of freedom; the mean of s
    # is within 1 % of sigma (c4 factor) and averages over 2000 fits: 2 % tolerance.
    np.testing.assert_allclose(fits.errors[:, 1:].mean(axis=0), textbook, rtol=0.02)
    # unbiased: the mean coefficient lies within 4 standard errors of the truth
    mean_error = textbook / math.sqrt(trials)
    assert np.all(np.abs(fits.coefficients.mean(axis=0)[1:] - TRUE_HARMONICS[1:]) < 4 * mean_error)


def test_grouped_fit_equals_separate_fits_and_flags_undetermined_groups() -> None:
    sweeps = [noisy_sweep(seed) for seed in (6, 7, 8)]
    # a fourth "sweep" at 0 and 180 deg only cannot separate the harmonics
    sweeps.append((np.array([0.0, 180.0, 0.0, 180.0, 0.0, 180.0]), np.ones(6), np.ones(6)))
    angle = np.concatenate([s[0] for s in sweeps])
    values = np.concatenate([s[1] for s in sweeps])
    sigma = np.concatenate([s[2] for s in sweeps])
    group = np.concatenate([np.full(s[0].size, index) for index, s in enumerate(sweeps)])
    fits = fit_harmonics_by_group(angle, values, sigma, group, 4)
    for index in range(3):
        single = fit_harmonics(*sweeps[index])
        np.testing.assert_allclose(fits.coefficients[index], single.coefficients, rtol=1e-12)
    assert np.all(np.isnan(fits.coefficients[3]))
    assert fits.n_points.tolist() == [29, 29, 29, 6]


def test_a_single_unmarked_layer_carries_all_the_current() -> None:
    # one 10 nm film, 2 um wide: 1 mA / (2e-6 m * 1e-8 m) = 5e10 A/m^2
    layers = layers_from_records([{"thickness_m": 1e-8, "resistivity_ohm_m": 1e-7}])
    assert 1e-3 * carrier_density_per_ampere(2e-6, layers) == pytest.approx(5e10)


def test_inverse_field_form_recovers_known_parameters() -> None:
    rng = np.random.default_rng(9)
    field_T = np.array([0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 4.0, 8.0])
    independent, dependent, scale = 3e-3, 2e-3, 0.4
    clean = independent + dependent * scale / (field_T + scale)  # written out, not imported
    sigma = np.full(field_T.size, 2e-5)
    noisy = clean + rng.normal(0, sigma)
    fit = fit_field_dependence(field_T, noisy, sigma, "inverse")
    # Known Gaussian noise with the given sigma: a correct fit lies within 3 sigma of truth.
    truth = np.array([independent, dependent, scale])
    assert np.all(np.abs(fit.values - truth) < 3 * fit.errors), (fit.values, fit.errors)
    # Source: scipy.optimize.curve_fit started at the truth must agree with the fit.
    expected, covariance = curve_fit(
        lambda b, a, c, s: a + c * s / (b + s),
        field_T,
        noisy,
        p0=truth,
        sigma=sigma,
        absolute_sigma=True,
    )
    np.testing.assert_allclose(fit.values, expected, rtol=1e-5)
    np.testing.assert_allclose(fit.errors, np.sqrt(np.diag(covariance)), rtol=1e-3)


def test_inverse_field_form_needs_four_fields() -> None:
    fit = fit_field_dependence([0.1, 0.5, 1.0], [3.0, 2.0, 1.5], None, "inverse")
    assert np.all(np.isnan(fit.values)) and "4" in fit.note


def test_linear_field_form_matches_numpy_polyfit() -> None:
    rng = np.random.default_rng(10)
    field_T = np.linspace(1, 9, 9)
    sigma = rng.uniform(1e-5, 3e-5, field_T.size)
    values = 4e-3 - 1e-4 * field_T + rng.normal(0, sigma)
    fit = fit_field_dependence(field_T, values, sigma, "linear")
    # Source: numpy.polyfit with weights 1/sigma and cov="unscaled" gives (A^T W A)^-1.
    (slope, intercept), covariance = np.polyfit(field_T, values, 1, w=1 / sigma, cov="unscaled")
    np.testing.assert_allclose(fit.values, [intercept, slope], rtol=1e-8)
    np.testing.assert_allclose(fit.errors, np.sqrt(np.diag(covariance))[::-1], rtol=1e-8)


def test_field_dependence_rejects_an_unknown_form() -> None:
    with pytest.raises(ValueError, match="form"):
        fit_field_dependence([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], None, "quadratic")


def test_ratio_error_follows_the_quotient_rule() -> None:
    # Quotient rule of first-order propagation (common practice): (q_err/q)^2 = (n_err/n)^2 +
    # (d_err/d)^2. Here 2 +- 0.1 over 4 +- 0.2: 0.5 * sqrt(0.05^2 + 0.05^2) = 0.035355.
    ratio, error = ratio_with_error(2.0, 0.1, 4.0, 0.2)
    assert float(ratio) == 0.5
    assert float(error) == pytest.approx(0.0353553, rel=1e-5)


def test_pooled_errors_weight_every_row_alike() -> None:
    angle, values, sigma = noisy_sweep(seed=11)
    group = np.zeros(angle.size, np.int64)
    pooled = fit_harmonics_by_group(angle, values, sigma, group, 1, pool_errors=True).group(0)
    # Source: numpy.linalg.lstsq unweighted (equal weights), with the covariance
    # (A^T A)^-1 * s_pool^2 for the pooled sigma s_pool = sqrt(mean(sigma^2)).
    design = harmonic_jacobian(angle)
    expected, *_ = np.linalg.lstsq(design, values, rcond=None)
    pooled_sigma = math.sqrt(np.mean(sigma**2))
    covariance = np.linalg.inv(design.T @ design) * pooled_sigma**2
    np.testing.assert_allclose(pooled.coefficients, expected, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(pooled.errors, np.sqrt(np.diag(covariance)), rtol=1e-9)
    rss = np.sum((values - design @ expected) ** 2)
    assert pooled.reduced_chi2 == pytest.approx(rss / pooled_sigma**2 / (angle.size - 5))


def test_errors_are_not_inflated_but_the_option_matches_curve_fit_relative_sigma():
    angle, values, sigma = noisy_sweep(seed=12)
    understated = sigma / 3  # the scatter is three times the stated errors
    fits = fit_harmonics_by_group(angle, values, understated, np.zeros(angle.size, int), 1)
    assert fits.reduced_chi2[0] > 1
    # Source: scipy.optimize.curve_fit with absolute_sigma=True keeps the stated errors ...
    _, absolute = curve_fit(
        harmonic_model, angle, values, p0=np.zeros(5), sigma=understated,
        jac=harmonic_jacobian, absolute_sigma=True, **TIGHT,
    )  # fmt: skip
    np.testing.assert_allclose(fits.scaled_errors[0], np.sqrt(np.diag(absolute)), rtol=1e-6)
    # ... and with absolute_sigma=False scales the covariance by the reduced chi-squared:
    # the explicit inflation option of fits.csv (fit_quality.assess) must give that.
    _, relative = curve_fit(
        harmonic_model, angle, values, p0=np.zeros(5), sigma=understated,
        jac=harmonic_jacobian, **TIGHT,
    )  # fmt: skip
    table = pd.DataFrame({
        "temperature_K": np.nan, "field_T": np.nan, "current_A": np.nan, "angle_deg": np.nan,
        "channel": "", "analysis": "angle", "quantity": [f"c{i}" for i in range(5)],
        "value": fits.coefficients[0], "error": fits.errors[0], "unit": "ohm",
        "reduced_chi2": fits.reduced_chi2[0], "chi2_dof": float(fits.dof[0]), "p_value": np.nan,
        "n_points": fits.n_points[0], "n_flagged": 0, "model": "", "note": "",
    })
    inflated = assess(table, table.iloc[:0], include_flagged=False, inflate_errors=True)
    np.testing.assert_allclose(inflated["error"], np.sqrt(np.diag(relative)), rtol=1e-6)
    assert inflated["note"].str.contains("inflated").all()
    plain = assess(table, table.iloc[:0], include_flagged=False, inflate_errors=False)
    np.testing.assert_allclose(plain["error"], fits.errors[0])
    # p-value of the chi^2 (source: scipy.stats.chi2.sf) and the warning it calls for
    expected_p = chi2.sf(fits.reduced_chi2[0] * fits.dof[0], fits.dof[0])
    assert plain["p_value"].iloc[0] == pytest.approx(expected_p)
    assert expected_p < 1e-3 and plain["note"].str.startswith("WARNING").all()
