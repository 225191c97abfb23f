"""Reduce and fit about 1,000,000 readings; print the times and the rows per second.

Target: under 5 s for reduction and fitting together on a 2-core machine.

    python bench/reduce.py [--seed N]

The readings are synthetic, in the readings.csv schema: pattern "+0-", 4 cycles, 2 readings
per step, two channels (vxx, vxy), on a grid of 10 temperatures x 6 fields x 36 angles x
10 currents = 21,600 points = 1,036,800 readings -> 43,200 point rows. The sample is an
invented CoFeB/W bilayer with AMR, planar Hall and a UMR that is linear in the current.
Building the readings is not timed; reduce_readings and build_fits_table are timed
separately and together.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from acquire.analysis.fit_tables import FitOptions, RunContext, build_fits_table
from acquire.modes.dc_reversal import POINTS
from acquire.modes.dc_reversal.reduction import reduce_readings

PATTERN = "+0-"
CYCLES = 4
REPEATS = 2
CHANNELS = ("vxx", "vxy")
TEMPERATURES_K = np.linspace(10.0, 300.0, 10)
FIELDS_T = np.array([0.05, 0.1, 0.2, 0.5, 1.0, 2.0])
ANGLES_DEG = np.arange(0.0, 360.0, 10.0)
CURRENTS_A = np.linspace(0.5e-3, 5e-3, 10)
LAYERS = (
    {"name": "CoFeB", "thickness_m": 2e-9, "resistivity_ohm_m": 1.5e-6, "carrier": False},
    {"name": "W", "thickness_m": 5e-9, "resistivity_ohm_m": 1.2e-6, "carrier": True},
)
WIDTH_M = 4e-6
DENSITY_PER_A = 1.25e12 / 33 * 1e3  # the stack above, parallel-resistor model


def synthetic_readings(seed: int) -> pd.DataFrame:
    """One row per reading, built with broadcasting (no per-row Python)."""
    rng = np.random.default_rng(seed)
    temperature, field_T, angle, current = (
        axis.ravel()
        for axis in np.meshgrid(TEMPERATURES_K, FIELDS_T, ANGLES_DEG, CURRENTS_A, indexing="ij")
    )
    n_points = temperature.size
    steps = len(PATTERN)
    polarity_of_step = np.array([{"+": 1, "0": 0, "-": -1}[s] for s in PATTERN])
    # reading order: point, cycle, step, repeat, channel
    shape = (n_points, CYCLES, steps, REPEATS, len(CHANNELS))
    point, cycle, step, repeat, channel = np.indices(shape).reshape(5, -1)
    polarity = polarity_of_step[step]
    signed_current = current[point] * polarity

    phi = np.radians(angle[point] - 2.0)
    x = current[point] * DENSITY_PER_A / 1e11
    field_factor = 4e-3 + 2e-3 * 0.5 / (field_T[point] + 0.5)
    longitudinal = channel == 0
    resistance = np.where(
        longitudinal,
        700.0 + 0.5 * temperature[point] + 1.25 * (1 + np.cos(2 * phi)),
        0.6 * np.sin(2 * phi),
    )
    unidirectional = np.where(longitudinal, 1.0, 0.1) * field_factor * x * np.sin(phi)
    voltage = (
        signed_current * resistance
        + np.abs(signed_current) * unidirectional
        + 3e-6
        + rng.normal(0, 2e-7, point.size)
    )
    time_s = np.arange(point.size) // len(CHANNELS) * 0.02
    timestamps = np.datetime64("2025-01-01T00:00:00", "ms") + (time_s * 1e3).astype("m8[ms]")
    return pd.DataFrame(
        {
            "point": point,
            "cycle": cycle,
            "step": step,
            "repeat": repeat,
            "time_s": time_s,
            "timestamp": np.datetime_as_string(timestamps, timezone="UTC"),
            "temperature_K": temperature[point],
            "field_T": field_T[point],
            "angle_deg": angle[point],
            "current_A": signed_current,
            "polarity": polarity,
            "channel": np.array(CHANNELS)[channel],
            "voltage_V": voltage,
            "temperature_read_K": temperature[point],
            "field_read_T": field_T[point],
            "angle_read_deg": angle[point],
            "flags": "",
        }
    )


def reduce(readings: pd.DataFrame) -> pd.DataFrame:
    return reduce_readings(readings, PATTERN, DENSITY_PER_A, None, POINTS.names)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=1)
    arguments = parser.parse_args()

    started = time.perf_counter()
    readings = synthetic_readings(arguments.seed)
    print(f"built {len(readings):,} readings in {time.perf_counter() - started:.2f} s (untimed)")

    context = RunContext(rotation_plane="xy", layers=LAYERS, width_m=WIDTH_M)
    started = time.perf_counter()
    points = reduce(readings)
    reduced = time.perf_counter()
    fits = build_fits_table(points, context, FitOptions())
    finished = time.perf_counter()

    reduce_s = reduced - started
    fit_s = finished - reduced
    total_s = finished - started
    print(
        f"reduce: {reduce_s:6.2f} s  {len(readings) / reduce_s:12,.0f} readings/s"
        f"  -> {len(points):,} point rows"
    )
    print(
        f"fit:    {fit_s:6.2f} s  {len(points) / fit_s:12,.0f} point rows/s"
        f"  -> {len(fits):,} fit rows"
    )
    print(
        f"total:  {total_s:6.2f} s  {len(readings) / total_s:12,.0f} readings/s"
        f"  (target < 5 s on 2 cores: {'met' if total_s < 5 else 'NOT met'})"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
