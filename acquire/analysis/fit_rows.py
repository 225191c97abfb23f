"""The columns of fits.csv and the pieces every analysis builds its rows from."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.analysis.fits import GroupedLinearFit
from acquire.store.csvw import Column

KEY_COLUMNS: tuple[str, ...] = (
    "temperature_K", "field_T", "current_A", "angle_deg", "channel", "branch"
)
TEXT_KEYS: tuple[str, ...] = ("channel", "branch")
FIT_COLUMNS: tuple[Column, ...] = (
    Column("temperature_K", "double", "K", "group key: temperature setpoint"),
    Column("field_T", "double", "T", "group key: field setpoint mu0*H"),
    Column("current_A", "double", "A", "group key: current amplitude"),
    Column("angle_deg", "double", "deg", "group key: field angle setpoint"),
    Column("channel", "string", "", "group key: voltmeter channel"),
    Column("branch", "string", "", "group key of field fits: up (field rising) or back "
           "(falling) on a loop measured both ways; empty when pooled"),
    Column("analysis", "string", "", "angle, current, field, temperature or heating"),
    Column("quantity", "string", "", "name of the fitted quantity"),
    Column("value", "double", "", "fitted value, in the row's unit"),
    Column("error", "double", "",
           "one-sigma error from the pooled noise model, in the row's unit (not scaled by "
           "the chi^2 unless fitted with --inflate-errors)"),
    Column("unit", "string", "", "unit of value and error"),
    Column("reduced_chi2", "double", "", "chi^2/(n-p) of a weighted fit; empty if unweighted"),
    Column("chi2_dof", "double", "", "degrees of freedom n - p of that chi^2"),
    Column("p_value", "double", "",
           "probability of a chi^2 at least this large if the model and the noise model were "
           "right (scipy.stats.chi2); below 0.001 the note says the model does not describe "
           "the data"),
    Column("n_points", "integer", "", "points that entered the fit"),
    Column("n_flagged", "integer", "",
           "flagged points (compliance, instrument_error, wait_timeout) of the fit's group: "
           "left out, or kept and marked in the note with --include-flagged"),
    Column("model", "string", "", "the fitted model"),
    Column("note", "string", "", "context and warnings"),
)
FIT_COLUMN_NAMES: tuple[str, ...] = tuple(column.name for column in FIT_COLUMNS)
ANALYSES: tuple[str, ...] = ("angle", "current", "field", "temperature", "heating")


def tidy_rows(
    keys: pd.DataFrame,
    analysis: str,
    quantity: str,
    value: Any,
    error: Any,
    unit: str,
    reduced_chi2: Any,
    n_points: Any,
    model: str,
    note: Any = "",
    chi2_dof: Any = np.nan,
) -> pd.DataFrame:
    """One fits.csv row per row of `keys`; key columns absent from `keys` stay empty.
    p_value and n_flagged are filled in for the whole table (fit_quality)."""
    n = len(keys)
    columns: dict[str, Any] = {}
    for key in KEY_COLUMNS:
        if key in keys:
            columns[key] = keys[key].to_numpy()
        else:
            columns[key] = np.full(
                n,
                "" if key in TEXT_KEYS else np.nan,
                dtype=object if key in TEXT_KEYS else float,
            )
    columns.update(
        analysis=analysis,
        quantity=quantity,
        value=np.broadcast_to(np.asarray(value, dtype=float), (n,)),
        error=np.broadcast_to(np.asarray(error, dtype=float), (n,)),
        unit=unit,
        reduced_chi2=np.broadcast_to(np.asarray(reduced_chi2, dtype=float), (n,)),
        chi2_dof=np.broadcast_to(np.asarray(chi2_dof, dtype=float), (n,)),
        p_value=np.nan,
        n_points=np.broadcast_to(np.asarray(n_points, dtype=np.int64), (n,)),
        n_flagged=0,
        model=model,
        note=np.broadcast_to(np.asarray(note, dtype=object), (n,)),
    )
    return pd.DataFrame(columns, index=pd.RangeIndex(n))


def empty_fits_table() -> pd.DataFrame:
    return pd.DataFrame({name: pd.Series(dtype=_dtype(name)) for name in FIT_COLUMN_NAMES})


def _dtype(name: str) -> str:
    if name in ("n_points", "n_flagged"):
        return "int64"
    if name in ("channel", "branch", "analysis", "quantity", "unit", "model", "note"):
        return "object"
    return "float64"


def coefficient_rows(
    keys: pd.DataFrame,
    analysis: str,
    quantity: str,
    fit: GroupedLinearFit,
    index: int,
    unit: str,
    model: str,
    note: Any = None,
) -> pd.DataFrame:
    """Rows for one coefficient of a grouped fit, one per group of `keys`.

    The note defaults to fit_note(fit), so a caller that adds context passes the joined notes.
    """
    return tidy_rows(
        keys,
        analysis,
        quantity,
        fit.coefficients[:, index],
        fit.scaled_errors[:, index],
        unit,
        fit.reduced_chi2,
        fit.n_points,
        model,
        fit_note(fit) if note is None else note,
        fit.dof,
    )


def fit_note(fit: GroupedLinearFit) -> NDArray[np.object_]:
    """How each group's errors were obtained, or why the group was not fitted."""
    notes = np.where(fit.weighted, "", "unweighted: errors from the residual scatter")
    failed = ~np.isfinite(fit.coefficients[:, 0])
    not_fitted = "not fitted: the points do not determine the model (too few distinct values)"
    return np.where(failed, not_fitted, notes).astype(object)


def join_notes(*parts: object) -> str:
    # Notes arrive from numpy object arrays and pandas cells, where a missing one is NaN.
    return "; ".join(str(part) for part in parts if part and str(part) != "nan")
