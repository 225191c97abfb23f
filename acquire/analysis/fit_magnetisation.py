"""Harmonic fits in the magnetisation angle, with the film's anisotropy fitted from the data.

Each sweep (one group) is fitted with

    R = c0 + a1 cos(alpha) + b1 sin(alpha) + a2 cos(2 alpha) + b2 sin(2 alpha)

where alpha is the magnetisation angle of the thin-film equilibrium (thin_film.py) at the
field angle, the field and the plane's anisotropy field B_a. The model is linear in the five
coefficients and non-linear in B_a: B_a starts from the best value on a grid (relative to the
field) and is refined by Gauss-Newton steps on the joint design [harmonics, dR/dB_a], all
groups at once. The last step's covariance gives the coefficients' errors with B_a's
uncertainty included. A B_a given by the user is held fixed.

Points left out (`excluded`): where the film has two minima and which one it sits in is not
the one nearest the field (m held on the far side of a hard axis, waiting to switch), or a
field along the hard axis itself (two symmetric minima). When and where a real film switches
there depends on details a single-domain model does not get right.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from acquire.analysis.fits import GroupedLinearFit, fit_linear_by_group, harmonic_design
from acquire.analysis.thin_film import equilibrium_angle_deg, follow_sweeps

FloatArray = NDArray[np.float64]

# B_a / |B| tried for the start (both signs: an easy axis across the current in xy, a
# perpendicular easy axis out of plane).
_START_RATIOS = np.geomspace(0.002, 100.0, 36)  # steps of 36 %
RIVAL_CHI2 = 9.0
_FINE_SPAN = 0.2
_FINE_STEPS = 17
_GAUSS_NEWTON_STEPS = 12
_AMBIGUOUS_DEG = 1.0


@dataclass(frozen=True)
class MagnetisationFit:
    fit: GroupedLinearFit  # five harmonic coefficients in alpha (HARMONIC_TERMS order)
    anisotropy_T: FloatArray  # per group: B_a used
    anisotropy_err_T: FloatArray  # NaN where given or not determined
    alpha_deg: FloatArray  # per row: the magnetisation angle at the final B_a
    excluded: NDArray[np.bool_]  # per row: left out (see the module docstring)
    determined: NDArray[np.bool_]  # per group: B_a determined by the data
    # per group: a B_a on the other side of |B| fits about as well (NaN: none does)
    rival_T: FloatArray | None = None


def magnetisation_angles(
    angle_deg: FloatArray,
    field_T: FloatArray,
    anisotropy_T: FloatArray,
    plane: str,
    sweep: NDArray[np.int64],
    order: FloatArray,
) -> tuple[FloatArray, NDArray[np.bool_]]:
    """Angle of the minimum nearest the field per row, and which rows are ambiguous."""
    nearest = equilibrium_angle_deg(angle_deg, field_T, anisotropy_T, plane)
    followed = follow_sweeps(angle_deg, field_T, anisotropy_T, plane, sweep, order)
    plus = equilibrium_angle_deg(angle_deg, field_T, anisotropy_T, plane, angle_deg + 0.5)
    minus = equilibrium_angle_deg(angle_deg, field_T, anisotropy_T, plane, angle_deg - 0.5)

    def differ(a: FloatArray, b: FloatArray) -> NDArray[np.bool_]:
        return np.abs((a - b + 180.0) % 360.0 - 180.0) > _AMBIGUOUS_DEG

    return nearest, differ(nearest, followed) | differ(plus, minus)


def fit_on_magnetisation(
    angle_deg: FloatArray,
    field_T: FloatArray,
    values: FloatArray,
    errors: FloatArray,
    ids: NDArray[np.int64],
    n_groups: int,
    plane: str,
    order: FloatArray,
    given_anisotropy_T: float | None = None,
) -> MagnetisationFit:
    field_of_group = _group_field(ids, field_T, n_groups)
    if given_anisotropy_T is not None:
        anisotropy = np.full(n_groups, float(given_anisotropy_T))
        fit, alpha, excluded = _linear_at(
            anisotropy, angle_deg, field_T, values, errors, ids, n_groups, plane, order
        )
        return MagnetisationFit(
            fit, anisotropy, np.full(n_groups, np.nan), alpha, excluded, np.zeros(n_groups, bool)
        )
    anisotropy, rival = _grid_start(angle_deg, field_T, values, errors, ids, n_groups, plane)
    anisotropy_err = np.full(n_groups, np.nan)
    determined = np.zeros(n_groups, bool)
    joint: GroupedLinearFit | None = None
    for _ in range(_GAUSS_NEWTON_STEPS):
        joint, step = _gauss_newton(
            anisotropy, angle_deg, field_T, values, errors, ids, n_groups, plane, order
        )
        determined = np.isfinite(step)
        limit = 0.5 * np.abs(anisotropy) + 0.2 * field_of_group
        anisotropy = np.where(determined, anisotropy + np.clip(step, -limit, limit), anisotropy)
        anisotropy_err = np.sqrt(joint.covariance[:, 5, 5])
        if np.all(~determined | (np.abs(step) < 1e-3 * np.nan_to_num(anisotropy_err, nan=1.0))):
            break
    fit, alpha, excluded = _linear_at(
        anisotropy, angle_deg, field_T, values, errors, ids, n_groups, plane, order
    )
    assert joint is not None
    joint, _ = _gauss_newton(
        anisotropy, angle_deg, field_T, values, errors, ids, n_groups, plane, order
    )
    determined = np.isfinite(joint.coefficients[:, 5])
    # Where the data determine B_a, the joint fit's covariance carries its uncertainty into
    # the coefficients; elsewhere the harmonic fit at the held B_a stands.
    chosen = GroupedLinearFit(
        np.where(determined[:, None], joint.coefficients[:, :5], fit.coefficients),
        np.where(determined[:, None, None], joint.covariance[:, :5, :5], fit.covariance),
        np.where(determined, joint.reduced_chi2, fit.reduced_chi2),
        fit.n_points,
        fit.weighted,
    )
    anisotropy_err = np.where(determined, np.sqrt(joint.covariance[:, 5, 5]), np.nan)
    return MagnetisationFit(chosen, anisotropy, anisotropy_err, alpha, excluded, determined,
                            rival)


def hold_anisotropy(
    fitted: MagnetisationFit,
    held_T: FloatArray,
    held_err_T: FloatArray,
    angle_deg: FloatArray,
    field_T: FloatArray,
    values: FloatArray,
    errors: FloatArray,
    ids: NDArray[np.int64],
    plane: str,
    order: FloatArray,
) -> MagnetisationFit:
    """`fitted` with the groups whose held_T is finite refitted at that B_a (held fixed,
    its error the source's); the other groups keep their own fit."""
    n_groups = held_T.size
    held = np.isfinite(held_T)
    anisotropy = np.where(held, held_T, fitted.anisotropy_T)
    fit, alpha, excluded = _linear_at(
        anisotropy, angle_deg, field_T, values, errors, ids, n_groups, plane, order
    )
    row_held = (ids >= 0) & held[np.clip(ids, 0, None)]
    merged = GroupedLinearFit(
        np.where(held[:, None], fit.coefficients, fitted.fit.coefficients),
        np.where(held[:, None, None], fit.covariance, fitted.fit.covariance),
        np.where(held, fit.reduced_chi2, fitted.fit.reduced_chi2),
        np.where(held, fit.n_points, fitted.fit.n_points),
        np.where(held, fit.weighted, fitted.fit.weighted),
    )
    return MagnetisationFit(
        merged,
        anisotropy,
        np.where(held, held_err_T, fitted.anisotropy_err_T),
        np.where(row_held, alpha, fitted.alpha_deg),
        np.where(row_held, excluded, fitted.excluded),
        np.where(held, False, fitted.determined),
        None if fitted.rival_T is None else np.where(held, np.nan, fitted.rival_T),
    )


def angle_fit_curve(
    field_angle_deg: FloatArray,
    field_T: float,
    anisotropy_T: float,
    plane: str,
    coefficients: list[float],
) -> FloatArray:
    """The fitted harmonic model against the field angle (for plotting a sweep's fit): the
    magnetisation angle of the minimum nearest the field, then the five harmonics."""
    anisotropy = anisotropy_T if np.isfinite(anisotropy_T) else 0.0
    alpha = equilibrium_angle_deg(field_angle_deg, field_T, anisotropy, plane)
    return harmonic_design(alpha) @ np.asarray(coefficients, dtype=float)


def _group_field(ids: NDArray[np.int64], field_T: FloatArray, n_groups: int) -> FloatArray:
    member = ids >= 0
    total = np.bincount(ids[member], weights=np.abs(field_T[member]), minlength=n_groups)
    count = np.bincount(ids[member], minlength=n_groups)
    return total / np.maximum(count, 1)


def _rows_anisotropy(anisotropy: FloatArray, ids: NDArray[np.int64]) -> FloatArray:
    return np.where(ids >= 0, anisotropy[np.clip(ids, 0, None)], np.nan)


def _linear_at(
    anisotropy: FloatArray,
    angle_deg: FloatArray,
    field_T: FloatArray,
    values: FloatArray,
    errors: FloatArray,
    ids: NDArray[np.int64],
    n_groups: int,
    plane: str,
    order: FloatArray,
) -> tuple[GroupedLinearFit, FloatArray, NDArray[np.bool_]]:
    row_anisotropy = np.nan_to_num(_rows_anisotropy(anisotropy, ids))
    alpha, excluded = magnetisation_angles(angle_deg, field_T, row_anisotropy, plane, ids, order)
    used = np.where(excluded, -1, ids)
    fit = fit_linear_by_group(harmonic_design(alpha), values, errors, used, n_groups)
    return fit, alpha, excluded


def _gauss_newton(
    anisotropy: FloatArray,
    angle_deg: FloatArray,
    field_T: FloatArray,
    values: FloatArray,
    errors: FloatArray,
    ids: NDArray[np.int64],
    n_groups: int,
    plane: str,
    order: FloatArray,
) -> tuple[GroupedLinearFit, FloatArray]:
    """One step: the joint fit of [harmonics, dR/dB_a] and its B_a step (NaN: undetermined)."""
    fit, alpha, excluded = _linear_at(
        anisotropy, angle_deg, field_T, values, errors, ids, n_groups, plane, order
    )
    delta = 1e-4 * (np.abs(anisotropy) + _group_field(ids, field_T, n_groups))
    row_delta = np.nan_to_num(_rows_anisotropy(delta, ids))
    row_anisotropy = np.nan_to_num(_rows_anisotropy(anisotropy, ids))
    shifted = equilibrium_angle_deg(angle_deg, field_T, row_anisotropy + row_delta, plane)
    coefficients = np.nan_to_num(fit.coefficients[np.clip(ids, 0, None)])
    derivative = np.einsum(
        "ni,ni->n", harmonic_design(shifted) - harmonic_design(alpha), coefficients
    ) / np.where(row_delta > 0, row_delta, 1.0)
    design = np.column_stack([harmonic_design(alpha), derivative])
    used = np.where(excluded, -1, ids)
    joint = fit_linear_by_group(design, values, errors, used, n_groups)
    return joint, joint.coefficients[:, 5]


def _grid_start(
    angle_deg: FloatArray,
    field_T: FloatArray,
    values: FloatArray,
    errors: FloatArray,
    ids: NDArray[np.int64],
    n_groups: int,
    plane: str,
) -> tuple[FloatArray, FloatArray]:
    """Per group, the B_a of smallest chi^2 over all its points, and a rival (NaN if none).

    A coarse grid of B_a/|B| (both signs), then a fine one (2.5 % steps) around the best
    coarse value with |B_a| <= |B| (m follows the field, lagging) and around the best with
    |B_a| > |B| (m held near the easy direction). A sweep with a large signal has a narrow
    valley in B_a, hence the fine look. Far below B_a the two kinds fit alike (a small
    amplitude with m following the field, or a large one with m barely turning): the other
    kind's best is the rival when its chi^2 is within RIVAL_CHI2 (or 20 %) of the best.
    The minimum nearest the field is used (no history)."""
    field = _group_field(ids, field_T, n_groups)
    ratios = np.concatenate([[0.0], _START_RATIOS, -_START_RATIOS])
    coarse = ratios[:, None] * field[None, :]
    chi2 = _grid_chi2(coarse, angle_deg, field_T, values, errors, ids, n_groups, plane)
    spread = 1.0 + np.linspace(-_FINE_SPAN, _FINE_SPAN, _FINE_STEPS)
    best: list[FloatArray] = []
    best_chi2: list[FloatArray] = []
    for side in (np.abs(ratios) <= 1.0, np.abs(ratios) > 1.0):
        on_side = np.where(side[:, None], chi2, np.inf)
        centre = coarse[np.argmin(on_side, axis=0), np.arange(n_groups)]
        fine = np.concatenate([centre[None, :] * spread[:, None], centre[None, :]])
        fine_chi2 = _grid_chi2(fine, angle_deg, field_T, values, errors, ids, n_groups, plane)
        index = np.argmin(fine_chi2, axis=0)
        best.append(fine[index, np.arange(n_groups)])
        best_chi2.append(fine_chi2[index, np.arange(n_groups)])
    low_wins = best_chi2[0] <= best_chi2[1]
    chosen = np.where(low_wins, best[0], best[1])
    chosen_chi2 = np.minimum(best_chi2[0], best_chi2[1])
    other_chi2 = np.maximum(best_chi2[0], best_chi2[1])
    close = np.isfinite(other_chi2) & (
        other_chi2 - chosen_chi2 < np.maximum(RIVAL_CHI2, 0.2 * chosen_chi2)
    )
    rival = np.where(close, np.where(low_wins, best[1], best[0]), np.nan)
    return chosen, rival


def _grid_chi2(
    candidates: FloatArray,
    angle_deg: FloatArray,
    field_T: FloatArray,
    values: FloatArray,
    errors: FloatArray,
    ids: NDArray[np.int64],
    n_groups: int,
    plane: str,
) -> FloatArray:
    """chi^2 (trials, groups) of the harmonic fit at each candidate B_a (trials, groups),
    in chunks of candidates so the memory stays bounded."""
    sigma = np.where(np.isfinite(errors) & (errors > 0), errors, np.nan)
    rows = np.flatnonzero((ids >= 0) & np.isfinite(values) & np.isfinite(sigma))
    result = np.full(candidates.shape, np.inf)
    chunk = max(1, 200_000 // max(rows.size, 1))
    for first in range(0, candidates.shape[0], chunk):
        trial = candidates[first : first + chunk]
        n_trials = trial.shape[0]
        trial_ids = (ids[rows][None, :] + n_groups * np.arange(n_trials)[:, None]).ravel()
        alpha = equilibrium_angle_deg(np.tile(angle_deg[rows], n_trials),
                                      np.tile(field_T[rows], n_trials),
                                      trial[:, ids[rows]].ravel(), plane)
        y, e = np.tile(values[rows], n_trials), np.tile(sigma[rows], n_trials)
        design = harmonic_design(alpha)
        fit = fit_linear_by_group(design, y, e, trial_ids, n_groups * n_trials)
        residual = y - np.einsum("ni,ni->n", design, np.nan_to_num(fit.coefficients[trial_ids]))
        chi2 = np.bincount(trial_ids, weights=(residual / e) ** 2, minlength=n_groups * n_trials)
        chi2 = np.where(np.isfinite(fit.coefficients[:, 0]), chi2, np.inf)
        result[first : first + n_trials] = chi2.reshape(n_trials, n_groups)
    return result
