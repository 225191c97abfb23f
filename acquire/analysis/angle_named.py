"""The named amplitudes of the angle fits (angle_conventions.py) as fits.csv rows."""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.analysis.angle_conventions import LONGITUDINAL, TERM_INDEX, TRANSVERSE
from acquire.analysis.fit_rows import join_notes, tidy_rows
from acquire.analysis.fits import GroupedLinearFit, ratio_with_error

# An amplitude whose error exceeds this share of its size is not determined by the sweep.
UNDETERMINED_FRACTION = 0.3


def named_amplitudes(
    keys: pd.DataFrame,
    kinds: NDArray[np.str_],
    resistance: GroupedLinearFit,
    unidirectional: GroupedLinearFit,
    plane: str,
    group_notes: NDArray[np.object_],
) -> tuple[list[pd.DataFrame], pd.DataFrame]:
    """Rows for every named amplitude of the plane, and one row per group with them all."""
    c0, c0_err = resistance.coefficients[:, 0], resistance.scaled_errors[:, 0]
    amplitudes = keys.copy()
    amplitudes["kind"] = kinds
    amplitudes["resistance_c0"] = c0
    amplitudes["resistance_c0_err"] = c0_err
    amplitudes["n_points"] = resistance.n_points
    frames: list[pd.DataFrame] = []
    fits = {"resistance": resistance, "unidirectional": unidirectional}
    for kind, table in (("longitudinal", LONGITUDINAL), ("transverse", TRANSVERSE)):
        mask = kinds == kind
        for named in table[plane]:
            fit = fits[named.source]
            index = TERM_INDEX[named.term]
            value = named.factor * fit.coefficients[:, index]
            error = abs(named.factor) * fit.scaled_errors[:, index]
            notes = _notes(value, error, group_notes, named.quantity, plane)
            rows = [(named.quantity, value, error, "ohm", named.model)]
            if named.ratio or named.quantity == "umr_ohm":
                stem = named.quantity.removesuffix("_ohm")
                ratio, ratio_err = ratio_with_error(value, error, c0, c0_err)
                rows.append((f"{stem}_ratio", ratio, ratio_err, "1", f"{named.quantity} / c0"))
            for quantity, v, e, unit, model in rows:
                frames.append(tidy_rows(keys[mask], "angle", quantity, v[mask], e[mask], unit,
                                        fit.reduced_chi2[mask], fit.n_points[mask], model,
                                        notes[mask], fit.dof[mask]))
                amplitudes[quantity] = np.where(mask, v, np.nan)
                amplitudes[f"{quantity}_err"] = np.where(mask, e, np.nan)
    return frames, amplitudes


def _notes(
    value: NDArray[np.float64],
    error: NDArray[np.float64],
    group_notes: NDArray[np.object_],
    quantity: str,
    plane: str,
) -> NDArray[np.object_]:
    out = []
    for v, e, note in zip(value, error, group_notes):
        parts = [note]
        if quantity == "umr_ohm" and plane == "zx":
            parts.append("expected ~0: m_y = 0 in the zx plane")
        elif quantity != "umr_ohm" and not quantity.startswith("transverse_odd") and (
            not np.isfinite(v) or not e < UNDETERMINED_FRACTION * abs(v)
        ):
            parts.append("WARNING: not determined by this sweep (error above 30 % of the "
                         "value): the field is too low or the range too small")
        out.append(join_notes(*parts))
    return np.array(out, dtype=object)
