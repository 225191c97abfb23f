"""Where the magnetisation of a thin film points, given the field: the analysis's own solver.

The angle fits need the magnetisation angle, not the field angle: below saturation m lags
the field. Within the rotation plane, with alpha the magnetisation's angle and phi the
field's (both measured as the plane's angle is, docs/conventions.md), the energy density over
the saturation magnetisation (in tesla) of a single-domain film is

    e(alpha) = -(B_a / 2) cos^2(alpha - alpha_e) - B cos(alpha - phi)

- xy (in-plane rotation): alpha_e = 0 (the current direction), B_a = B_k, the in-plane
  uniaxial anisotropy field; B_k < 0 means the easy axis lies across the current (along y).
- zx, zy (out of plane): alpha_e = 90 deg (the film plane), B_a = B_eff, the effective
  demagnetising field mu0*M_eff (shape minus perpendicular anisotropy). In zx an in-plane
  easy axis along the current adds to it (B_eff = B_d + B_k); in zy it does not enter.

This is the Stoner-Wohlfarth energy (Stoner and Wohlfarth 1948) restricted to the rotation
plane. Below |B| = |B_a| it can have two minima; the state then depends on the history, so
the solver follows the sweep in the order it was measured, each point starting from the
previous one's state, the field turned in steps of at most MAX_STEP_DEG.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]

EASY_DIRECTION_DEG: dict[str, float] = {"xy": 0.0, "zx": 90.0, "zy": 90.0}
ANISOTROPY_NAME: dict[str, str] = {"xy": "B_k", "zx": "B_eff", "zy": "B_eff"}
# A field turn larger than this between two points is made in smaller steps, so the state
# cannot leap over an energy barrier the real rotation would have met.
MAX_STEP_DEG = 5.0
_TRUST_RAD = 0.3
_ITERATIONS = 60
_HALVINGS = 12


def _reduced(
    field_angle_deg: ArrayLike, field_T: ArrayLike, anisotropy_T: ArrayLike, plane: str
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Field angle relative to the easy direction (rad), |B|, B_a: a negative B is +|B| at
    the opposite angle."""
    if plane not in EASY_DIRECTION_DEG:
        raise ValueError(f"unknown rotation plane {plane!r}; valid: xy, zx, zy")
    field = np.asarray(field_T, dtype=float)
    angle = np.asarray(field_angle_deg, dtype=float) + np.where(field < 0, 180.0, 0.0)
    relative = np.deg2rad(angle - EASY_DIRECTION_DEG[plane])
    return relative, np.abs(field), np.asarray(anisotropy_T, dtype=float)


def energy(alpha: FloatArray, phi: FloatArray, field: FloatArray, ba: FloatArray) -> FloatArray:
    """e(alpha) of the module docstring, angles relative to the easy direction (rad)."""
    return -0.5 * ba * np.cos(alpha) ** 2 - field * np.cos(alpha - phi)


def _relax(
    alpha: FloatArray, phi: FloatArray, field: FloatArray, ba: FloatArray
) -> FloatArray:
    """Local minimum reached by damped Newton descent from alpha (elementwise, vectorised).

    The step is -g/|h| (downhill also where the curvature is negative), capped at a trust
    radius and halved until the energy does not rise, so each element stays in the basin it
    started in, or falls into the next one past a switching field. Only the elements not yet
    converged are worked on.
    """
    alpha = alpha.astype(float, copy=True).ravel()
    phi, field, ba = (np.asarray(v, dtype=float).ravel() for v in (phi, field, ba))
    shape_out = alpha.shape
    active = np.arange(alpha.size)
    for _ in range(_ITERATIONS):
        if active.size == 0:
            break
        a, p, f, b = alpha[active], phi[active], field[active], ba[active]
        scale = np.abs(b) + f + 1e-300
        gradient = 0.5 * b * np.sin(2 * a) + f * np.sin(a - p)
        curvature = b * np.cos(2 * a) + f * np.cos(a - p)
        flat = np.abs(gradient) <= 1e-13 * scale
        converged = flat & (curvature >= 0)
        step = -gradient / np.maximum(np.abs(curvature), 1e-9 * scale)
        # On a maximum or saddle with no gradient, move a trust radius to break the symmetry.
        step = np.where(flat & (curvature < 0), _TRUST_RAD, step)
        step = np.clip(step, -_TRUST_RAD, _TRUST_RAD)
        keep = ~converged
        a, p, f, b, step, scale = a[keep], p[keep], f[keep], b[keep], step[keep], scale[keep]
        active = active[keep]
        e_old = energy(a, p, f, b)
        trial = a + step
        e_new = energy(trial, p, f, b)
        for _ in range(_HALVINGS):
            rises = e_new > e_old + 1e-15 * scale
            if not rises.any():
                break
            step = np.where(rises, 0.5 * step, step)
            trial = np.where(rises, a + step, trial)
            e_new = np.where(rises, energy(trial, p, f, b), e_new)
        moved = e_new <= e_old + 1e-15 * scale
        alpha[active] = np.where(moved, trial, a)
        # An element that can no longer lower its energy has arrived (to rounding).
        active = active[moved & (np.abs(trial - a) > 1e-15)]
    return alpha.reshape(shape_out)


