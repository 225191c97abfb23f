"""Figures of the sweeps: against angle, current density and field."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from acquire.analysis.angle_conventions import ANISOTROPY_QUANTITY
from acquire.analysis.figure_style import (
    MAX_SERIES,
    SERIES_COLOURS,
    fit_rows,
    new_figure,
    ohm_scale,
    pick_series,
    rows_matching,
    series_label,
)
from acquire.analysis.fit_magnetisation import angle_fit_curve
from acquire.analysis.fit_tables import RunContext
from acquire.analysis.fits import FIELD_FORMS, field_inverse, field_linear

ANGLE_GROUP_KEYS = ("temperature_K", "field_T", "current_A", "channel")


def angle_figure(points: pd.DataFrame, fits: pd.DataFrame, context: RunContext) -> Any:
    groups = fit_rows(fits, "angle", "resistance_c0")
    if groups.empty:
        return "no angle sweep with at least five angles"
    applied = fits[fits["quantity"] == "angle_offset_applied_deg"]["value"]
    offset = float(applied.iloc[0]) if len(applied) else 0.0
    channels = list(dict.fromkeys(groups["channel"]))[:3]
    figure, axes = new_figure(2, len(channels))
    angle_name = "φ" if context.rotation_plane == "xy" else "θ"
    fine = np.linspace(0, 360, 361)
    for column, channel in enumerate(channels):
        of_channel = groups[groups["channel"] == channel]
        chosen = pick_series(of_channel.sort_values(list(ANGLE_GROUP_KEYS)), 4)
        for panel, label in ((0, "resistance"), (1, "unidirectional")):
            axis = axes[panel, column]
            selected = [rows_matching(points, row, ANGLE_GROUP_KEYS)
                        for _, row in chosen.iterrows()]
            values = np.concatenate(
                [points.loc[mask, f"{label}_ohm"].to_numpy(float) for mask in selected]
            )
            if panel == 0:
                factor, unit, shift = 1.0, "Ω", 0.0
            else:
                factor, unit = ohm_scale(values)
                shift = 0.0
            for colour, (_, row), mask in zip(SERIES_COLOURS, chosen.iterrows(), selected):
                data = points[mask].sort_values("angle_deg")
                coefficients = [
                    _coefficient(fits, row, f"{label}_{term}")
                    for term in ("c0", "cos1", "sin1", "cos2", "sin2")
                ]
                axis.errorbar(
                    data["angle_deg"],
                    (data[f"{label}_ohm"] - shift) * factor,
                    yerr=data[f"{label}_ohm_err"] * factor,
                    fmt="o",
                    markersize=3.5,
                    color=colour,
                    label=series_label(row, ("temperature_K", "field_T", "current_A")),
                    elinewidth=0.8,
                )
                if np.all(np.isfinite(coefficients)):
                    # The coefficients are in the magnetisation angle of the thin film.
                    plane = context.rotation_plane
                    anisotropy = _coefficient(fits, row, ANISOTROPY_QUANTITY[plane])
                    curve = angle_fit_curve(fine - offset, float(row["field_T"]), anisotropy,
                                            plane, coefficients)
                    axis.plot(fine, (curve - shift) * factor, color=colour, linewidth=1.2)
            axis.set_xlabel(f"angle {angle_name} (deg)")
            axis.set_xticks(np.arange(0, 361, 90))
            name = "resistance R" if panel == 0 else "unidirectional part"
            axis.set_ylabel(f"{name} ({unit})")
            axis.set_title(f"{channel}: {name}", fontsize=10)
        axes[1, column].legend(fontsize=7, loc="best")
    figure.suptitle("points with error bars; lines are the harmonic fits", fontsize=9)
    return figure


def _coefficient(fits: pd.DataFrame, row: pd.Series, quantity: str) -> float:
    rows = fit_rows(fits, "angle", quantity)
    found = rows[rows_matching(rows, row, ANGLE_GROUP_KEYS)]
    return float(found["value"].iloc[0]) if len(found) else float("nan")


# --- current ---------------------------------------------------------------------------------

CURRENT_GROUP_KEYS = ("temperature_K", "field_T", "angle_deg", "channel")


def current_figure(points: pd.DataFrame, fits: pd.DataFrame) -> Any:
    slopes = fits[
        (fits["analysis"] == "current") & fits["quantity"].str.startswith("umr_ratio_per")
    ]
    slopes = slopes[np.isfinite(slopes["value"]) & (slopes["error"] > 0)]
    if slopes.empty:
        return "no group with at least three currents"
    by_density = slopes["quantity"].iloc[0].endswith("A_m2")
    significance = (slopes["value"] / slopes["error"]).abs()
    chosen = slopes.loc[significance.sort_values(ascending=False).index[:MAX_SERIES]]
    chosen = chosen.sort_values(list(CURRENT_GROUP_KEYS))
    from_amplitudes = bool(chosen["angle_deg"].isna().all() and points["angle_deg"].notna().any())
    figure, axes = new_figure(1, 1, width=6.4, height=4.2)
    axis = axes[0, 0]
    largest_x = 0.0
    for colour, (_, row) in zip(SERIES_COLOURS, chosen.iterrows()):
        x, y, y_err = _current_series(points, fits, row, from_amplitudes, by_density)
        if x.size == 0:
            continue
        largest_x = max(largest_x, float(np.nanmax(x)))
        label = series_label(row, ("temperature_K", "field_T", "angle_deg", "channel"))
        axis.errorbar(
            x,
            y * 1e6,
            yerr=y_err * 1e6,
            fmt="o",
            markersize=4,
            color=colour,
            label=label,
            elinewidth=0.8,
        )
        line_x = np.linspace(0, float(np.nanmax(x)) * 1.05, 50)
        axis.plot(line_x, row["value"] * line_x * 1e6, color=colour, linewidth=1.2)
    axis.axhline(0, color="#9aa0a6", linewidth=0.7)
    axis.set_xlim(0, largest_x * 1.08 if largest_x > 0 else 1)
    axis.set_xlabel(
        "current density j in the carrier (10¹¹ A/m²)" if by_density else "current (mA)"
    )
    what = "UMR amplitude / R" if from_amplitudes else "unidirectional ratio"
    axis.set_ylabel(f"{what} (ppm)")
    axis.set_title("lines: fits through the origin, U/R = r·j", fontsize=9)
    axis.legend(fontsize=7)
    return figure


def _current_series(
    points: pd.DataFrame,
    fits: pd.DataFrame,
    row: pd.Series,
    from_amplitudes: bool,
    by_density: bool,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if from_amplitudes:
        ratios = fit_rows(fits, "angle", "umr_ratio")
        ratios = ratios[rows_matching(ratios, row, ("temperature_K", "field_T", "channel"))]
        ratios = ratios.sort_values("current_A")
        current = ratios["current_A"].to_numpy(float)
        density = _density_for_currents(points, current)
        x = density / 1e11 if by_density else current * 1e3
        return x, ratios["value"].to_numpy(float), ratios["error"].to_numpy(float)
    data = points[rows_matching(points, row, CURRENT_GROUP_KEYS)].sort_values("current_A")
    x = data["current_density_A_m2"] / 1e11 if by_density else data["current_A"] * 1e3
    return (
        x.to_numpy(float),
        data["unidirectional_ratio"].to_numpy(float),
        data["unidirectional_ratio_err"].to_numpy(float),
    )


def _density_for_currents(points: pd.DataFrame, currents: np.ndarray) -> np.ndarray:
    table = points.groupby("current_A")["current_density_A_m2"].mean()
    return table.reindex(currents).to_numpy(float)


# --- field -----------------------------------------------------------------------------------

FIELD_GROUP_KEYS = ("temperature_K", "angle_deg", "current_A", "channel")


def field_figure(points: pd.DataFrame, fits: pd.DataFrame) -> Any:
    independent = fit_rows(fits, "field", "umr_field_independent_ohm")
    if independent.empty:
        return "no group with at least three fields"
    groups = independent.drop_duplicates(list(FIELD_GROUP_KEYS))
    # The largest current has the largest UMR: show it across temperatures and angles.
    largest = groups["current_A"].max()
    if pd.notna(largest):
        groups = groups[np.isclose(groups["current_A"].to_numpy(float), largest)]
    chosen = pick_series(groups.sort_values(list(FIELD_GROUP_KEYS)))
    from_amplitudes = bool(chosen["angle_deg"].isna().all() and points["angle_deg"].notna().any())
    series = [_field_series(points, fits, row, from_amplitudes) for _, row in chosen.iterrows()]
    factor, unit = ohm_scale(np.concatenate([values for _, values, _ in series]))
    figure, axes = new_figure(1, 1, width=6.4, height=4.2)
    axis = axes[0, 0]
    for colour, (_, row), (field_T, values, errors) in zip(
        SERIES_COLOURS, chosen.iterrows(), series
    ):
        label = series_label(row, ("temperature_K", "angle_deg", "current_A", "channel"))
        axis.errorbar(
            field_T,
            values * factor,
            yerr=errors * factor,
            fmt="o",
            markersize=4,
            color=colour,
            label=label,
            elinewidth=0.8,
        )
        curve_x, curve_y = _field_curve(fits, row, field_T)
        axis.plot(curve_x, curve_y * factor, color=colour, linewidth=1.2)
    what = "UMR amplitude" if from_amplitudes else "unidirectional part"
    axis.set_xlabel("field μ₀H (T)")
    axis.set_ylabel(f"{what} ({unit})")
    model = chosen["model"].iloc[0]
    axis.set_title(f"lines: {model}", fontsize=9)
    axis.legend(fontsize=7)
    return figure


def _field_series(
    points: pd.DataFrame, fits: pd.DataFrame, row: pd.Series, from_amplitudes: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if from_amplitudes:
        amplitudes = fit_rows(fits, "angle", "umr_ohm")
        data = amplitudes[rows_matching(amplitudes, row, ("temperature_K", "current_A", "channel"))]
        data = data.sort_values("field_T")
        return (
            data["field_T"].to_numpy(float),
            data["value"].to_numpy(float),
            data["error"].to_numpy(float),
        )
    data = points[rows_matching(points, row, FIELD_GROUP_KEYS)].sort_values("field_T")
    return (
        data["field_T"].to_numpy(float),
        data["unidirectional_ohm"].to_numpy(float),
        data["unidirectional_ohm_err"].to_numpy(float),
    )


def _field_curve(
    fits: pd.DataFrame, row: pd.Series, field_T: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    rows = fits[(fits["analysis"] == "field") & rows_matching(fits, row, FIELD_GROUP_KEYS)]
    values = dict(zip(rows["quantity"], rows["value"]))
    finite = field_T[np.isfinite(field_T)]
    if finite.size == 0:
        return np.array([]), np.array([])
    sign = -1.0 if finite.max() <= 0 else 1.0
    magnitude = np.linspace(np.abs(finite).min(), np.abs(finite).max(), 200)
    if "umr_field_scale_T" in values:
        curve = field_inverse(
            magnitude,
            values["umr_field_independent_ohm"],
            values["umr_field_dependent_ohm"],
            values["umr_field_scale_T"],
        )
    elif "umr_field_slope_ohm_per_T" in values:
        curve = field_linear(
            magnitude, values["umr_field_independent_ohm"], values["umr_field_slope_ohm_per_T"]
        )
    else:
        return np.array([]), np.array([])
    assert set(FIELD_FORMS) == {"linear", "inverse"}  # keep the curves in step with the forms
    return sign * magnitude, curve


# --- temperature -----------------------------------------------------------------------------


