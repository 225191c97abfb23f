"""Even and odd parts of the resistance from current-reversal readings (pure, vectorised).

Per cycle, with V already averaged over the repeats of each step and over the steps of the
same polarity:
    R(+I) = (V+ - V0) / I,  R(-I) = (V- - V0) / (-I)      V0 = 0 when the pattern has no '0'
    resistance      = (R(+I) + R(-I)) / 2 = (V+ - V-) / (2 I)
    unidirectional  = (R(+I) - R(-I)) / 2 = (V+ + V- - 2 V0) / (2 I)
then the mean over cycles, with the standard error over cycles as the uncertainty.
The same function serves the live reduction (one point) and `flipsweep reduce` (all points).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from acquire.store.tables import setpoint_columns

PATTERN_SYMBOLS = {"+": 1, "0": 0, "-": -1}


@dataclass(frozen=True)
class BlockResult:
    """Reduced values of G blocks (point x channel), each an array of length G."""

    n_cycles: int
    resistance_ohm: np.ndarray
    resistance_ohm_err: np.ndarray
    unidirectional_ohm: np.ndarray
    unidirectional_ohm_err: np.ndarray
    unidirectional_ratio: np.ndarray
    unidirectional_ratio_err: np.ndarray
    offset_V: np.ndarray
    offset_V_err: np.ndarray


def polarities_of(pattern: str) -> np.ndarray:
    return np.array([PATTERN_SYMBOLS[symbol] for symbol in pattern], dtype=int)


def _mean_and_standard_error(per_cycle: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    cycles = per_cycle.shape[-1]
    mean = per_cycle.mean(axis=-1)
    if cycles < 2:
        return mean, np.full(mean.shape, np.nan)
    return mean, per_cycle.std(axis=-1, ddof=1) / np.sqrt(cycles)


def reduce_blocks(voltages: np.ndarray, pattern: str, current_A: np.ndarray) -> BlockResult:
    """voltages[G, cycles, steps, repeats] in volts; current_A[G] the amplitude (> 0)."""
    voltages = np.asarray(voltages, dtype=float)
    polarity = polarities_of(pattern)
    step_means = voltages.mean(axis=3)  # G, cycles, steps
    v_plus = step_means[:, :, polarity == 1].mean(axis=2)
    v_minus = step_means[:, :, polarity == -1].mean(axis=2)
    has_zero = bool(np.any(polarity == 0))
    v_zero = step_means[:, :, polarity == 0].mean(axis=2) if has_zero else np.zeros_like(v_plus)
    current = np.asarray(current_A, dtype=float)[:, None]
    resistance_cycles = (v_plus - v_minus) / (2 * current)
    unidirectional_cycles = (v_plus + v_minus - 2 * v_zero) / (2 * current)
    resistance, resistance_err = _mean_and_standard_error(resistance_cycles)
    unidirectional, unidirectional_err = _mean_and_standard_error(unidirectional_cycles)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = unidirectional / resistance
        # First-order propagation for a ratio of two means (errors treated as independent).
        ratio_err = np.sqrt(
            (unidirectional_err / resistance) ** 2
            + (unidirectional * resistance_err / resistance**2) ** 2
        )
    if has_zero:
        offset, offset_err = _mean_and_standard_error(v_zero)
    else:
        offset = offset_err = np.full(resistance.shape, np.nan)
    return BlockResult(
        voltages.shape[1], resistance, resistance_err, unidirectional, unidirectional_err,
        ratio, ratio_err, offset, offset_err,
    )


def _join_flags(flags: pd.Series, keys: pd.DataFrame) -> pd.Series:
    """'|'-joined distinct flags per (point, channel); most groups have none."""
    present = flags.fillna("").astype(str)
    marked = present != ""
    if not marked.any():
        return pd.Series(dtype=object)
    subset = keys.loc[marked].assign(flags=present[marked])
    grouped = subset.groupby(["point", "channel"], sort=False)["flags"]
    return grouped.agg(lambda values: "|".join(sorted({f for v in values for f in v.split("|")})))


def reduce_readings(
    readings: pd.DataFrame,
    pattern: str,
    density_per_ampere: float,
    per_step: int | None,
    columns: Sequence[str],
) -> pd.DataFrame:
    """The points table (`columns`, the mode's schema) from the readings table alone:
    complete points only, the latest attempt of each point."""
    if readings.empty:
        return pd.DataFrame(columns=list(columns))
    frame = readings
    if "attempt" in frame.columns:
        latest = frame.groupby("point", sort=False)["attempt"].transform("max")
        frame = frame[frame["attempt"] == latest]
    steps = len(pattern)
    repeats = per_step or int(frame["repeat"].max()) + 1
    frame = frame.sort_values(["point", "channel", "cycle", "step", "repeat"], kind="stable")
    sizes = frame.groupby(["point", "channel"], sort=False).size()
    cycles_per_block = sizes // (steps * repeats)
    # A block is complete when it holds whole cycles; partial points are left out.
    complete = (sizes % (steps * repeats) == 0) & (cycles_per_block > 0)
    rows = []
    for n_cycles, blocks in cycles_per_block[complete].groupby(cycles_per_block[complete]):
        keys = blocks.index
        selected = frame.set_index(["point", "channel"]).loc[keys]
        voltages = selected["voltage_V"].to_numpy().reshape(len(keys), n_cycles, steps, repeats)
        first = selected.groupby(level=[0, 1], sort=False).first().reindex(keys)
        amplitude = (
            selected["current_A"].abs().groupby(level=[0, 1], sort=False).max().reindex(keys)
        )
        result = reduce_blocks(voltages, pattern, amplitude.to_numpy())
        setpoints = {column.name: first[column.name].to_numpy() for column in setpoint_columns()}
        table = pd.DataFrame(
            {
                "point": keys.get_level_values(0),
                **setpoints,
                "current_A": amplitude.to_numpy(),
                "current_density_A_m2": amplitude.to_numpy() * density_per_ampere,
                "channel": keys.get_level_values(1),
                "n_cycles": int(n_cycles),
                "resistance_ohm": result.resistance_ohm,
                "resistance_ohm_err": result.resistance_ohm_err,
                "unidirectional_ohm": result.unidirectional_ohm,
                "unidirectional_ohm_err": result.unidirectional_ohm_err,
                "unidirectional_ratio": result.unidirectional_ratio,
                "unidirectional_ratio_err": result.unidirectional_ratio_err,
                "offset_V": result.offset_V,
                "offset_V_err": result.offset_V_err,
            }
        )
        rows.append(table)
    if not rows:
        return pd.DataFrame(columns=list(columns))
    points = pd.concat(rows, ignore_index=True)
    flags = _join_flags(frame["flags"], frame[["point", "channel"]]) if "flags" in frame else None
    points["flags"] = ""
    if flags is not None and len(flags):
        index = pd.MultiIndex.from_frame(points[["point", "channel"]])
        points["flags"] = flags.reindex(index).fillna("").to_numpy()
    return points.sort_values(["point"], kind="stable").reset_index(drop=True)[list(columns)]
