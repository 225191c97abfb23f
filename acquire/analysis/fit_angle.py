"""Angle sweeps fitted on the magnetisation angle, their named amplitudes per plane, offset.

Angle conventions (docs/conventions.md): xy: phi in the film plane from the current
direction x towards y; zy: theta from the film normal z towards y; zx: theta from z towards
x. Below saturation m lags the field: every sweep is fitted against the magnetisation angle
of the thin-film equilibrium (fit_magnetisation.py), with the plane's anisotropy field fitted
from the sweep itself or given (FitOptions.anisotropy_T). angle_conventions.py says which
coefficient is which named amplitude in each plane.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.analysis.angle_conventions import ANISOTROPY_QUANTITY
from acquire.analysis.angle_named import named_amplitudes
from acquire.analysis.fit_context import RunContext
from acquire.analysis.fit_groups import distinct_per_group, group_ids, group_mean, keep_groups
from acquire.analysis.fit_magnetisation import (
    MagnetisationFit,
    fit_on_magnetisation,
    hold_anisotropy,
)
from acquire.analysis.fit_rows import (
    coefficient_rows,
    empty_fits_table,
    fit_note,
    join_notes,
    tidy_rows,
)
from acquire.analysis.fit_thermal import thermal_separation
from acquire.analysis.fits import (
    HARMONIC_TERMS,
    GroupedLinearFit,
    fit_linear_by_group,
    harmonic_design,
    second_harmonic_offset_deg,
)

MIN_ANGLES: int = 5  # five harmonic coefficients
POOR_FIT_CHI2: float = 3.0
ANGLE_KEYS: tuple[str, ...] = ("temperature_K", "field_T", "current_A", "channel")


def harmonic_model(name: str) -> str:
    return (f"c0 + a1 cos({name}) + b1 sin({name}) + a2 cos(2{name}) + b2 sin(2{name}), "
            f"{name} the magnetisation angle")


@dataclass(frozen=True)
class AngleResult:
    rows: pd.DataFrame
    amplitudes: pd.DataFrame  # one row per angle group: keys + named amplitudes and errors


def angle_fits(
    points: pd.DataFrame,
    context: RunContext,
    apply_offset: bool,
    anisotropy_T: float | None = None,
    anisotropy_from_hall: bool = False,
) -> AngleResult:
    """Fits of resistance and unidirectional part per (T, field, current, channel) sweep.

    anisotropy_T holds the plane's anisotropy field fixed; anisotropy_from_hall (zx, zy)
    gives each longitudinal sweep the B_eff fitted to the transverse sweep measured with it,
    whose anomalous Hall signal is m_z itself (R_xy = R_AHE m_z)."""
    swept = points[np.isfinite(points["angle_deg"].to_numpy())]
    ids, keys = group_ids(swept, ANGLE_KEYS)
    angle = swept["angle_deg"].to_numpy(float)
    n_angles = distinct_per_group(ids, angle, len(keys))
    ids, keys = keep_groups(ids, keys, n_angles >= MIN_ANGLES)
    if keys.empty:
        return AngleResult(empty_fits_table(), pd.DataFrame(columns=[*ANGLE_KEYS]))

    plane = context.rotation_plane
    kinds = np.array([context.channel_kind(str(name)) for name in keys["channel"]])
    longitudinal = kinds == "longitudinal"
    field = swept["field_T"].to_numpy(float)
    order = swept["point"].to_numpy(float) if "point" in swept else np.arange(len(swept), 0.0)

    held_from = np.full(len(keys), "", dtype=object)

    def fit_resistance(angles: NDArray[np.float64]) -> MagnetisationFit:
        values, errors = _pooled(swept, "resistance_ohm", ids, len(keys))
        fitted = fit_on_magnetisation(
            angles, field, values, errors, ids, len(keys), plane, order, anisotropy_T
        )
        if not anisotropy_from_hall or anisotropy_T is not None or plane == "xy":
            return fitted
        held, held_err, sources = _from_hall(keys, kinds, fitted)
        held_from[:] = sources
        return hold_anisotropy(fitted, held, held_err, angles, field, values, errors, ids,
                               plane, order)

    resistance = fit_resistance(angle)
    offset, offset_err = _mounting_offsets(resistance.fit, longitudinal, plane)
    frames: list[pd.DataFrame] = []
    applied = 0.0
    if apply_offset:
        applied, applied_err, note = _run_offset(offset, offset_err, longitudinal)
        frames.append(
            tidy_rows(pd.DataFrame(index=range(1)), "angle", "angle_offset_applied_deg",
                      applied, applied_err, "deg", np.nan, int(np.isfinite(offset).sum()),
                      "weighted mean of the groups' angle_offset_deg", note)
        )
        resistance = fit_resistance(angle - applied)
    unidirectional = _fit_unidirectional(swept, ids, len(keys), resistance)

    name = "phi_M" if plane == "xy" else "theta_M"
    model = harmonic_model(name)
    group_notes = _group_notes(resistance, keys, plane, anisotropy_T, ids, held_from)
    for label, fit in (("resistance", resistance.fit), ("unidirectional", unidirectional)):
        for index, term in enumerate(HARMONIC_TERMS):
            notes = [join_notes(a, b) for a, b in zip(fit_note(fit), group_notes)]
            frames.append(coefficient_rows(keys, "angle", f"{label}_{term}", fit, index, "ohm",
                                           model, np.array(notes, dtype=object)))
    frames.append(_anisotropy_rows(keys, resistance, plane, anisotropy_T, group_notes))
    has_offset = np.isfinite(offset)
    frames.append(
        tidy_rows(keys[has_offset], "angle", "angle_offset_deg", offset[has_offset],
                  offset_err[has_offset], "deg", resistance.fit.reduced_chi2[has_offset],
                  resistance.fit.n_points[has_offset],
                  "a2 cos 2M + b2 sin 2M = A cos 2(M - M0)",
                  "+-90 deg ambiguity folded into (-45, 45]", resistance.fit.dof[has_offset])
    )
    named, amplitudes = named_amplitudes(keys, kinds, resistance.fit, unidirectional, plane,
                                         group_notes)
    amplitudes["current_density_A_m2"] = group_mean(
        ids, swept["current_density_A_m2"].to_numpy(float), len(keys)
    )
    amplitudes["anisotropy_T"] = resistance.anisotropy_T
    frames.extend(named)
    frames.append(thermal_separation(amplitudes, context))
    rows = pd.concat([frame for frame in frames if not frame.empty], ignore_index=True)
    return AngleResult(rows, amplitudes)


def _pooled(
    frame: pd.DataFrame, column: str, ids: NDArray[np.int64], n_groups: int
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Values and the group's RMS error for every row: one sweep shares current, channel,
    temperature and field, hence one noise level, and a standard error over a few cycles
    is a poor estimate of it point by point."""
    values = frame[column].to_numpy(float)
    errors = frame[f"{column}_err"].to_numpy(float)
    member = (ids >= 0) & np.isfinite(errors) & (errors > 0)
    total = np.bincount(ids[member], weights=errors[member] ** 2, minlength=n_groups)
    count = np.bincount(ids[member], minlength=n_groups)
    all_count = np.bincount(ids[ids >= 0], minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        rms = np.where((count == all_count) & (count > 0), np.sqrt(total / count), np.nan)
    return values, np.where(ids >= 0, rms[np.clip(ids, 0, None)], np.nan)


def _fit_unidirectional(
    frame: pd.DataFrame, ids: NDArray[np.int64], n_groups: int, resistance: MagnetisationFit
) -> GroupedLinearFit:
    # The same magnetisation angles and exclusions as the sweep's resistance fit.
    values, errors = _pooled(frame, "unidirectional_ohm", ids, n_groups)
    used = np.where(resistance.excluded, -1, ids)
    return fit_linear_by_group(harmonic_design(resistance.alpha_deg), values, errors, used,
                               n_groups)


def _group_notes(
    resistance: MagnetisationFit,
    keys: pd.DataFrame,
    plane: str,
    given: float | None,
    ids: NDArray[np.int64],
    held_from: NDArray[np.object_],
) -> NDArray[np.object_]:
    excluded = np.bincount(ids[(ids >= 0) & resistance.excluded], minlength=len(keys))
    field = np.abs(keys["field_T"].to_numpy(float))
    ba = resistance.anisotropy_T
    notes = []
    for group in range(len(keys)):
        if given is not None:
            source = "given"
        elif held_from[group]:
            source = f"from {held_from[group]}'s anomalous Hall (m_z = R_xy/R_AHE)"
        elif resistance.determined[group]:
            source = "fitted"
        else:
            source = "WARNING: not determined by the sweep, held at the grid's best"
        quantity = ANISOTROPY_QUANTITY[plane]
        parts = [f"on the magnetisation angle, {quantity} {ba[group]:.4g} T {source}"]
        if excluded[group]:
            parts.append(f"{excluded[group]} point(s) left out (two minima)")
        rival = np.nan if resistance.rival_T is None else resistance.rival_T[group]
        if np.isfinite(rival):
            parts.append(
                f"WARNING: not determined: {quantity} {rival:.4g} T fits about as well (the "
                "field is too low to tell a lagging m from a smaller amplitude); give "
                "--anisotropy or, out of plane, --anisotropy-from-hall"
            )
        if np.isfinite(field[group]) and field[group] <= abs(ba[group]):
            # Below B_a the amplitudes rest on the model; a poor fit there is a warning.
            poor = not resistance.fit.reduced_chi2[group] < POOR_FIT_CHI2
            parts.append(
                f"{'WARNING: ' if poor else ''}|B| = {field[group]:.3g} T is below the "
                f"anisotropy field {abs(ba[group]):.3g} T: m does not follow the field, the "
                "amplitudes rest on the thin-film model"
                + (f" and its fit is poor (reduced chi2 > {POOR_FIT_CHI2:g})" if poor else "")
            )
        notes.append(join_notes(*parts))
    return np.array(notes, dtype=object)


def _from_hall(
    keys: pd.DataFrame, kinds: NDArray[np.str_], fitted: MagnetisationFit
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.object_]]:
    """Per group, the B_a of the transverse sweep at the same temperature, field and current
    (NaN where none, or for the transverse sweeps themselves)."""
    held = np.full(len(keys), np.nan)
    held_err = np.full(len(keys), np.nan)
    sources = np.full(len(keys), "", dtype=object)
    pair = ["temperature_K", "field_T", "current_A"]
    labels = ["|".join(str(value) for value in row) for row in keys[pair].itertuples(index=False)]
    hall: dict[str, int] = {}
    for group in np.flatnonzero((kinds == "transverse") & fitted.determined):
        hall.setdefault(labels[group], int(group))
    for group in np.flatnonzero(kinds == "longitudinal"):
        source = hall.get(labels[group])
        if source is not None:
            held[group] = fitted.anisotropy_T[source]
            held_err[group] = fitted.anisotropy_err_T[source]
            sources[group] = str(keys["channel"].iloc[source])
    return held, held_err, sources


