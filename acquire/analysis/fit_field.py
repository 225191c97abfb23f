"""UMR against |field|: the field-independent part and the part that falls with field.

Which points enter (field_branches.py): longitudinal channels only; B = 0 and the switching
region left out; the two branches of a loop fitted apart; +m and -m at the same |B| combined
into the m_y-odd part (the field angle folded modulo 180 deg, so 90 and 270 deg are one
group). A fit whose fields do not reach well beyond its field scale is flagged.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.analysis.field_branches import (
    has_branch_pairs,
    m_sign,
    sweep_direction,
    switching_limit,
)
from acquire.analysis.fit_groups import distinct_per_group, group_ids
from acquire.analysis.fit_rows import FIT_COLUMN_NAMES, KEY_COLUMNS, empty_fits_table, join_notes
from acquire.analysis.fit_source import AnalysisSource
from acquire.analysis.fits import FIELD_FORMS, fit_field_dependence

MIN_FIELDS: int = 3
# The fields must reach this many times the fitted scale Bs for the high-field part A to be
# measured rather than extrapolated.
REACH_FACTOR: float = 3.0
FIELD_KEYS: tuple[str, ...] = ("temperature_K", "angle_deg", "current_A", "channel", "branch")
FIELD_QUANTITIES: dict[str, tuple[str, str]] = {
    "independent": ("umr_field_independent_ohm", "ohm"),
    "dependent": ("umr_field_dependent_ohm", "ohm"),
    "slope": ("umr_field_slope_ohm_per_T", "ohm/T"),
    "scale_T": ("umr_field_scale_T", "T"),
}


def prepared_field_points(source: AnalysisSource, plane: str) -> pd.DataFrame:
    """The source's rows with a field, labelled: branch, m sign, folded angle, and whether
    the form fits use them (`in_fit`) and why not (`left_out`)."""
    frame = source.frame[np.isfinite(source.frame["field_T"].to_numpy(float))].copy()
    field = frame["field_T"].to_numpy(float)
    if source.from_angle_fits:
        # umr_ohm of an angle fit is already the m_y term on the magnetisation angle.
        branch = np.full(len(frame), "", dtype=object)
        sign = np.ones(len(frame))
        limit = np.zeros(len(frame))
    else:
        direction = sweep_direction(frame)
        limit = switching_limit(frame, direction)
        branch = np.where(has_branch_pairs(frame, direction), direction, "").astype(object)
        sign = m_sign(frame["angle_deg"].to_numpy(float), field, plane)
    zero = field == 0
    switching = ~zero & (np.abs(field) <= limit)
    frame["branch"] = branch
    frame["m_sign"] = sign
    frame["switching_limit_T"] = limit
    frame["odd_ohm"] = sign * frame["unidirectional_ohm"].to_numpy(float)
    frame["in_fit"] = ~zero & ~switching
    frame["left_out"] = np.where(zero, "B = 0", np.where(switching, "switching region", ""))
    if not source.from_angle_fits:
        frame["angle_deg"] = np.mod(frame["angle_deg"].to_numpy(float), 180.0)
    return frame


def field_fits(source: AnalysisSource, form: str, plane: str = "xy") -> pd.DataFrame:
    """UMR (m_y-odd part) against |field| per (T, folded angle, current, channel, branch)."""
    if form not in FIELD_FORMS:
        raise ValueError(f"unknown field form {form!r}; choose one of {sorted(FIELD_FORMS)}")
    prepared = prepared_field_points(source, plane)
    frame = _combine_signs(prepared[prepared["in_fit"].to_numpy(bool)])
    ids, key_frame = group_ids(frame, FIELD_KEYS)
    field_T = frame["abs_field_T"].to_numpy(float)
    n_fields = distinct_per_group(ids, field_T, len(key_frame))
    order = np.argsort(ids, kind="stable")
    bounds = np.searchsorted(ids[order], np.arange(len(key_frame) + 1))
    values = frame["odd_ohm"].to_numpy(float)
    errors = frame["odd_ohm_err"].to_numpy(float)
    signs = frame["signs"].to_numpy(object)
    left_out = _left_out_counts(prepared)
    collected: dict[str, list[Any]] = {name: [] for name in (
        "group", "quantity", "value", "error", "unit", "reduced_chi2", "chi2_dof", "n_points",
        "model", "note")}
    for group in np.flatnonzero(n_fields >= MIN_FIELDS):
        rows = order[bounds[group] : bounds[group + 1]]
        fit = fit_field_dependence(field_T[rows], values[rows], errors[rows], form)
        used_form = form
        notes = [f"from {source.origin}"]
        if form == "inverse" and fit.note == "needs >= 4 points":
            fit = fit_field_dependence(field_T[rows], values[rows], errors[rows], "linear")
            used_form = "linear"
            notes.append("inverse form needs >= 4 fields: linear form used")
        notes.append(_sign_note(signs[rows], source.from_angle_fits))
        keys = key_frame.iloc[group]
        notes.append(left_out.get(_sequence_key(keys), ""))
        if not fit.weighted:
            notes.append("unweighted: errors from the residual scatter")
        notes.append(fit.note)
        notes.append(_scale_warning(fit.names, fit.values, field_T[rows]))
        for name, value, error in zip(fit.names, fit.values, fit.errors):
            quantity, unit = FIELD_QUANTITIES[name]
            for column, item in (
                ("group", group), ("quantity", quantity), ("value", value), ("error", error),
                ("unit", unit), ("reduced_chi2", fit.reduced_chi2),
                ("chi2_dof", fit.dof if fit.weighted else np.nan),
                ("n_points", fit.n_points), ("model", FIELD_FORMS[used_form]),
                ("note", join_notes(*notes)),
            ):
                collected[column].append(item)
    if not collected["group"]:
        return empty_fits_table()
    table = key_frame.iloc[collected.pop("group")][list(FIELD_KEYS)].reset_index(drop=True)
    table = table.assign(analysis="field", p_value=np.nan, n_flagged=0, **collected)
    for key in KEY_COLUMNS:
        if key not in table:
            table[key] = np.nan
    return table[list(FIT_COLUMN_NAMES)]


def _sequence_key(keys: pd.Series) -> str:
    # Text, so that empty (NaN) keys match each other.
    return "|".join(f"{keys[name]}" for name in FIELD_KEYS)


def _combine_signs(frame: pd.DataFrame) -> pd.DataFrame:
    """One row per (group, |B|): the mean of s*U at +m, the mean at -m, and where a group has
    both signs the m_y-odd part (mean(+m) + mean(-m))/2 at the |B| that have both, so the
    m-even part (an offset, say) cancels rather than inflating chi^2."""
    columns = [*FIELD_KEYS, "abs_field_T", "odd_ohm", "odd_ohm_err", "signs"]
    if frame.empty:
        return pd.DataFrame(columns=columns)
    work = frame.assign(abs_field_T=np.abs(frame["field_T"].to_numpy(float)),
                        variance=frame["unidirectional_ohm_err"].to_numpy(float) ** 2,
                        side=np.where(frame["m_sign"].to_numpy(float) > 0, "+", "-"))
    keys = [*FIELD_KEYS, "abs_field_T"]
    per_side = work.groupby([*keys, "side"], dropna=False).agg(
        odd_ohm=("odd_ohm", "mean"), variance=("variance", "mean"), n=("odd_ohm", "size"))
    per_side["variance"] = per_side["variance"] / per_side["n"]
    per_side = per_side.reset_index()
    both_in_group = per_side.groupby(list(FIELD_KEYS), dropna=False)["side"].transform(
        "nunique") > 1
    paired = per_side.groupby(keys, dropna=False)["side"].transform("nunique") > 1
    per_side = per_side[~both_in_group | paired]
    combined = per_side.groupby(keys, dropna=False).agg(
        odd_ohm=("odd_ohm", "mean"), variance=("variance", "sum"), n_sides=("side", "size"),
        signs=("side", lambda sides: "".join(sorted(sides))))
    combined["odd_ohm_err"] = np.sqrt(combined["variance"]) / combined["n_sides"]
    return combined.reset_index()[columns]


def _left_out_counts(prepared: pd.DataFrame) -> dict[str, str]:
    out: dict[str, str] = {}
    skipped = prepared[~prepared["in_fit"].to_numpy(bool)]
    if skipped.empty:
        return out
    ids, keys = group_ids(skipped, FIELD_KEYS)
    for group in range(len(keys)):
        rows = skipped[ids == group]
        zero = int((rows["left_out"] == "B = 0").sum())
        switching = rows[rows["left_out"] == "switching region"]
        parts = []
        if zero:
            parts.append(f"{zero} point(s) at B = 0 left out")
        if not switching.empty:
            limit = float(switching["switching_limit_T"].max())
            parts.append(f"{len(switching)} point(s) of the switching region |B| <= "
                         f"{limit:.3g} T left out (the branches differ there)")
        out[_sequence_key(keys.iloc[group])] = "; ".join(parts)
    return out


def _sign_note(signs: NDArray[np.object_], from_angle_fits: bool) -> str:
    if from_angle_fits:
        return ""
    if any(len(str(s)) > 1 for s in signs):
        return "m_y-odd part: +m and -m combined at each |B| measured with both"
    which = "+m" if all(str(s) == "+" for s in signs) else "-m"
    return f"only {which} measured: the m-even part is not removed (sign-corrected to +m)"


def _scale_warning(
    names: tuple[str, ...], values: NDArray[np.float64], field_T: NDArray[np.float64]
) -> str:
    """Bs far outside the measured fields means the data cannot tell the two parts apart;
    fields that stop short of REACH_FACTOR * Bs leave the high-field part an extrapolation."""
    if "scale_T" not in names:
        return ""
    scale = values[names.index("scale_T")]
    positive = field_T[field_T > 0]
    if not np.isfinite(scale) or positive.size == 0:
        return ""
    if scale > 10 * positive.max() or scale < 0.1 * positive.min():
        return "WARNING: Bs outside the measured field range: the two parts are not separated"
    if positive.max() < REACH_FACTOR * scale:
        return (f"WARNING: the fields reach {positive.max() / scale:.2g} x Bs only: the "
                f"field-independent part is extrapolated; measure up to >= {REACH_FACTOR:g} Bs")
    return ""
