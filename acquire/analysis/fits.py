"""Pure fitting functions for the morning analysis (no files, no pandas).

Everything here takes and returns numpy arrays and SI floats. The grouped least-squares
solver is the workhorse: it fits one linear model to many groups at once (a night's run has
thousands of angle sweeps), so no Python loop ever runs over rows or groups.

Error convention used throughout (the weights come from the noise model, fit_noise):

- weighted fit (every point of a group has a finite, positive error): the errors are taken
  as absolute standard deviations; parameter errors are sqrt(diag((A^T W A)^-1)) with
  W = diag(1/sigma^2), and the reduced chi-squared tells whether those errors describe the
  scatter;
- unweighted fit (some error missing): sigma is estimated from the residuals,
  s^2 = RSS/(n - p), parameter errors are sqrt(diag((A^T A)^-1) * s^2) and the reduced
  chi-squared is undefined (NaN), since it is 1 by construction.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import curve_fit

FloatArray = NDArray[np.float64]

HARMONIC_TERMS: tuple[str, ...] = ("c0", "cos1", "sin1", "cos2", "sin2")
"""Columns of the harmonic model c0 + a1 cos(phi) + b1 sin(phi) + a2 cos(2phi) + b2 sin(2phi)."""

# Eigenvalue ratio below which a (Jacobi-scaled) normal matrix is treated as singular: the
# design then cannot separate the parameters (e.g. all angles equal modulo 180 deg).
_SINGULAR_RATIO = 1e-10


@dataclass(frozen=True)
class LinearFit:
    """One group's result of a linear least-squares fit."""

    coefficients: FloatArray
    covariance: FloatArray
    reduced_chi2: float
    n_points: int
    weighted: bool

    @property
    def errors(self) -> FloatArray:
        return np.sqrt(np.diag(self.covariance))


@dataclass(frozen=True)
class GroupedLinearFit:
    """Results of one linear model fitted to many groups; arrays are indexed by group."""

    coefficients: FloatArray  # (groups, parameters); NaN where the group could not be fitted
    covariance: FloatArray  # (groups, parameters, parameters)
    reduced_chi2: FloatArray  # (groups,); NaN for unweighted groups or no degrees of freedom
    n_points: NDArray[np.int64]  # (groups,) points that entered the fit
    weighted: NDArray[np.bool_]  # (groups,)

    @property
    def errors(self) -> FloatArray:
        return np.sqrt(np.diagonal(self.covariance, axis1=1, axis2=2))

    @property
    def dof(self) -> NDArray[np.int64]:
        """Degrees of freedom of each group's chi^2: points - parameters."""
        return (self.n_points - self.coefficients.shape[1]).astype(np.int64)

    @property
    def birge_factor(self) -> FloatArray:
        """sqrt(reduced chi^2) where it exceeds 1, else 1 (and 1 for unweighted groups)."""
        with np.errstate(invalid="ignore"):
            return np.where(self.reduced_chi2 > 1, np.sqrt(self.reduced_chi2), 1.0)

    @property
    def scaled_errors(self) -> FloatArray:
        """The errors the fits report: from the noise model, never inflated here. A model
        that misses a term shows in the reduced chi^2 and its p-value instead; inflating by
        sqrt(reduced chi^2) is an explicit option applied to fits.csv as a whole
        (fit_quality)."""
        return self.errors

    def group(self, index: int) -> LinearFit:
        return LinearFit(
            coefficients=self.coefficients[index],
            covariance=self.covariance[index],
            reduced_chi2=float(self.reduced_chi2[index]),
            n_points=int(self.n_points[index]),
            weighted=bool(self.weighted[index]),
        )