def _anisotropy_rows(
    keys: pd.DataFrame,
    resistance: MagnetisationFit,
    plane: str,
    given: float | None,
    notes: NDArray[np.object_],
) -> pd.DataFrame:
    model = (
        "e = -(B_k/2) cos^2 phi_M - B cos(phi_M - phi)" if plane == "xy"
        else "e = (B_eff/2) cos^2 theta_M - B cos(theta_M - theta)"
    )
    return tidy_rows(keys, "angle", ANISOTROPY_QUANTITY[plane], resistance.anisotropy_T,
                     resistance.anisotropy_err_T, "T", resistance.fit.reduced_chi2,
                     resistance.fit.n_points, model, notes)


def _mounting_offsets(
    resistance: GroupedLinearFit, longitudinal: NDArray[np.bool_], plane: str
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Offset from the 2M phase: of R_xx in every plane, of the planar Hall R_xy in xy."""
    cov = resistance.covariance
    cos2, sin2 = resistance.coefficients[:, 3], resistance.coefficients[:, 4]
    from_longitudinal = second_harmonic_offset_deg(
        cos2, sin2, cov[:, 3, 3], cov[:, 4, 4], cov[:, 3, 4], reference_deg=0.0
    )
    from_hall = second_harmonic_offset_deg(
        cos2, sin2, cov[:, 3, 3], cov[:, 4, 4], cov[:, 3, 4], reference_deg=45.0
    )
    usable_hall = ~longitudinal & (plane == "xy")
    factor = 1.0  # errors are not inflated by the chi^2 (fit_quality)
    offset = np.where(
        longitudinal, from_longitudinal[0], np.where(usable_hall, from_hall[0], np.nan)
    )
    error = np.where(
        longitudinal, from_longitudinal[1], np.where(usable_hall, from_hall[1], np.nan)
    ) * factor
    return offset, error


def _run_offset(
    offset: NDArray[np.float64], error: NDArray[np.float64], longitudinal: NDArray[np.bool_]
) -> tuple[float, float, str]:
    """One mounting offset for the run: inverse-variance mean, longitudinal channels first."""
    usable = np.isfinite(offset) & np.isfinite(error) & (error > 0)
    preferred = usable & longitudinal
    chosen = preferred if preferred.any() else usable
    if not chosen.any():
        return 0.0, math.nan, "no group gave an offset: none applied"
    weight = 1.0 / error[chosen] ** 2
    mean = float(np.sum(weight * offset[chosen]) / weight.sum())
    spread = float(np.std(offset[chosen]))
    note = f"applied to all angle fits; spread over {int(chosen.sum())} groups {spread:.3g} deg"
    return mean, float(1.0 / math.sqrt(weight.sum())), note
