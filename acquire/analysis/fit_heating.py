"""Joule heating of the longitudinal channels and the temperature rise it causes."""

from __future__ import annotations

import numpy as np
import pandas as pd

from acquire.analysis.fit_context import FitOptions, RunContext
from acquire.analysis.fit_groups import distinct_per_group, group_ids, keep_groups
from acquire.analysis.fit_rows import (
    coefficient_rows,
    empty_fits_table,
    fit_note,
    join_notes,
    tidy_rows,
)
from acquire.analysis.fit_source import AnalysisSource, longitudinal_only
from acquire.analysis.fit_temperature import SLOPE_KEYS
from acquire.analysis.fits import fit_linear_by_group, ratio_with_error

HEATING_KEYS: tuple[str, ...] = ("temperature_K", "field_T", "angle_deg", "channel")

NO_DR_DT = "no dR/dT in this run: give one with flipsweep fit --dr-dt OHM_PER_K"


def heating_fits(
    source: AnalysisSource, slopes: pd.DataFrame, context: RunContext, options: FitOptions
) -> pd.DataFrame:
    """Joule heating of the longitudinal channels: R = R0 + h I^2, rise = h I^2 / (dR/dT)."""
    frame = longitudinal_only(source.frame, context)
    usable = frame[np.isfinite(frame["current_A"].to_numpy(float))]
    ids, keys = group_ids(usable, HEATING_KEYS)
    current_mA = usable["current_A"].to_numpy(float) * 1e3
    n_currents = distinct_per_group(ids, current_mA, len(keys))
    ids, keys = keep_groups(ids, keys, n_currents >= 2)
    if keys.empty:
        return empty_fits_table()
    fit = fit_linear_by_group(
        np.column_stack([np.ones_like(current_mA), current_mA**2]),
        usable["resistance_ohm"].to_numpy(float),
        usable["resistance_ohm_err"].to_numpy(float),
        ids,
        len(keys),
    )
    slope, slope_err = fit.coefficients[:, 1], fit.scaled_errors[:, 1]
    largest = np.full(len(keys), -np.inf)
    np.maximum.at(largest, ids[ids >= 0], np.abs(current_mA[ids >= 0]))

    if options.dR_dT_ohm_per_K is not None:
        dr_dt = np.full(len(keys), float(options.dR_dT_ohm_per_K))
        dr_dt_err = np.zeros(len(keys))
        dr_dt_source = "dR/dT given by the user"
    else:
        lookup = slopes.loc[
            slopes["quantity"] == "dR_dT_ohm_per_K",
            ["temperature_K", *SLOPE_KEYS, "value", "error"],
        ]
        matched = keys.merge(lookup, on=["temperature_K", *SLOPE_KEYS], how="left")
        matched = matched.drop_duplicates(list(HEATING_KEYS))
        dr_dt = matched["value"].to_numpy(float)
        dr_dt_err = np.nan_to_num(matched["error"].to_numpy(float))
        dr_dt_source = "dR/dT from this run's temperature series"
    rise, rise_err = ratio_with_error(slope, slope_err, dr_dt, dr_dt_err)
    at_max, at_max_err = rise * largest**2, rise_err * largest**2

    rise_notes = [
        join_notes(
            f"from {source.origin}",
            dr_dt_source if np.isfinite(value) else NO_DR_DT,
        )
        for value in dr_dt
    ]
    max_notes = [
        join_notes(
            f"WARNING: above {options.heating_warn_K:g} K"
            if rise_K > options.heating_warn_K
            else "",
            f"at {current:.4g} mA",
            note,
        )
        for rise_K, current, note in zip(np.nan_to_num(at_max, nan=-np.inf), largest, rise_notes)
    ]
    model = "R = R0 + h*I^2"
    rise_model = f"{model}; rise = h*I^2/(dR/dT)"
    return pd.concat(
        [
            coefficient_rows(
                keys,
                "heating",
                "heating_slope_ohm_per_mA2",
                fit,
                1,
                "ohm/mA^2",
                model,
                np.array(
                    [join_notes(f"from {source.origin}", note) for note in fit_note(fit)],
                    dtype=object,
                ),
            ),
            tidy_rows(
                keys,
                "heating",
                "temperature_rise_K_per_mA2",
                rise,
                rise_err,
                "K/mA^2",
                fit.reduced_chi2,
                fit.n_points,
                rise_model,
                np.array(rise_notes, dtype=object),
                fit.dof,
            ),
            tidy_rows(
                keys,
                "heating",
                "temperature_rise_at_max_current_K",
                at_max,
                at_max_err,
                "K",
                fit.reduced_chi2,
                fit.n_points,
                rise_model,
                np.array(max_notes, dtype=object),
                fit.dof,
            ),
        ],
        ignore_index=True,
    )
