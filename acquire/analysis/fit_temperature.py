"""Angle-fit amplitudes tabulated per temperature, and the local slope dR/dT."""

from __future__ import annotations

import numpy as np
import pandas as pd

from acquire.analysis.fit_context import RunContext
from acquire.analysis.fit_groups import distinct_per_group, group_ids
from acquire.analysis.fit_rows import coefficient_rows, empty_fits_table, fit_note, join_notes
from acquire.analysis.fit_source import AnalysisSource, longitudinal_only
from acquire.analysis.fits import fit_linear_by_group

TEMPERATURE_QUANTITIES: tuple[str, ...] = (
    "umr_ohm",
    "umr_ratio",
    "umr_spin_ohm",
    "umr_thermal_ohm",
    "amr_plus_smr_ohm",
    "amr_plus_smr_ratio",
    "amr_ohm",
    "amr_ratio",
    "smr_ohm",
    "smr_ratio",
    "planar_hall_ohm",
    "anomalous_hall_ohm",
)
SLOPE_KEYS: tuple[str, ...] = ("field_T", "angle_deg", "channel")


def temperature_fits(
    angle_rows: pd.DataFrame, source: AnalysisSource, context: RunContext
) -> pd.DataFrame:
    """Angle-fit amplitudes gathered per temperature, and the local dR/dT."""
    frames = [
        _amplitudes_by_temperature(angle_rows),
        _resistance_slopes(longitudinal_only(source.frame, context), source.origin),
    ]
    frames = [frame for frame in frames if not frame.empty]
    return pd.concat(frames, ignore_index=True) if frames else empty_fits_table()


def _amplitudes_by_temperature(angle_rows: pd.DataFrame) -> pd.DataFrame:
    if angle_rows.empty:
        return empty_fits_table()
    rows = angle_rows[angle_rows["quantity"].isin(TEMPERATURE_QUANTITIES)].copy()
    if rows.empty:
        return empty_fits_table()
    ids, keys = group_ids(rows, ("field_T", "current_A", "channel", "quantity"))
    n_temperatures = distinct_per_group(ids, rows["temperature_K"].to_numpy(float), len(keys))
    rows = rows[n_temperatures[ids] >= 2]
    rows["analysis"] = "temperature"
    rows["note"] = [join_notes("from the angle fit", note) for note in rows["note"]]
    return rows.reset_index(drop=True)


def _resistance_slopes(frame: pd.DataFrame, origin: str) -> pd.DataFrame:
    """dR/dT of the lowest-current resistance, local: fitted over each temperature and its
    neighbours in the sorted list of temperatures (one-sided at the ends)."""
    usable = frame[np.isfinite(frame["temperature_K"].to_numpy(float))]
    if usable.empty:
        return empty_fits_table()
    current = usable["current_A"].to_numpy(float)
    outer_ids, _ = group_ids(usable, SLOPE_KEYS)
    lowest = pd.Series(current).groupby(outer_ids).transform("min").to_numpy()
    at_lowest = (current == lowest) | (np.isnan(current) & np.isnan(lowest))
    usable = usable[at_lowest].reset_index(drop=True)
    outer_ids, outer_keys = group_ids(usable, SLOPE_KEYS)
    temperature = usable["temperature_K"].to_numpy(float)
    rank = pd.Series(temperature).groupby(outer_ids).rank(method="dense").to_numpy()
    rank = rank.astype(np.int64) - 1
    n_temperatures = distinct_per_group(outer_ids, temperature, len(outer_keys))
    if n_temperatures.max(initial=0) < 2:
        return empty_fits_table()

    # Each point serves the windows centred on its own temperature and on its two neighbours.
    copies = []
    n_of_row = n_temperatures[outer_ids]
    for shift in (-1, 0, 1):
        centre = rank + shift
        inside = (centre >= 0) & (centre < n_of_row) & (n_of_row >= 2)
        copies.append(
            pd.DataFrame(
                {
                    "outer": outer_ids[inside],
                    "centre": centre[inside],
                    "row": np.flatnonzero(inside),
                }
            )
        )
    windows = pd.concat(copies, ignore_index=True)
    window_ids, window_keys = group_ids(windows, ("outer", "centre"))
    rows = windows["row"].to_numpy()
    centre_rows = usable.assign(outer=outer_ids, centre=rank).drop_duplicates(["outer", "centre"])
    centres = window_keys.merge(centre_rows, on=["outer", "centre"], how="left")
    t_centre = centres["temperature_K"].to_numpy(float)
    dt = temperature[rows] - t_centre[window_ids]
    fit = fit_linear_by_group(
        np.column_stack([np.ones_like(dt), dt]),
        usable["resistance_ohm"].to_numpy(float)[rows],
        usable["resistance_ohm_err"].to_numpy(float)[rows],
        window_ids,
        len(window_keys),
    )
    keys = centres[["temperature_K", "current_A", *SLOPE_KEYS]]
    notes = [join_notes("lowest current", f"from {origin}", note) for note in fit_note(fit)]
    return coefficient_rows(
        keys,
        "temperature",
        "dR_dT_ohm_per_K",
        fit,
        1,
        "ohm/K",
        "R = R(T0) + dR/dT*(T - T0), over T0 and its neighbours",
        np.array(notes, dtype=object),
    )