def fit_linear_by_group(
    design: ArrayLike,
    values: ArrayLike,
    errors: ArrayLike | None,
    group: ArrayLike,
    n_groups: int,
    pool_errors: bool = False,
) -> GroupedLinearFit:
    """Least squares of `values ~ design @ coefficients`, separately for each group.

    `group[i]` is the group index (0..n_groups-1) of row i; rows with a negative index or a
    non-finite value or design entry are left out. A group is fitted weighted when every one
    of its rows has a finite positive error, else unweighted (see the module docstring).
    The normal equations are accumulated with bincount and solved as one stacked batch.

    pool_errors: give every row of a weighted group the group's RMS error. Use it when the
    rows share one noise level but each error is a poor estimate of it (a standard error
    over a few cycles has few degrees of freedom, and weighting by it scatters the weights);
    the pooled sigma has all the group's degrees of freedom, and the reduced chi-squared
    then compares the scatter between rows with the scatter within them.
    """
    design_matrix = np.asarray(design, dtype=float)
    if design_matrix.ndim == 1:
        design_matrix = design_matrix[:, None]
    y = np.asarray(values, dtype=float)
    sigma = np.full_like(y, np.nan) if errors is None else np.asarray(errors, dtype=float)
    group_index = np.asarray(group, dtype=np.int64)
    n_parameters = design_matrix.shape[1]

    usable = (group_index >= 0) & np.isfinite(y) & np.all(np.isfinite(design_matrix), axis=1)
    g = group_index[usable]
    a = design_matrix[usable]
    y = y[usable]
    s = sigma[usable]

    n_points: NDArray[np.int64] = np.bincount(g, minlength=n_groups)[:n_groups].astype(np.int64)
    has_sigma = np.isfinite(s) & (s > 0)
    n_with_sigma = np.bincount(g, weights=has_sigma.astype(float), minlength=n_groups)
    weighted = (n_points > 0) & (n_with_sigma[:n_groups] == n_points)
    safe_sigma = np.where(has_sigma, s, 1.0)
    if pool_errors:
        total_variance = np.bincount(g, weights=safe_sigma**2, minlength=n_groups)
        mean_variance = total_variance[:n_groups] / np.maximum(n_points, 1)
        safe_sigma = np.sqrt(mean_variance[g])
    weight = np.where(weighted[g], 1.0 / safe_sigma**2, 1.0)

    normal = np.empty((n_groups, n_parameters, n_parameters))
    right = np.empty((n_groups, n_parameters))
    for i in range(n_parameters):
        right[:, i] = np.bincount(g, weights=weight * a[:, i] * y, minlength=n_groups)
        for j in range(i, n_parameters):
            column = np.bincount(g, weights=weight * a[:, i] * a[:, j], minlength=n_groups)
            normal[:, i, j] = column
            normal[:, j, i] = column

    # Jacobi scaling makes the singularity test independent of the parameters' units.
    diagonal = np.diagonal(normal, axis1=1, axis2=2)
    positive = np.all(diagonal > 0, axis=1)
    scale = np.where(diagonal > 0, 1.0 / np.sqrt(np.where(diagonal > 0, diagonal, 1.0)), 0.0)
    scaled = normal * scale[:, :, None] * scale[:, None, :]
    identity = np.broadcast_to(np.eye(n_parameters), scaled.shape)
    scaled = np.where(positive[:, None, None], scaled, identity)
    eigenvalues = np.linalg.eigvalsh(scaled)
    solvable = (
        positive
        & (n_points >= n_parameters)
        & (eigenvalues[:, 0] > _SINGULAR_RATIO * eigenvalues[:, -1])
    )
    scaled = np.where(solvable[:, None, None], scaled, identity)
    inverse = np.linalg.inv(scaled) * scale[:, :, None] * scale[:, None, :]
    coefficients = np.einsum("gij,gj->gi", inverse, right)

    residual = y - np.einsum("ni,ni->n", a, coefficients[g])
    chi2 = np.bincount(g, weights=weight * residual**2, minlength=n_groups)[:n_groups]
    dof = n_points - n_parameters
    with np.errstate(divide="ignore", invalid="ignore"):
        chi2_per_dof = np.where(dof > 0, chi2 / np.where(dof > 0, dof, 1), np.nan)
    variance_scale = np.where(weighted, 1.0, chi2_per_dof)
    covariance = inverse * variance_scale[:, None, None]
    reduced_chi2 = np.where(weighted, chi2_per_dof, np.nan)

    coefficients[~solvable] = np.nan
    covariance[~solvable] = np.nan
    reduced_chi2[~solvable] = np.nan
    return GroupedLinearFit(coefficients.astype(np.float64), covariance.astype(np.float64),
                            reduced_chi2, n_points, weighted)


def fit_linear(design: ArrayLike, values: ArrayLike, errors: ArrayLike | None = None) -> LinearFit:
    """Single-group convenience form of `fit_linear_by_group`."""
    y = np.asarray(values, dtype=float)
    return fit_linear_by_group(design, y, errors, np.zeros(y.shape, np.int64), 1).group(0)


