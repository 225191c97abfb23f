"""The noise model the fits weight by, and which points they leave out.

A point's error comes from the scatter of a few cycles (2-3 degrees of freedom), so weighting
a fit by each point's own error scatters the weights and misstates the fit's errors. The fits
weight instead by a pooled noise level:

- each error is turned back into a standard error (divided by its Student's t factor);
- the variances are pooled, weighted by their degrees of freedom, per (channel, temperature
  setpoint, current): every point of the group gets the pooled sigma times the t factor of
  the pooled degrees of freedom (close to 1: tens to thousands of dof);
- when some current of a (channel, temperature) series has fewer than MIN_POOLED_DOF, the
  whole series is pooled as a voltage noise instead: each standard error times its current
  (R and U are voltages over I, and the meter's and the sample's Johnson noise do not depend
  on the current), pooled over the series, and sigma = s / I at each current.

The fits' reduced chi^2 then compares the scatter between points with the scatter within
them: a model that misses a term shows as an improbable chi^2 (fit_quality says so).

Points flagged compliance, instrument_error or wait_timeout are left out of every fit unless
asked to keep them (`--include-flagged`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from acquire.analysis.fit_groups import group_ids
from acquire.modes.dc_reversal.reduction import t_coverage_factor

NOISE_KEYS: tuple[str, ...] = ("channel", "temperature_K")
ERROR_COLUMNS: tuple[str, ...] = (
    "resistance_ohm_err",
    "unidirectional_ohm_err",
    "unidirectional_ratio_err",
)
EXCLUDED_FLAGS: tuple[str, ...] = ("compliance", "instrument_error", "wait_timeout")
# Pooled degrees of freedom below which one current's noise is not trusted on its own: the
# pooled sigma is then known to sqrt(1/(2*20)) = 16 % (common practice for a chi^2 estimate).
MIN_POOLED_DOF = 20


def pooled_errors(points: pd.DataFrame) -> pd.DataFrame:
    """A copy of `points` whose error columns hold the pooled noise model (see above).

    Rows whose degrees of freedom are unknown (a table made by hand, without `dof` or
    `n_cycles`) keep their errors as given.
    """
    frame = points.copy()
    if frame.empty:
        return frame
    dof = _degrees_of_freedom(frame)
    known = np.isfinite(dof) & (dof >= 1)
    current = np.abs(frame["current_A"].to_numpy(float))
    by_current, _ = group_ids(frame, (*NOISE_KEYS, "current_A"))
    by_series, _ = group_ids(frame, NOISE_KEYS)
    for column in ERROR_COLUMNS:
        error = frame[column].to_numpy(float)
        factor = np.where(known, t_coverage_factor(np.where(known, dof, 1)), np.nan)
        with np.errstate(invalid="ignore", divide="ignore"):
            standard = error / factor
        usable = known & np.isfinite(standard) & (standard > 0)
        own_current, current_dof = _pool(standard, dof, usable, by_current)
        voltage, series_dof = _pool(standard * current, dof, usable, by_series)
        # A series with a current of few degrees of freedom takes the voltage model for all
        # its currents, so that its weights follow one law.
        thin = np.bincount(by_series, weights=(current_dof < MIN_POOLED_DOF) & usable,
                           minlength=by_series.max() + 1)[by_series] > 0
        with np.errstate(invalid="ignore", divide="ignore"):
            modelled = np.where(thin, voltage / current * t_coverage_factor(series_dof),
                                own_current * t_coverage_factor(current_dof))
        frame[column] = np.where(usable, modelled, np.where(known, np.nan, error))
    return frame


def _pool(values: np.ndarray, dof: np.ndarray, usable: np.ndarray,
          ids: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """sqrt of the dof-weighted mean of values^2 per group, and the group's dof, per row."""
    weight = np.where(usable, dof, 0.0)
    n_groups = int(ids.max()) + 1 if ids.size else 0
    total = np.bincount(ids, weights=weight * np.where(usable, values, 0.0) ** 2,
                        minlength=n_groups)
    pooled_dof = np.bincount(ids, weights=weight, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.sqrt(total / pooled_dof)[ids], pooled_dof[ids]


def _degrees_of_freedom(frame: pd.DataFrame) -> np.ndarray:
    dof = frame["dof"].to_numpy(float) if "dof" in frame else np.full(len(frame), np.nan)
    cycles = frame["n_cycles"].to_numpy(float) if "n_cycles" in frame else dof + 1
    # points.csv of an older run has no dof column: cycles - 1 is what it would have said.
    return np.where(np.isfinite(dof), dof, cycles - 1)


@dataclass(frozen=True)
class PointSelection:
    """The points the fits use, and the flagged ones they left out (or kept, marked)."""

    used: pd.DataFrame
    flagged: pd.DataFrame  # every flagged point row (left out unless include_flagged)
    include_flagged: bool


def flagged_kinds(flags: pd.Series) -> pd.Series:
    """The excluding kinds of each row's flags, '|'-joined ('' when none)."""
    text = flags.fillna("").astype(str)
    return text.map(lambda cell: "|".join(k for k in cell.split("|") if k in EXCLUDED_FLAGS))


def select_points(points: pd.DataFrame, include_flagged: bool = False) -> PointSelection:
    kinds = flagged_kinds(points["flags"]) if "flags" in points else pd.Series("", points.index)
    marked = kinds != ""
    flagged = points[marked]
    used = points if include_flagged else points[~marked]
    return PointSelection(used.reset_index(drop=True), flagged.reset_index(drop=True),
                          include_flagged)


def flagged_counts(fits: pd.DataFrame, flagged: pd.DataFrame) -> np.ndarray:
    """How many flagged point rows fall in each fits row's group: every key the row has
    (temperature, field, current, angle, channel) must match; an empty key matches any."""
    counts = np.zeros(len(fits), dtype=np.int64)
    if fits.empty or flagged.empty:
        return counts
    for _, point in flagged.iterrows():  # flagged points are few
        match = np.ones(len(fits), dtype=bool)
        for key in ("temperature_K", "field_T", "current_A", "angle_deg"):
            row_value = pd.to_numeric(fits[key], errors="coerce").to_numpy(float)
            point_value = float(point[key]) if pd.notna(point[key]) else np.nan
            same = np.isclose(row_value, point_value, rtol=1e-9, atol=0.0)
            match &= ~np.isfinite(row_value) | same
        channel = fits["channel"].astype(str).to_numpy()
        match &= (channel == "") | (channel == str(point["channel"]))
        counts += match
    return counts
