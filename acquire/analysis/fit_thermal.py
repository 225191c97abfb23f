"""The unidirectional amplitude split into a thermal and a spin-dependent part (xy sweeps).

Joule heating makes a vertical temperature gradient grad T = g z; an anomalous-Nernst-like
field E = kappa (grad T x m) has E_x = -kappa g m_y along the longitudinal pair and
E_y = +kappa g m_x across the transverse pair (z x m = (-m_y, m_x, 0)). Both pick-ups grow
as I^2, so in (R(+I) - R(-I))/2 the longitudinal pair reads c I m_y over the length L and
the transverse pair -c I (w / L) m_x over the width w: opposite signs for m_x = m_y. The
transverse m_x-odd amplitude a1 thus measures the longitudinal thermal part,

    umr_thermal_ohm = -(L / w) a1,      umr_spin_ohm = umr_ohm - umr_thermal_ohm,

the separation of Avci et al., Nature Physics 11, 570 (2015) (# from memory). Assumed: the
thermal term does not depend on the field; the transverse odd signal has no contribution
from current-induced torques tilting m (their damping-like part has the same cos phi
symmetry); the Hall arms sit where the gradient is that of the longitudinal section. Only
the xy plane gives m_x and m_y in one sweep.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from acquire.analysis.fit_context import RunContext
from acquire.analysis.fit_rows import empty_fits_table, tidy_rows
from acquire.analysis.fits import ratio_with_error

PAIR_KEYS: tuple[str, ...] = ("temperature_K", "field_T", "current_A")
ASSUMPTIONS = (
    "assumes a field-independent thermal term and no current-induced torque contribution "
    "to the transverse odd signal"
)


def thermal_separation(amplitudes: pd.DataFrame, context: RunContext) -> pd.DataFrame:
    """umr_thermal_ohm and umr_spin_ohm (and their ratios) per longitudinal xy sweep that has
    a transverse sweep at the same temperature, field and current."""
    needed = {"umr_ohm", "transverse_odd_mx_ohm", "kind"}
    if context.rotation_plane != "xy" or not needed <= set(amplitudes.columns):
        return empty_fits_table()
    if not (context.length_m and context.width_m):
        return empty_fits_table()
    scale = context.length_m / context.width_m
    longitudinal = amplitudes[amplitudes["kind"] == "longitudinal"]
    transverse = amplitudes[amplitudes["kind"] == "transverse"]
    transverse = transverse[np.isfinite(transverse["transverse_odd_mx_ohm"].to_numpy(float))]
    if longitudinal.empty or transverse.empty:
        return empty_fits_table()
    # One transverse channel per (T, field, current): the first by name.
    transverse = transverse.sort_values("channel").drop_duplicates(list(PAIR_KEYS))
    keyed = longitudinal.drop(columns=["transverse_odd_mx_ohm", "transverse_odd_mx_ohm_err"])
    for key in PAIR_KEYS:  # NaN keys (a loop the run does not use) must match each other
        keyed[key] = keyed[key].fillna(-np.inf)
    partner = transverse.copy()
    for key in PAIR_KEYS:
        partner[key] = partner[key].fillna(-np.inf)
    partner = partner[[*PAIR_KEYS, "channel", "transverse_odd_mx_ohm",
                       "transverse_odd_mx_ohm_err"]].rename(columns={"channel": "hall_channel"})
    merged = keyed.merge(partner, on=list(PAIR_KEYS), how="inner")
    if merged.empty:
        return empty_fits_table()
    for key in PAIR_KEYS:
        merged[key] = merged[key].replace(-np.inf, np.nan)
    odd = merged["transverse_odd_mx_ohm"].to_numpy(float)
    odd_err = merged["transverse_odd_mx_ohm_err"].to_numpy(float)
    umr = merged["umr_ohm"].to_numpy(float)
    umr_err = merged["umr_ohm_err"].to_numpy(float)
    thermal, thermal_err = -scale * odd, scale * odd_err
    spin = umr - thermal
    spin_err = np.hypot(umr_err, thermal_err)  # the two channels' noise is independent
    c0 = merged["resistance_c0"].to_numpy(float)
    c0_err = merged["resistance_c0_err"].to_numpy(float)
    notes = [f"from {hall}'s m_x-odd part x L/w = {scale:.4g}; {ASSUMPTIONS}"
             for hall in merged["hall_channel"]]
    frames = []
    for name, value, error, model in (
        ("umr_thermal_ohm", thermal, thermal_err, "-(L/w) * a1 of the transverse odd part"),
        ("umr_spin_ohm", spin, spin_err, "umr_ohm - umr_thermal_ohm"),
    ):
        frames.append(tidy_rows(merged, "angle", name, value, error, "ohm", np.nan,
                                merged["n_points"], model,
                                np.array(notes, dtype=object)))
        ratio, ratio_err = ratio_with_error(value, error, c0, c0_err)
        frames.append(tidy_rows(merged, "angle", name.replace("_ohm", "_ratio"), ratio,
                                ratio_err, "1", np.nan, merged["n_points"], f"{name} / c0",
                                np.array(notes, dtype=object)))
    return pd.concat(frames, ignore_index=True)