def harmonic_design(angle_deg: ArrayLike) -> FloatArray:
    """Design matrix of the harmonic model, columns in HARMONIC_TERMS order."""
    phi = np.deg2rad(np.asarray(angle_deg, dtype=float))
    return np.column_stack(
        [np.ones_like(phi), np.cos(phi), np.sin(phi), np.cos(2 * phi), np.sin(2 * phi)]
    )


def harmonic_curve(angle_deg: ArrayLike, coefficients: Sequence[float]) -> FloatArray:
    """Evaluate the harmonic model (for plotting the fitted curve)."""
    return harmonic_design(angle_deg) @ np.asarray(coefficients, dtype=float)


def fit_harmonics(
    angle_deg: ArrayLike, values: ArrayLike, errors: ArrayLike | None = None
) -> LinearFit:
    """Fit c0 + a1 cos + b1 sin + a2 cos 2 + b2 sin 2 of the angle (degrees) to one sweep."""
    return fit_linear(harmonic_design(angle_deg), values, errors)


def fit_harmonics_by_group(
    angle_deg: ArrayLike,
    values: ArrayLike,
    errors: ArrayLike | None,
    group: ArrayLike,
    n_groups: int,
    pool_errors: bool = False,
) -> GroupedLinearFit:
    return fit_linear_by_group(
        harmonic_design(angle_deg), values, errors, group, n_groups, pool_errors
    )


def second_harmonic_offset_deg(
    cos2: ArrayLike,
    sin2: ArrayLike,
    var_cos2: ArrayLike,
    var_sin2: ArrayLike,
    cov_cos2_sin2: ArrayLike,
    reference_deg: float = 0.0,
) -> tuple[FloatArray, FloatArray]:
    """Angle offset phi0 from the 2phi phase: a2 cos 2phi + b2 sin 2phi = A cos 2(phi - phi0).

    `reference_deg` is where the ideal signal peaks (0 for cos 2phi, 45 for sin 2phi). The
    2phi phase cannot tell phi0 from phi0 +- 90 deg (that only flips the amplitude's sign), so
    the offset is folded into (-45, 45]: a mounting error is assumed to be smaller than that.
    Returns (offset, standard error) in degrees, error propagated through atan2.
    """
    a2 = np.asarray(cos2, dtype=float)
    b2 = np.asarray(sin2, dtype=float)
    phase = 0.5 * np.rad2deg(np.arctan2(b2, a2)) - reference_deg
    folded = phase - 90.0 * np.ceil((phase - 45.0) / 90.0)
    magnitude2 = a2**2 + b2**2
    with np.errstate(divide="ignore", invalid="ignore"):
        d_da = -0.5 * b2 / magnitude2
        d_db = 0.5 * a2 / magnitude2
        variance = (
            d_da**2 * np.asarray(var_cos2)
            + d_db**2 * np.asarray(var_sin2)
            + 2 * d_da * d_db * np.asarray(cov_cos2_sin2)
        )
    return folded, np.rad2deg(np.sqrt(variance))


