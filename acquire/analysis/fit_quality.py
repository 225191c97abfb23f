"""Whether each fit describes its data: p-values, warnings, the optional error inflation.

With weights from the noise model (fit_noise) a fit's chi^2 follows the chi^2 law of n - p
degrees of freedom when the model is right. Its p-value (scipy.stats.chi2.sf) below
IMPROBABLE says the model does not describe the data: the row's note then starts with
WARNING and names the term most likely missing. The errors are not scaled by default; with
`inflate_errors` every row of a weighted fit whose reduced chi^2 exceeds 1 has its error
multiplied by sqrt(reduced chi^2) (the Birge ratio), and the note says so.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import chi2

from acquire.analysis.fit_noise import flagged_counts
from acquire.analysis.fit_rows import join_notes

IMPROBABLE = 1e-3
MISSING_TERM: dict[str, str] = {
    "angle": "a higher harmonic (field below saturation, a tilted rotation) or a drift along "
             "the sweep",
    "current": "a higher power of the current density (heating, or the cubic term)",
    "field": "another field dependence than the chosen form (try --field-form)",
    "temperature": "curvature in temperature (a higher-order term)",
    "heating": "a higher power of the current",
}


def p_values(reduced_chi2: np.ndarray, dof: np.ndarray) -> np.ndarray:
    usable = np.isfinite(reduced_chi2) & np.isfinite(dof) & (dof > 0)
    safe_dof = np.where(usable, dof, 1.0)
    values = chi2.sf(np.where(usable, reduced_chi2, 0.0) * safe_dof, safe_dof)
    return np.where(usable, values, np.nan)


def assess(table: pd.DataFrame, flagged: pd.DataFrame, include_flagged: bool,
           inflate_errors: bool) -> pd.DataFrame:
    """fits.csv with p_value, n_flagged and the notes they call for (and inflated errors
    if asked)."""
    if table.empty:
        return table
    frame = table.copy()
    reduced = frame["reduced_chi2"].to_numpy(float)
    dof = frame["chi2_dof"].to_numpy(float)
    frame["p_value"] = p_values(reduced, dof)
    frame["n_flagged"] = flagged_counts(frame, flagged)
    notes = frame["note"].astype(object).where(frame["note"].notna(), "").astype(str).tolist()
    improbable = frame["p_value"].to_numpy(float) < IMPROBABLE
    inflate = inflate_errors & np.isfinite(reduced) & (reduced > 1)
    factor = np.where(inflate, np.sqrt(np.where(inflate, reduced, 1.0)), 1.0)
    frame["error"] = frame["error"].to_numpy(float) * factor
    for index in range(len(frame)):
        extra = []
        if improbable[index]:
            analysis = str(frame["analysis"].iloc[index])
            extra.append(
                f"WARNING: the model does not describe the data (reduced chi2 "
                f"{reduced[index]:.3g}, p = {frame['p_value'].iloc[index]:.2g}); likely "
                f"missing: {MISSING_TERM.get(analysis, 'a term of the model')}"
            )
        if inflate[index]:
            extra.append(f"errors x {factor[index]:.3g} = sqrt(reduced chi2) (inflated)")
        count = int(frame["n_flagged"].iloc[index])
        if count:
            extra.append(f"includes {count} flagged point row(s) (--include-flagged)"
                         if include_flagged else f"{count} flagged point row(s) left out")
        if extra:
            # A warning leads the note: the report and `fit` look for notes starting with it.
            warning = [part for part in extra if part.startswith("WARNING")]
            rest = [part for part in extra if not part.startswith("WARNING")]
            notes[index] = join_notes(*warning, notes[index], *rest)
    frame["note"] = notes
    return frame
