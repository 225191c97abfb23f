"""`flipsweep reduce`: points.csv again from readings.csv alone."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from acquire.reduction import reduce_readings
from acquire.run_folder import RunFolder
from acquire.store import atomic_write_text, format_cell
from acquire.tables import POINT_COLUMN_SPECS

SETPOINT_AND_READBACK = ("temperature_K", "field_T", "angle_deg", "temperature_read_K",
                         "field_read_T", "angle_read_deg")


def read_readings(path: Path) -> pd.DataFrame:
    return pd.read_csv(
        path, keep_default_na=False,
        na_values={column: [""] for column in SETPOINT_AND_READBACK},
        dtype={"channel": str, "flags": str},
    )


def write_points(path: Path, points: pd.DataFrame) -> None:
    header = ",".join(column.name for column in POINT_COLUMN_SPECS)
    body = "".join(
        ",".join(format_cell(value) for value in row) + "\n"
        for row in points[[c.name for c in POINT_COLUMN_SPECS]].itertuples(index=False, name=None)
    )
    atomic_write_text(path, header + "\n" + body)


def rereduce(run_dir: Path) -> tuple[Path, int]:
    folder = RunFolder(run_dir)
    document = folder.read_run_json()
    protocol = document["protocol"]["normalised"]
    pattern = protocol["alternation"]["pattern"]
    per_step = protocol["readings"]["per_step"]
    from acquire.current_division import LayerShare, carrier_density_per_ampere

    sample = protocol["sample"]
    layers = [LayerShare(layer["name"], layer["thickness_m"], layer["resistivity_ohm_m"],
                         layer["carrier"]) for layer in sample["layers"]]
    density = carrier_density_per_ampere(sample["channel_width_m"], layers,
                                         sample.get("sheet_resistance_ohm"))
    readings = read_readings(folder.readings)
    points = reduce_readings(readings, pattern, density, per_step)
    write_points(folder.points, points)
    return folder.points, len(points)
