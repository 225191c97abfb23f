"""Even and odd parts of the resistance from current-reversal readings (pure, vectorised).

Per cycle, with V already averaged over the repeats of each step and over the steps of the
same polarity:
    R(+I) = (V+ - V0) / I,  R(-I) = (V- - V0) / (-I)
    resistance      = (R(+I) + R(-I)) / 2 = (V+ - V-) / (2 I)
    unidirectional  = (R(+I) - R(-I)) / 2 = (V+ + V- - 2 V0) / (2 I)
then the mean over cycles. Each estimator is a fixed linear combination of the step means
(`step_weights`), which pattern_analysis uses to work out what a pattern cancels.

A pattern without a '0' step has no V0: the unidirectional part would then hold the
thermoelectric offset V_off/I, so it is left empty (NaN); the resistance is still given.

Errors: the half-width of the 68.3 % interval of the mean over cycles, from Student's t with
cycles - 1 degrees of freedom (scipy.stats.t): t(dof) * s / sqrt(cycles). With 4 cycles the
factor is 1.20 (t(3)), with 16 it is 1.03. `dof` travels with the errors into points.csv.
The same function serves the live reduction (one point) and `flipsweep reduce` (all points).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import t as student_t

from acquire.store.tables import readback_columns, setpoint_columns

PATTERN_SYMBOLS = {"+": 1, "0": 0, "-": -1}


COVERAGE = 0.682689492137086  # the fraction within one standard deviation of a normal law


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
    # The point's mean readback per movable axis (live reduction only; None: not read back).
    readback_means: tuple[float | None, ...] = ()

    @property
    def dof(self) -> int:
        """Degrees of freedom of every error: cycles - 1."""
        return self.n_cycles - 1


def polarities_of(pattern: str) -> np.ndarray:
    return np.array([PATTERN_SYMBOLS[symbol] for symbol in pattern], dtype=int)


def has_zero_step(pattern: str) -> bool:
    return "0" in pattern


@dataclass(frozen=True)
class StepWeights:
    """Each estimator of one cycle as weights on the pattern's step means (length = steps).

    resistance and unidirectional are per unit current (ohm per volt of step mean at I = 1 A);
    offset is in volts per volt. The unidirectional weights of a pattern without a '0' step
    take V0 = 0: that is the estimate the pattern would give, which the reduction refuses.
    """

    resistance: np.ndarray
    unidirectional: np.ndarray
    offset: np.ndarray


def step_weights(pattern: str) -> StepWeights:
    polarity = polarities_of(pattern)
    plus = (polarity == 1) / max(int(np.sum(polarity == 1)), 1)
    minus = (polarity == -1) / max(int(np.sum(polarity == -1)), 1)
    zeros = int(np.sum(polarity == 0))
    zero = (polarity == 0) / zeros if zeros else np.zeros(polarity.size)
    return StepWeights(
        resistance=(plus - minus) / 2,
        unidirectional=(plus + minus - 2 * zero) / 2,
        offset=zero,
    )


def t_coverage_factor(dof: int | np.ndarray) -> np.ndarray:
    """Student's t quantile for a two-sided 68.3 % interval (NaN below one dof)."""
    dof_array = np.asarray(dof, dtype=float)
    with np.errstate(invalid="ignore"):
        factor = student_t.ppf(0.5 + COVERAGE / 2, np.where(dof_array >= 1, dof_array, 1.0))
    return np.where(dof_array >= 1, factor, np.nan)


def _mean_and_interval(per_cycle: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean over cycles and the half-width of its 68.3 % Student's t interval."""
    cycles = per_cycle.shape[-1]
    mean = per_cycle.mean(axis=-1)
    if cycles < 2:
        return mean, np.full(mean.shape, np.nan)
    standard_error = per_cycle.std(axis=-1, ddof=1) / np.sqrt(cycles)
    return mean, standard_error * t_coverage_factor(cycles - 1)


def reduce_blocks(voltages: np.ndarray, pattern: str, current_A: np.ndarray) -> BlockResult:
    """voltages[G, cycles, steps, repeats] in volts; current_A[G] the amplitude (> 0)."""
    voltages = np.asarray(voltages, dtype=float)
    weights = step_weights(pattern)
    step_means = voltages.mean(axis=3)  # G, cycles, steps
    current = np.asarray(current_A, dtype=float)[:, None]
    resistance_cycles = (step_means @ weights.resistance) / current
    resistance, resistance_err = _mean_and_interval(resistance_cycles)
    if has_zero_step(pattern):
        unidirectional_cycles = (step_means @ weights.unidirectional) / current
        unidirectional, unidirectional_err = _mean_and_interval(unidirectional_cycles)
        offset, offset_err = _mean_and_interval(step_means @ weights.offset)
    else:
        unidirectional = unidirectional_err = np.full(resistance.shape, np.nan)
        offset = offset_err = np.full(resistance.shape, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = unidirectional / resistance
        # First-order propagation for a ratio of two means (errors treated as independent).
        ratio_err = np.sqrt(
            (unidirectional_err / resistance) ** 2
            + (unidirectional * resistance_err / resistance**2) ** 2
        )
    return BlockResult(
        voltages.shape[1], resistance, resistance_err, unidirectional, unidirectional_err,
        ratio, ratio_err, offset, offset_err,
    )


def mean_over_steps(per_step: np.ndarray) -> np.ndarray:
    """Mean readback over the steps of each block: per_step[G, steps in time order], NaN
    where not read. One function for the live point and `reduce`, so they agree bit for bit."""
    # Contiguous rows: numpy then sums each row in the same order whatever the caller's layout.
    values = np.ascontiguousarray(per_step, dtype=float)
    read = np.isfinite(values)
    count = read.sum(axis=1)
    total = np.where(read, values, 0.0).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def _mean_readbacks(selected: pd.DataFrame, keys: pd.Index, n_cycles: int, steps: int,
                    repeats: int) -> dict[str, np.ndarray]:
    """Mean of each axis's readback over a block's steps (empty where none was read); the
    rows are sorted by cycle, step and repeat, and every repeat of a step has its readback."""
    means = {}
    for column in readback_columns(""):
        if column.name in selected:
            values = pd.to_numeric(selected[column.name], errors="coerce").to_numpy(float)
            first_repeat = values.reshape(len(keys), n_cycles * steps, repeats)[:, :, 0]
            means[column.name] = mean_over_steps(first_repeat)
        else:
            means[column.name] = np.full(len(keys), np.nan)
    return means


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
        readbacks = _mean_readbacks(selected, keys, int(n_cycles), steps, repeats)
        table = pd.DataFrame(
            {
                "point": keys.get_level_values(0),
                **setpoints,
                "current_A": amplitude.to_numpy(),
                "current_density_A_m2": amplitude.to_numpy() * density_per_ampere,
                "channel": keys.get_level_values(1),
                "n_cycles": int(n_cycles),
                "dof": int(n_cycles) - 1,
                "resistance_ohm": result.resistance_ohm,
                "resistance_ohm_err": result.resistance_ohm_err,
                "unidirectional_ohm": result.unidirectional_ohm,
                "unidirectional_ohm_err": result.unidirectional_ohm_err,
                "unidirectional_ratio": result.unidirectional_ratio,
                "unidirectional_ratio_err": result.unidirectional_ratio_err,
                "offset_V": result.offset_V,
                "offset_V_err": result.offset_V_err,
                **readbacks,
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
