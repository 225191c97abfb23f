"""Where the current, field, temperature-slope and heating analyses take their values from."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from acquire.analysis.fit_context import RunContext

SOURCE_COLUMNS: tuple[str, ...] = (
    "temperature_K",
    "field_T",
    "angle_deg",
    "current_A",
    "current_density_A_m2",
    "channel",
    "resistance_ohm",
    "resistance_ohm_err",
    "unidirectional_ohm",
    "unidirectional_ohm_err",
    "unidirectional_ratio",
    "unidirectional_ratio_err",
)


@dataclass(frozen=True)
class AnalysisSource:
    """Values the current, field, temperature-slope and heating analyses fit.

    With angle sweeps these are the angle fits' amplitudes of the longitudinal channels
    (resistance_c0 as resistance, umr_ohm and umr_ratio as the unidirectional part) with an
    empty angle: one fit per sweep instead of one per angle, and no fit at angles where the
    UMR vanishes. Without angle sweeps they are the longitudinal channels' points, at each
    fixed angle (with their measured order, `point`, for the field branches).
    """

    frame: pd.DataFrame
    origin: str
    from_angle_fits: bool


def analysis_source(
    points: pd.DataFrame, amplitudes: pd.DataFrame, context: RunContext
) -> AnalysisSource:
    if "umr_ohm" in amplitudes and np.isfinite(amplitudes["umr_ohm"].to_numpy(float)).any():
        renamed = amplitudes[amplitudes["kind"] == "longitudinal"].rename(
            columns={
                "resistance_c0": "resistance_ohm",
                "resistance_c0_err": "resistance_ohm_err",
                "umr_ohm": "unidirectional_ohm",
                "umr_ohm_err": "unidirectional_ohm_err",
                "umr_ratio": "unidirectional_ratio",
                "umr_ratio_err": "unidirectional_ratio_err",
            }
        )
        renamed = renamed.assign(angle_deg=np.nan)
        return AnalysisSource(
            renamed[list(SOURCE_COLUMNS)].reset_index(drop=True), "angle-fit amplitudes", True
        )
    # The current, field and heating forms are those of a longitudinal resistance: a Hall
    # channel's unidirectional part is not a UMR.
    columns = [*SOURCE_COLUMNS, "point"] if "point" in points else list(SOURCE_COLUMNS)
    fixed = longitudinal_only(points[columns], context).reset_index(drop=True)
    return AnalysisSource(fixed, "points at fixed angle", False)


def longitudinal_only(frame: pd.DataFrame, context: RunContext) -> pd.DataFrame:
    kinds = np.array([context.channel_kind(str(name)) for name in frame["channel"]], dtype=object)
    return frame[kinds == "longitudinal"] if len(frame) else frame
