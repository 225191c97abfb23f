"""`flipsweep reduce`: the points table again from the readings table alone."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from acquire.errors import InputError
from acquire.inputs.stack import carrier_density_per_ampere, layers_from_records
from acquire.modes import mode_named
from acquire.store.append_table import atomic_write_text, format_cell
from acquire.store.run_folder import RunFolder
from acquire.store.run_record import RunRecord
from acquire.store.tables import TableSchema


def density_per_ampere(record: RunRecord) -> float:
    """Carrier current density per ampere, from the normalised protocol in run.json."""
    sample = record.protocol.normalised["sample"]
    return carrier_density_per_ampere(sample["channel_width_m"],
                                      layers_from_records(sample["layers"]),
                                      sample.get("sheet_resistance_ohm"))


def write_table(path: Path, schema: TableSchema, frame: pd.DataFrame) -> None:
    body = "".join(
        ",".join(format_cell(value) for value in row) + "\n"
        for row in frame[list(schema.names)].itertuples(index=False, name=None)
    )
    atomic_write_text(path, ",".join(schema.names) + "\n" + body)


def reduced_points(folder: RunFolder, record: RunRecord, readings: pd.DataFrame
                   ) -> tuple[TableSchema, pd.DataFrame]:
    mode = mode_named(record.mode)
    points_schema = mode.tables()[-1]
    points = mode.reduce_readings(readings, record.protocol.normalised,
                                  density_per_ampere(record))
    return points_schema, points


def rereduce(run_dir: Path) -> tuple[Path, int]:
    folder = RunFolder(run_dir)
    record = folder.read_run_json()
    mode = mode_named(record.mode)
    readings_schema = mode.tables()[0]
    readings_path = folder.path / readings_schema.file_name
    if not readings_path.is_file() or readings_path.stat().st_size == 0:
        raise InputError(f"has no {readings_schema.file_name}, so there is nothing to reduce",
                         file=str(folder.path), fix="give the folder of a run that has readings")
    try:
        readings = readings_schema.read(readings_path)
    except (ValueError, pd.errors.ParserError) as error:
        raise InputError(f"{readings_schema.file_name} is damaged ({error})",
                         file=str(readings_path),
                         fix=f"'flipsweep resume {folder.path}' repairs it (or says how)"
                         ) from None
    schema, points = reduced_points(folder, record, readings)
    target = folder.path / schema.file_name
    write_table(target, schema, points)
    return target, len(points)
