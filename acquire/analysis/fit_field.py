"""UMR against |field|: the field-independent part and the part that falls with field."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.analysis.fit_groups import distinct_per_group, group_ids
from acquire.analysis.fit_rows import FIT_COLUMN_NAMES, KEY_COLUMNS, empty_fits_table, join_notes
from acquire.analysis.fit_source import AnalysisSource
from acquire.analysis.fits import FIELD_FORMS, fit_field_dependence

MIN_FIELDS: int = 3
FIELD_KEYS: tuple[str, ...] = ("temperature_K", "angle_deg", "current_A", "channel")
FIELD_QUANTITIES: dict[str, tuple[str, str]] = {
    "independent": ("umr_field_independent_ohm", "ohm"),
    "dependent": ("umr_field_dependent_ohm", "ohm"),
    "slope": ("umr_field_slope_ohm_per_T", "ohm/T"),
    "scale_T": ("umr_field_scale_T", "T"),
}


def field_fits(source: AnalysisSource, form: str) -> pd.DataFrame:
    """UMR against |field| per (T, angle, current, channel) with >= 3 fields.

    Positive and negative fields are fitted separately (the UMR changes sign with m). The
    non-linear form is fitted group by group; there are few field groups in any run.
    """
    if form not in FIELD_FORMS:
        raise ValueError(f"unknown field form {form!r}; choose one of {sorted(FIELD_FORMS)}")
    field_values = source.frame["field_T"].to_numpy(float)
    has_field = np.isfinite(field_values)
    frame = source.frame[has_field].assign(
        field_branch=np.where(field_values[has_field] < 0, -1, 1)
    )
    ids, key_frame = group_ids(frame, (*FIELD_KEYS, "field_branch"))
    n_fields = distinct_per_group(ids, frame["field_T"].to_numpy(float), len(key_frame))
    order = np.argsort(ids, kind="stable")
    bounds = np.searchsorted(ids[order], np.arange(len(key_frame) + 1))
    field_T = frame["field_T"].to_numpy(float)
    values = frame["unidirectional_ohm"].to_numpy(float)
    errors = frame["unidirectional_ohm_err"].to_numpy(float)
    collected: dict[str, list[Any]] = {
        "group": [],
        "quantity": [],
        "value": [],
        "error": [],
        "unit": [],
        "reduced_chi2": [],
        "n_points": [],
        "model": [],
        "note": [],
    }
    for group in np.flatnonzero(n_fields >= MIN_FIELDS):
        rows = order[bounds[group] : bounds[group + 1]]
        fit = fit_field_dependence(field_T[rows], values[rows], errors[rows], form)
        used_form = form
        notes = [f"from {source.origin}"]
        if form == "inverse" and fit.note == "needs >= 4 points":
            fit = fit_field_dependence(field_T[rows], values[rows], errors[rows], "linear")
            used_form = "linear"
            notes.append("inverse form needs >= 4 fields: linear form used")
        if key_frame["field_branch"].iloc[group] < 0:
            notes.append("negative fields, fitted against |B|")
        birge = math.sqrt(fit.reduced_chi2) if fit.reduced_chi2 > 1 else 1.0
        if not fit.weighted:
            notes.append("unweighted: errors from the residual scatter")
        elif birge > 1:
            notes.append(f"errors x {birge:.3g} = sqrt(reduced chi2)")
        notes.append(fit.note)
        notes.append(_scale_warning(fit.names, fit.values, np.abs(field_T[rows])))
        for name, value, error in zip(fit.names, fit.values, fit.errors * birge):
            quantity, unit = FIELD_QUANTITIES[name]
            for column, item in (
                ("group", group),
                ("quantity", quantity),
                ("value", value),
                ("error", error),
                ("unit", unit),
                ("reduced_chi2", fit.reduced_chi2),
                ("n_points", fit.n_points),
                ("model", FIELD_FORMS[used_form]),
                ("note", join_notes(*notes)),
            ):
                collected[column].append(item)
    if not collected["group"]:
        return empty_fits_table()
    table = key_frame.iloc[collected.pop("group")][list(FIELD_KEYS)].reset_index(drop=True)
    table = table.assign(analysis="field", **collected)
    for key in KEY_COLUMNS:
        if key not in table:
            table[key] = np.nan
    return table[list(FIT_COLUMN_NAMES)]


def _scale_warning(
    names: tuple[str, ...], values: NDArray[np.float64], field_T: NDArray[np.float64]
) -> str:
    """Bs far outside the measured fields means the data cannot tell the two parts apart."""
    if "scale_T" not in names:
        return ""
    scale = values[names.index("scale_T")]
    positive = field_T[field_T > 0]
    if not np.isfinite(scale) or positive.size == 0:
        return ""
    if scale > 10 * positive.max() or scale < 0.1 * positive.min():
        return "Bs outside the measured field range: the two parts are not separated"
    return ""
