"""UMR against current density: line, line plus cube, ratio, and where linearity ends."""

from __future__ import annotations

import contextlib

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.analysis.fit_context import RunContext
from acquire.analysis.fit_groups import distinct_per_group, group_ids, keep_groups
from acquire.analysis.fit_rows import coefficient_rows, empty_fits_table, join_notes, tidy_rows
from acquire.analysis.fit_source import AnalysisSource
from acquire.analysis.fits import fit_linear_by_group
from acquire.inputs.stack import carrier_density_per_ampere, layers_from_records

MIN_CURRENTS: int = 3
DENSITY_UNIT: float = 1e11  # current densities are fitted in units of 1e11 A/m^2
LINEARITY_SIGMAS: float = 3.0
CURRENT_KEYS: tuple[str, ...] = ("temperature_K", "field_T", "angle_deg", "channel")


def current_abscissa(
    frame: pd.DataFrame, context: RunContext
) -> tuple[NDArray[np.float64], str, float]:
    """The abscissa of current fits, its unit label and its scale factor (value per unit).

    points.csv's current density is used where present, the parallel-resistor model of
    run.json's sample fills the gaps, and when neither is possible the fits fall back to the
    current itself in mA.
    """
    density = frame["current_density_A_m2"].to_numpy(float).copy()
    missing = ~np.isfinite(density)
    if missing.any() and context.layers and context.width_m:
        # An ill-defined stack leaves the gaps empty: the fit then falls back to mA and says so.
        with contextlib.suppress(ValueError, TypeError, KeyError, ZeroDivisionError):
            density[missing] = frame["current_A"].to_numpy(float)[missing] * (
                carrier_density_per_ampere(context.width_m, layers_from_records(context.layers),
                                           context.sheet_resistance_ohm))
    if np.isfinite(density).all():
        return density / DENSITY_UNIT, "1e11 A/m^2", DENSITY_UNIT
    return frame["current_A"].to_numpy(float) * 1e3, "mA", 1e-3


def current_fits(source: AnalysisSource, context: RunContext) -> pd.DataFrame:
    """UMR against current density per (T, field, angle, channel) with >= 3 currents."""
    usable = source.frame[np.isfinite(source.frame["current_A"].to_numpy(float))]
    if usable.empty:
        return empty_fits_table()
    x, x_unit, scale = current_abscissa(usable, context)
    ids, keys = group_ids(usable, CURRENT_KEYS)
    n_currents = distinct_per_group(ids, usable["current_A"].to_numpy(float), len(keys))
    ids, keys = keep_groups(ids, keys, n_currents >= MIN_CURRENTS)
    if keys.empty:
        return empty_fits_table()
    n = len(keys)
    umr = usable["unidirectional_ohm"].to_numpy(float)
    umr_err = usable["unidirectional_ohm_err"].to_numpy(float)
    ratio = usable["unidirectional_ratio"].to_numpy(float)
    ratio_err = usable["unidirectional_ratio_err"].to_numpy(float)

    line = fit_linear_by_group(x, umr, umr_err, ids, n)
    cubic = fit_linear_by_group(np.column_stack([x, x**3]), umr, umr_err, ids, n)
    ratio_line = fit_linear_by_group(x, ratio, ratio_err, ids, n)
    onset, onset_note = _linearity_onset(ids, n, x, umr, umr_err, scale)
    per = f"per {x_unit}"
    by_density = x_unit != "mA"
    ratio_name = "umr_ratio_per_1e11_A_m2" if by_density else "umr_ratio_per_mA"
    frames = [
        coefficient_rows(keys, "current", "umr_slope_ohm", line, 0, f"ohm {per}", "U = k*j"),
        coefficient_rows(
            keys, "current", "umr_linear_ohm", cubic, 0, f"ohm {per}", "U = k1*j + k3*j^3"
        ),
        coefficient_rows(
            keys, "current", "umr_cubic_ohm", cubic, 1, f"ohm per ({x_unit})^3", "U = k1*j + k3*j^3"
        ),
        coefficient_rows(keys, "current", ratio_name, ratio_line, 0, f"1 {per}", "U/R = r*j"),
        tidy_rows(
            keys,
            "current",
            "nonlinear_from_A_m2" if by_density else "nonlinear_from_A",
            onset,
            np.nan,
            "A/m^2" if by_density else "A",
            np.nan,
            line.n_points,
            f"first |U - k_low*j| > {LINEARITY_SIGMAS:g} sigma",
            onset_note,
        ),
    ]
    extra = [f"from {source.origin}"]
    if not by_density:
        extra.append("no current density (no density column, no sample geometry): per mA")
    for frame in frames:
        frame["note"] = [join_notes(old, *extra) for old in frame["note"]]
    return pd.concat(frames, ignore_index=True)


def _linearity_onset(
    ids: NDArray[np.int64],
    n_groups: int,
    x: NDArray[np.float64],
    y: NDArray[np.float64],
    y_err: NDArray[np.float64],
    scale: float,
) -> tuple[NDArray[np.float64], NDArray[np.object_]]:
    """First abscissa (in A/m^2 or A) whose residual from the low-current line exceeds 3 sigma.

    The low-current line goes through the origin and is fitted to the lower half of each
    group's distinct currents (at least two). A point's sigma combines its own error (or the
    low line's residual scatter when errors are missing) with the line's slope error times x;
    both are inflated by the low line's Birge factor when its scatter exceeds its errors.
    """
    valid = (ids >= 0) & np.isfinite(x) & np.isfinite(y)
    frame = pd.DataFrame({"g": np.where(valid, ids, -1), "x": np.abs(x)})
    rank = frame[valid].groupby("g")["x"].rank(method="dense").reindex(frame.index).to_numpy()
    n_distinct = distinct_per_group(np.where(valid, ids, -1), np.abs(x), n_groups)
    n_low = np.maximum(2, np.ceil(n_distinct / 2)).astype(np.int64)
    in_low = valid & (rank <= n_low[np.clip(ids, 0, None)])
    low = fit_linear_by_group(x, y, y_err, np.where(in_low, ids, -1), n_groups)
    slope = low.coefficients[:, 0]
    slope_err = low.scaled_errors[:, 0]
    sum_x2 = np.bincount(ids[in_low], weights=x[in_low] ** 2, minlength=n_groups)
    scatter = np.sqrt(low.covariance[:, 0, 0] * sum_x2)  # s, for unweighted groups

    g = np.clip(ids, 0, None)
    point_sigma = np.where(low.weighted[g], y_err * low.birge_factor[g], scatter[g])
    sigma = np.sqrt(point_sigma**2 + (x * slope_err[g]) ** 2)
    residual = y - slope[g] * x
    off_line = valid & np.isfinite(sigma) & (np.abs(residual) > LINEARITY_SIGMAS * sigma)
    first = np.full(n_groups, np.inf)
    np.minimum.at(first, ids[off_line], np.abs(x[off_line]))
    largest = np.full(n_groups, -np.inf)
    np.maximum.at(largest, ids[valid], np.abs(x[valid]))
    found = np.isfinite(first)
    determined = np.isfinite(slope)
    onset = np.where(found & determined, first * scale, np.nan)
    notes = np.where(
        found,
        "departs from the low-current line here",
        np.char.add("none: linear up to ", np.char.mod("%.3g", largest * scale)),
    ).astype(object)
    notes[~determined] = "not determined: low-current line not fitted"
    return onset, notes
