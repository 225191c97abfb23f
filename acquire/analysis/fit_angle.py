"""Harmonic fits of angle sweeps, their named amplitudes per rotation plane, mounting offset.

Angle conventions (the field saturates the magnetisation m, so m follows the field):
xy: phi in the film plane from the current direction x towards y; zy: theta from the film
normal z towards y; zx: theta from z towards x.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.analysis.fit_context import RunContext
from acquire.analysis.fit_groups import distinct_per_group, group_ids, group_mean, keep_groups
from acquire.analysis.fit_rows import coefficient_rows, empty_fits_table, tidy_rows
from acquire.analysis.fits import (
    HARMONIC_TERMS,
    GroupedLinearFit,
    fit_harmonics_by_group,
    ratio_with_error,
    second_harmonic_offset_deg,
)

MIN_ANGLES: int = 5  # five harmonic coefficients
ANGLE_KEYS: tuple[str, ...] = ("temperature_K", "field_T", "current_A", "channel")
HARMONIC_MODEL: str = "c0 + a1 cos(phi) + b1 sin(phi) + a2 cos(2phi) + b2 sin(2phi)"


@dataclass(frozen=True)
class AngleResult:
    rows: pd.DataFrame
    amplitudes: pd.DataFrame  # one row per angle group: keys + named amplitudes and errors


def angle_fits(points: pd.DataFrame, context: RunContext, apply_offset: bool) -> AngleResult:
    """Harmonic fits of resistance and unidirectional part per (T, field, current, channel)."""
    swept = points[np.isfinite(points["angle_deg"].to_numpy())]
    ids, keys = group_ids(swept, ANGLE_KEYS)
    angle = swept["angle_deg"].to_numpy(float)
    n_angles = distinct_per_group(ids, angle, len(keys))
    ids, keys = keep_groups(ids, keys, n_angles >= MIN_ANGLES)
    if keys.empty:
        return AngleResult(empty_fits_table(), pd.DataFrame(columns=[*ANGLE_KEYS]))

    kinds = np.array([context.channel_kind(str(name)) for name in keys["channel"]])
    longitudinal = kinds == "longitudinal"
    resistance = _fit_quantity(swept, ids, len(keys), angle, "resistance_ohm")
    offset, offset_err = _mounting_offsets(resistance, longitudinal, context.rotation_plane)

    frames: list[pd.DataFrame] = []
    applied = 0.0
    if apply_offset:
        applied, applied_err, note = _run_offset(offset, offset_err, longitudinal)
        frames.append(
            tidy_rows(
                pd.DataFrame(index=range(1)),
                "angle",
                "angle_offset_applied_deg",
                applied,
                applied_err,
                "deg",
                np.nan,
                int(np.isfinite(offset).sum()),
                "weighted mean of the groups' angle_offset_deg",
                note,
            )
        )
        resistance = _fit_quantity(swept, ids, len(keys), angle - applied, "resistance_ohm")
    unidirectional = _fit_quantity(swept, ids, len(keys), angle - applied, "unidirectional_ohm")

    angle_name = "phi" if context.rotation_plane == "xy" else "theta"
    model = HARMONIC_MODEL.replace("phi", angle_name)
    for label, fit in (("resistance", resistance), ("unidirectional", unidirectional)):
        for index, term in enumerate(HARMONIC_TERMS):
            frames.append(
                coefficient_rows(keys, "angle", f"{label}_{term}", fit, index, "ohm", model)
            )
    offset_note = "from raw angles; +-90 deg ambiguity folded into (-45, 45]"
    has_offset = np.isfinite(offset)
    frames.append(
        tidy_rows(
            keys[has_offset],
            "angle",
            "angle_offset_deg",
            offset[has_offset],
            offset_err[has_offset],
            "deg",
            resistance.reduced_chi2[has_offset],
            resistance.n_points[has_offset],
            "a2 cos 2phi + b2 sin 2phi = A cos 2(phi - phi0)",
            offset_note,
        )
    )
    named, amplitudes = _named_amplitudes(keys, kinds, resistance, unidirectional, context)
    amplitudes["current_density_A_m2"] = group_mean(
        ids, swept["current_density_A_m2"].to_numpy(float), len(keys)
    )
    frames.extend(named)
    rows = pd.concat([frame for frame in frames if not frame.empty], ignore_index=True)
    return AngleResult(rows, amplitudes)


def _fit_quantity(
    frame: pd.DataFrame,
    ids: NDArray[np.int64],
    n_groups: int,
    angle: NDArray[np.float64],
    column: str,
) -> GroupedLinearFit:
    # One sweep shares current, channel, temperature and field, hence one noise level.
    return fit_harmonics_by_group(
        angle,
        frame[column].to_numpy(float),
        frame[f"{column}_err"].to_numpy(float),
        ids,
        n_groups,
        pool_errors=True,
    )


def _mounting_offsets(
    resistance: GroupedLinearFit, longitudinal: NDArray[np.bool_], plane: str
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Offset from the 2phi phase: of R_xx in every plane, of the planar Hall R_xy in xy."""
    cov = resistance.covariance
    cos2, sin2 = resistance.coefficients[:, 3], resistance.coefficients[:, 4]
    from_longitudinal = second_harmonic_offset_deg(
        cos2, sin2, cov[:, 3, 3], cov[:, 4, 4], cov[:, 3, 4], reference_deg=0.0
    )
    from_hall = second_harmonic_offset_deg(
        cos2, sin2, cov[:, 3, 3], cov[:, 4, 4], cov[:, 3, 4], reference_deg=45.0
    )
    usable_hall = ~longitudinal & (plane == "xy")
    from_longitudinal = (from_longitudinal[0], from_longitudinal[1] * resistance.birge_factor)
    from_hall = (from_hall[0], from_hall[1] * resistance.birge_factor)
    offset = np.where(
        longitudinal, from_longitudinal[0], np.where(usable_hall, from_hall[0], np.nan)
    )
    error = np.where(
        longitudinal, from_longitudinal[1], np.where(usable_hall, from_hall[1], np.nan)
    )
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