def equilibrium_angle_deg(
    field_angle_deg: ArrayLike,
    field_T: ArrayLike,
    anisotropy_T: ArrayLike,
    plane: str,
    start_deg: ArrayLike | None = None,
) -> FloatArray:
    """Magnetisation angle (deg, in the plane's convention) of the minimum reached from
    `start_deg` (default: the field direction), elementwise. Where |B| > |B_a| the minimum
    is unique and the start does not matter."""
    phi, field, ba = _reduced(field_angle_deg, field_T, anisotropy_T, plane)
    phi, field, ba = np.broadcast_arrays(phi, field, ba)
    easy = EASY_DIRECTION_DEG[plane]
    start = phi if start_deg is None else np.deg2rad(np.asarray(start_deg, float) - easy)
    start = np.broadcast_to(start, phi.shape).astype(float)
    # Sweeps repeat the same (angle, field, B_a) over currents, channels and temperatures:
    # each distinct state is solved once.
    states = np.column_stack([a.ravel() for a in (phi, field, ba, start)])
    finite = np.all(np.isfinite(states), axis=1)
    alpha = np.full(states.shape[0], np.nan)
    if finite.any():
        unique, inverse = _distinct_rows(states[finite])
        solved = _relax(unique[:, 3], unique[:, 0], unique[:, 1], unique[:, 2])
        alpha[finite] = solved[inverse]
    return np.rad2deg(alpha.reshape(phi.shape)) + easy


def _distinct_rows(rows: FloatArray) -> tuple[FloatArray, NDArray[np.int64]]:
    """Distinct rows and each row's index among them (a lexsort: much faster than
    np.unique(axis=0) on floats)."""
    order = np.lexsort(rows.T[::-1])
    ordered = rows[order]
    new = np.ones(len(rows), bool)
    new[1:] = np.any(ordered[1:] != ordered[:-1], axis=1)
    labels = np.cumsum(new) - 1
    inverse = np.empty(len(rows), np.int64)
    inverse[order] = labels
    return ordered[new], inverse


def follow_sweeps(
    field_angle_deg: ArrayLike,
    field_T: ArrayLike,
    anisotropy_T: ArrayLike,
    plane: str,
    sweep: ArrayLike,
    order: ArrayLike,
) -> FloatArray:
    """Magnetisation angle (deg) of every row, each sweep followed in its measured order.

    `sweep[i]` names the sweep of row i (rows of one sweep share field and anisotropy, and
    may differ in angle), `order[i]` its position in time. The first point of a sweep starts
    from the field direction nudged towards the second point's (so a field along a hard axis
    picks the side the sweep goes to); each later point starts from the previous state, the
    field turned in steps of at most MAX_STEP_DEG. All sweeps advance together, one position
    at a time, so the cost grows with the longest sweep, not with their number.
    """
    angle = np.asarray(field_angle_deg, dtype=float)
    phi, field, ba = _reduced(angle, field_T, anisotropy_T, plane)
    phi, field, ba = (np.broadcast_to(v, angle.shape).astype(float) for v in (phi, field, ba))
    sweep_codes, sweep_index = np.unique(np.asarray(sweep), return_inverse=True)
    sweep_index = sweep_index.ravel()
    rows = np.lexsort((np.asarray(order, dtype=float), sweep_index))
    sorted_sweep = sweep_index[rows]
    starts = np.searchsorted(sorted_sweep, np.arange(sweep_codes.size))
    position = np.arange(rows.size) - starts[sorted_sweep]
    n_sweeps, length = sweep_codes.size, int(position.max()) + 1 if rows.size else 0
    grid = np.full((n_sweeps, length), -1, dtype=np.int64)
    grid[sorted_sweep, position] = rows

    result = np.full(angle.shape, np.nan)
    state = np.zeros(n_sweeps)
    previous_phi = np.zeros(n_sweeps)
    for k in range(length):
        present = grid[:, k] >= 0
        index = grid[present, k]
        target = phi[index]
        f, b = field[index], ba[index]
        if k == 0:
            nudge = np.zeros_like(target)
            if length > 1:
                following = grid[present, 1]
                has_next = following >= 0
                turn = np.where(has_next, phi[np.where(has_next, following, 0)] - target, 0.0)
                nudge = 1e-3 * np.sign(np.sin(turn))
            current = _relax(target + nudge, target, f, b)
        else:
            current = state[present]
            from_phi = previous_phi[present]
            steps = int(np.ceil(np.max(np.abs(np.rad2deg(target - from_phi))) / MAX_STEP_DEG))
            for s in range(1, max(steps, 1) + 1):
                between = from_phi + (target - from_phi) * s / max(steps, 1)
                current = _relax(current, between, f, b)
        state[present] = current
        previous_phi[present] = target
        result[index] = current
    return np.rad2deg(result) + EASY_DIRECTION_DEG[plane]


def magnetisation_components(alpha_deg: ArrayLike, plane: str) -> dict[str, FloatArray]:
    """(m_x, m_y, m_z) of the magnetisation angle in the plane's convention."""
    alpha = np.deg2rad(np.asarray(alpha_deg, dtype=float))
    c, s, zero = np.cos(alpha), np.sin(alpha), np.zeros_like(alpha)
    if plane == "xy":
        return {"m_x": c, "m_y": s, "m_z": zero}
    if plane == "zx":
        return {"m_x": s, "m_y": zero, "m_z": c}
    if plane == "zy":
        return {"m_x": zero, "m_y": s, "m_z": c}
    raise ValueError(f"unknown rotation plane {plane!r}; valid: xy, zx, zy")
