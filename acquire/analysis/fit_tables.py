"""Assemble the tidy fits table (fits.csv) from points.csv: every analysis the data support.

fits.csv has one row per fitted quantity and group:

    temperature_K, field_T, current_A, angle_deg, channel
        the group's keys; a key is empty when the quantity is not tied to it (angle_deg
        for an angle fit, current_A for a current fit, field_T for a field fit, ...) or when
        the protocol does not sweep that loop
    analysis      angle | current | field | temperature | heating
    quantity      what the row holds (QUANTITY_NOTES lists every name)
    value, error  the fitted value and its standard error (one sigma)
    unit          unit of value and error
    reduced_chi2  chi^2/(n - p) of a weighted fit; empty for an unweighted fit (its errors
                  come from the residual scatter) or when there is no degree of freedom
    chi2_dof      n - p;  p_value  the chance of so large a chi^2 if the model were right
    n_points      points that entered the fit
    n_flagged     flagged points of the group, left out (or kept with include_flagged)
    model         the fitted model as a formula
    note          context and warnings (a row whose note starts with WARNING needs a look)

Each analysis lives in its own module (fit_angle, fit_current, fit_field, fit_temperature,
fit_heating); this one assembles them and keeps the names other code imports from here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from acquire.analysis.angle_conventions import CONVENTION_NOTES
from acquire.analysis.fit_angle import angle_fits
from acquire.analysis.fit_context import (
    FitOptions,
    RunContext,
    normalise_points,
    read_points,
    read_run_context,
)
from acquire.analysis.fit_current import current_fits
from acquire.analysis.fit_field import field_fits
from acquire.analysis.fit_groups import group_ids
from acquire.analysis.fit_heating import heating_fits
from acquire.analysis.fit_noise import pooled_errors, select_points
from acquire.analysis.fit_quality import assess
from acquire.analysis.fit_rows import FIT_COLUMN_NAMES, FIT_COLUMNS, empty_fits_table
from acquire.analysis.fit_source import analysis_source
from acquire.analysis.fit_temperature import temperature_fits
from acquire.analysis.fits import FIELD_FORMS

__all__ = [
    "FIELD_FORMS",
    "FIT_COLUMNS",
    "FIT_COLUMN_NAMES",
    "QUANTITY_NOTES",
    "FitOptions",
    "RunContext",
    "build_fits_table",
    "group_ids",
    "read_fits_table",
    "read_points",
    "read_run_context",
]

QUANTITY_NOTES: dict[str, str] = {
    "resistance_<term>": "harmonic coefficient of resistance_ohm in the magnetisation angle, "
    "term c0, cos1, sin1, cos2, sin2",
    "unidirectional_<term>": "harmonic coefficient of unidirectional_ohm",
    **CONVENTION_NOTES,
    "angle_offset_deg": "sample mounting offset from the 2phi phase, folded into (-45, 45] deg",
    "angle_offset_applied_deg": "run-wide offset subtracted from the angles before fitting",
    "umr_slope_ohm": "unidirectional_ohm = k*j, k per 1e11 A/m^2 (per mA without a density)",
    "umr_linear_ohm, umr_cubic_ohm": "unidirectional_ohm = k1*j + k3*j^3",
    "umr_ratio_per_1e11_A_m2 (umr_ratio_per_mA)": "unidirectional_ratio = r*j",
    "nonlinear_from_A_m2 (nonlinear_from_A)": "first j off the low-current line by > 3 sigma",
    "umr_field_independent_ohm": "UMR part that survives at high field (A)",
    "umr_field_dependent_ohm": "inverse form: UMR part falling with field, its zero-field value C",
    "umr_field_scale_T": "inverse form: field Bs at which that part has halved",
    "umr_field_slope_ohm_per_T": "linear form: slope of UMR against |B|",
    "dR_dT_ohm_per_K": "local slope of the lowest-current resistance against temperature",
    "heating_slope_ohm_per_mA2": "h in R = R0 + h*I^2",
    "(weights)": "the pooled noise model of fit_noise: per (channel, temperature), s/I",
    "temperature_rise_K_per_mA2": "h/(dR/dT)",
    "temperature_rise_at_max_current_K": "h*I_max^2/(dR/dT); note WARNING above the limit",
}


def read_fits_table(path: Path) -> pd.DataFrame:
    """fits.csv back as written: text columns as str (empty, not NaN), numbers as float."""
    text = ("channel", "branch", "analysis", "quantity", "unit", "model", "note")
    table = pd.read_csv(path, dtype={name: str for name in text}, keep_default_na=False)
    for name in FIT_COLUMN_NAMES:
        if name not in table:
            table[name] = "" if name in text else np.nan
        elif name not in text:
            table[name] = pd.to_numeric(table[name].replace("", np.nan), errors="coerce")
    return table[list(FIT_COLUMN_NAMES)]


def build_fits_table(
    points: pd.DataFrame, context: RunContext, options: FitOptions | None = None
) -> pd.DataFrame:
    """Every analysis the data support, as one tidy table (columns FIT_COLUMN_NAMES)."""
    options = options or FitOptions()
    selection = select_points(normalise_points(points), options.include_flagged)
    points = pooled_errors(selection.used)
    angle = angle_fits(points, context, options.angle_offset, options.anisotropy_T,
                       options.anisotropy_from_hall)
    source = analysis_source(points, angle.amplitudes, context)
    temperature = temperature_fits(angle.rows, source, context)
    frames = [
        angle.rows,
        current_fits(source, context),
        field_fits(source, options.field_form, context.rotation_plane),
        temperature,
        heating_fits(source, temperature, context, options),
    ]
    frames = [frame for frame in frames if not frame.empty]
    if not frames:
        return empty_fits_table()
    table = pd.concat(frames, ignore_index=True)[list(FIT_COLUMN_NAMES)]
    table = drop_empty_fits(table)
    table = assess(table, selection.flagged, options.include_flagged, options.inflate_errors)
    for name in ("n_points", "n_flagged"):
        table[name] = table[name].astype(np.int64)
    return table[list(FIT_COLUMN_NAMES)]


def drop_empty_fits(table: pd.DataFrame) -> pd.DataFrame:
    """Rows of fits no point entered (the unidirectional part of a pattern without a '0'
    step is empty): no row rather than a row of NaN."""
    return table[table["n_points"].to_numpy() > 0].reset_index(drop=True)