def _named_amplitudes(
    keys: pd.DataFrame,
    kinds: NDArray[np.str_],
    resistance: GroupedLinearFit,
    unidirectional: GroupedLinearFit,
    context: RunContext,
) -> tuple[list[pd.DataFrame], pd.DataFrame]:
    plane = context.rotation_plane
    c0, c0_err = resistance.coefficients[:, 0], resistance.scaled_errors[:, 0]
    longitudinal = kinds == "longitudinal"
    frames: list[pd.DataFrame] = []
    amplitudes = keys.copy()
    amplitudes["kind"] = kinds
    amplitudes["resistance_c0"] = c0
    amplitudes["resistance_c0_err"] = c0_err

    def add(
        mask: NDArray[np.bool_],
        quantity: str,
        value: Any,
        error: Any,
        unit: str,
        fit: GroupedLinearFit,
        model: str,
        note: str = "",
    ) -> None:
        value = np.asarray(value, dtype=float)
        error = np.asarray(error, dtype=float)
        frames.append(
            tidy_rows(
                keys[mask],
                "angle",
                quantity,
                value[mask],
                error[mask],
                unit,
                fit.reduced_chi2[mask],
                fit.n_points[mask],
                model,
                note,
            )
        )
        amplitudes[quantity] = np.where(mask, value, np.nan)
        amplitudes[f"{quantity}_err"] = np.where(mask, error, np.nan)

    cos1, sin1 = 1, 2
    cos2, sin2 = 3, 4
    r_coef, r_err = resistance.coefficients, resistance.scaled_errors
    if plane == "zy":
        mr_name, mr_sign, mr_model = "smr", 2.0, "smr_ohm = 2*a2 = R(m||z) - R(m||y)"
    elif plane == "zx":
        mr_name, mr_sign, mr_model = "amr", -2.0, "amr_ohm = -2*a2 = R(m||x) - R(m||z)"
    else:
        mr_name, mr_sign, mr_model = "amr", 2.0, "amr_ohm = 2*a2 = R(m||x) - R(m||y)"
    mr = mr_sign * r_coef[:, cos2]
    mr_err = abs(mr_sign) * r_err[:, cos2]
    add(longitudinal, f"{mr_name}_ohm", mr, mr_err, "ohm", resistance, mr_model)
    mr_ratio = ratio_with_error(mr, mr_err, c0, c0_err)
    add(longitudinal, f"{mr_name}_ratio", *mr_ratio, "1", resistance, f"{mr_name}_ohm / c0")

    umr, umr_err = unidirectional.coefficients[:, sin1], unidirectional.scaled_errors[:, sin1]
    umr_note = "expected ~0: m_y = 0 in the zx plane" if plane == "zx" else ""
    umr_model = "umr_ohm = b1 of unidirectional_ohm (m_y part)"
    add(longitudinal, "umr_ohm", umr, umr_err, "ohm", unidirectional, umr_model, umr_note)
    umr_ratio = ratio_with_error(umr, umr_err, c0, c0_err)
    add(longitudinal, "umr_ratio", *umr_ratio, "1", unidirectional, "umr_ohm / c0", umr_note)

    transverse = ~longitudinal
    if plane == "xy":
        hall, hall_err = 2.0 * r_coef[:, sin2], 2.0 * r_err[:, sin2]
        add(
            transverse,
            "planar_hall_ohm",
            hall,
            hall_err,
            "ohm",
            resistance,
            "R_xy = planar_hall_ohm/2 * sin 2phi (2*b2)",
        )
    else:
        add(
            transverse,
            "anomalous_hall_ohm",
            r_coef[:, cos1],
            r_err[:, cos1],
            "ohm",
            resistance,
            "R_xy = anomalous_hall_ohm * cos(theta) (a1; m_z part)",
        )
    return frames, amplitudes