def ratio_with_error(
    numerator: ArrayLike,
    numerator_err: ArrayLike,
    denominator: ArrayLike,
    denominator_err: ArrayLike,
) -> tuple[FloatArray, FloatArray]:
    """n/d with first-order error propagation, treating n and d as independent."""
    n = np.asarray(numerator, dtype=float)
    d = np.asarray(denominator, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = n / d
        error = np.sqrt(
            (np.asarray(numerator_err) / d) ** 2 + (n * np.asarray(denominator_err) / d**2) ** 2
        )
    return ratio, error


# --- field dependence -------------------------------------------------------------------

FIELD_FORMS: dict[str, str] = {
    "linear": "A + slope*|B|  (high-field form)",
    "inverse": "A + C*Bs/(|B| + Bs), Bs > 0  (C falls to half at |B| = Bs)",
}


def field_linear(field_T: ArrayLike, independent: float, slope: float) -> FloatArray:
    return independent + slope * np.asarray(field_T, dtype=float)


def field_inverse(
    field_T: ArrayLike, independent: float, dependent: float, scale_T: float
) -> FloatArray:
    return independent + dependent * scale_T / (np.asarray(field_T, dtype=float) + scale_T)


@dataclass(frozen=True)
class CurveFit:
    """Result of a (possibly non-linear) fit of named parameters."""

    names: tuple[str, ...]
    values: FloatArray
    errors: FloatArray
    reduced_chi2: float
    n_points: int
    weighted: bool
    note: str = ""

    @property
    def dof(self) -> int:
        return self.n_points - len(self.names)


def fit_field_dependence(
    field_T: ArrayLike, values: ArrayLike, errors: ArrayLike | None, form: str
) -> CurveFit:
    """Fit `values` against |field| with one of FIELD_FORMS.

    "linear" parameters: independent, slope (per tesla). "inverse" parameters: independent
    (the part that survives at high field), dependent (the part that falls with field, its
    value at zero field) and scale_T (Bs). The inverse form is non-linear in Bs: it is fitted
    by scipy's curve_fit, started from the best Bs on a log grid (for each grid value the
    model is linear, so the start is the global best on that grid, not a guess).
    """
    if form not in FIELD_FORMS:
        raise ValueError(f"unknown field form {form!r}; choose one of {sorted(FIELD_FORMS)}")
    x = np.abs(np.asarray(field_T, dtype=float))
    y = np.asarray(values, dtype=float)
    sigma = None if errors is None else np.asarray(errors, dtype=float)
    keep = np.isfinite(x) & np.isfinite(y)
    x, y = x[keep], y[keep]
    if sigma is not None:
        sigma = sigma[keep]
    weighted = sigma is not None and bool(np.all(np.isfinite(sigma) & (sigma > 0)))
    if form == "linear":
        linear = fit_linear(np.column_stack([np.ones_like(x), x]), y, sigma if weighted else None)
        return CurveFit(
            ("independent", "slope"),
            linear.coefficients,
            linear.errors,
            linear.reduced_chi2,
            linear.n_points,
            linear.weighted,
        )
    names = ("independent", "dependent", "scale_T")
    if x.size < 4:
        nan3 = np.full(3, np.nan)
        return CurveFit(names, nan3, nan3, math.nan, int(x.size), weighted, "needs >= 4 points")
    start = _inverse_start(x, y, sigma if weighted else None)
    return _curve_fit(field_inverse, names, x, y, sigma if weighted else None, start)


def _inverse_start(x: FloatArray, y: FloatArray, sigma: FloatArray | None) -> list[float]:
    positive = x[x > 0]
    low = positive.min() / 10 if positive.size else 1e-3
    high = max(x.max() * 10, low * 100)
    scales = np.geomspace(low, high, 60)
    # One batched linear fit: every grid value of Bs is its own "group" of the same points.
    basis = (scales[:, None] / (x[None, :] + scales[:, None])).ravel()
    trials = fit_linear_by_group(
        np.column_stack([np.ones_like(basis), basis]),
        np.tile(y, scales.size),
        None if sigma is None else np.tile(sigma, scales.size),
        np.repeat(np.arange(scales.size), x.size),
        scales.size,
    )
    model = trials.coefficients[:, :1] + trials.coefficients[:, 1:] * basis.reshape(scales.size, -1)
    weights = 1.0 if sigma is None else 1.0 / sigma**2
    cost = np.sum(weights * (y[None, :] - model) ** 2, axis=1)
    if not np.isfinite(cost).any():
        return [float(np.mean(y)), 0.0, float(np.sqrt(low * high))]
    best = int(np.nanargmin(cost))
    return [float(trials.coefficients[best, 0]), float(trials.coefficients[best, 1]), scales[best]]


def _curve_fit(
    model: Callable[..., FloatArray],
    names: tuple[str, ...],
    x: FloatArray,
    y: FloatArray,
    sigma: FloatArray | None,
    start: list[float],
) -> CurveFit:
    n_parameters = len(names)
    dof = x.size - n_parameters
    lower = [-np.inf] * (n_parameters - 1) + [0.0]
    try:
        values, covariance = curve_fit(
            model,
            x,
            y,
            p0=start,
            sigma=sigma,
            absolute_sigma=sigma is not None,
            bounds=(lower, [np.inf] * n_parameters),
            maxfev=20000,
        )
    except (RuntimeError, ValueError) as error:
        nan = np.full(n_parameters, np.nan)
        return CurveFit(names, nan, nan, math.nan, int(x.size), sigma is not None, str(error))
    residual = y - model(x, *values)
    chi2 = float(np.sum((residual / sigma) ** 2)) if sigma is not None else math.nan
    reduced = chi2 / dof if dof > 0 else math.nan
    errors = np.sqrt(np.abs(np.diag(covariance)))
    note = "" if np.all(np.isfinite(errors)) else "parameters not all determined by the data"
    return CurveFit(names, values, errors, reduced, int(x.size), sigma is not None, note)
