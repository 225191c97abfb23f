"""Continuing an interrupted run in place, without losing or duplicating a reading."""

from __future__ import annotations

import csv
import sys
from pathlib import Path

import pandas as pd

from acquire.errors import InputError
from acquire.inputs.load import check_pair, load_protocol, load_rig
from acquire.plan.estimate import estimate
from acquire.runtime.cautions import CAUTION
from acquire.runtime.clock import Clock, RealClock, VirtualClock
from acquire.runtime.session import RunOptions, _execute
from acquire.store.append_table import atomic_write_text
from acquire.store.rereduce import reduced_points, write_table
from acquire.store.run_folder import RunFolder, utc_now
from acquire.store.run_record import HistoryEvent, RunRecord
from acquire.store.tables import TableSchema

SEED_STRIDE_PER_RESUME = 1000  # fresh simulated noise after a resume, still reproducible
PARTIAL_READINGS = "readings.partial.csv"


def _drop_truncated_tail(path: Path) -> None:
    """A power cut can leave half a line: cut the file back to its last complete row."""
    if not path.exists():
        return
    data = path.read_bytes()
    if data and not data.endswith(b"\n"):
        with open(path, "r+b") as handle:
            handle.truncate(data.rfind(b"\n") + 1)


def split_complete_points(
    readings: pd.DataFrame, rows_per_point: int
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(rows of done points, rows of partial points). Done: every row of the latest attempt."""
    if readings.empty:
        return readings, readings
    latest = readings.groupby("point")["attempt"].transform("max")
    counts = readings[readings["attempt"] == latest].groupby("point").size()
    done = set(counts[counts == rows_per_point].index)
    keep = readings["point"].isin(done)
    return readings[keep], readings[~keep]


def repair(folder: RunFolder, record: RunRecord, readings_schema: TableSchema,
           rows_per_point: int) -> int:
    """Move partial points aside, rebuild the points table; the first point still to measure."""
    readings_path = folder.path / readings_schema.file_name
    _drop_truncated_tail(readings_path)
    _drop_truncated_tail(folder.points)
    text = readings_path.read_text(encoding="utf-8") if readings_path.exists() else ""
    if not text.strip():
        return 0
    readings = readings_schema.read(readings_path)
    done, partial = split_complete_points(readings, rows_per_point)
    if not partial.empty:
        aside = folder.path / PARTIAL_READINGS
        header = not aside.exists()
        partial.to_csv(aside, mode="a", header=header, index=False)
        lines = text.splitlines(keepends=True)
        keep_mask = [True, *(~readings.index.isin(partial.index))]
        atomic_write_text(readings_path, "".join(
            line for line, keep in zip(lines, keep_mask) if keep))
    schema, points = reduced_points(folder, record, done)
    write_table(folder.path / schema.file_name, schema, points)
    if done.empty:
        return 0
    return int(done["point"].max()) + 1


def resume_run(out: Path, progress: bool = True) -> int:
    folder = RunFolder(out)
    folder.read_run_json()  # a clear error for a folder that is not a run's
    with folder.locked():
        return _resume_locked(folder, progress)


def _resume_locked(folder: RunFolder, progress: bool) -> int:
    record = folder.read_run_json()
    for kind, entry in (("protocol", record.protocol), ("rig", record.rig)):
        changed = entry.changed_files()
        if changed:
            raise InputError(
                f"the {kind} changed since the run started (SHA-256 differs): "
                + ", ".join(changed),
                file=str(folder.run_json), key=(kind,),
                fix="restore the original file, or start a new run in a new folder",
            )
    loaded = load_protocol(Path(record.protocol.path))
    rig = load_rig(Path(record.rig.path))
    check_pair(loaded, rig)
    estimated = estimate(loaded, rig)
    folder.check_space(estimated.data_bytes)
    mode = loaded.mode
    readings_schema = mode.tables()[0]
    start_point = repair(folder, record, readings_schema,
                         mode.readings_per_point(loaded.protocol))
    if start_point >= estimated.points:
        print(f"run {folder.path}: all {estimated.points} points already done")
        return 0
    resumes = record.resumes()
    last_clock = record.last_run_clock_s()
    record.history.append(HistoryEvent(event="resume", utc=utc_now(), from_point=start_point))
    folder.write_run_json(record)
    options = RunOptions(simulate=record.options.simulate, seed=record.options.seed,
                         realtime=record.options.realtime, progress=progress)
    if not options.simulate:
        # Real instruments: the operator sees the cautions again before anything is sent.
        print(CAUTION, file=sys.stderr)
    clock: Clock
    resumed_at = _last_time(folder.path / readings_schema.file_name, readings_schema,
                            last_clock)
    if options.simulate and not options.realtime:
        clock = VirtualClock()
        clock.sleep(resumed_at)
    else:
        clock = RealClock(offset_s=resumed_at)
    seed = None if options.seed is None else options.seed + SEED_STRIDE_PER_RESUME * (resumes + 1)
    code = _execute(loaded, rig, folder, options, clock, start_point, estimated, seed)
    if code == 0:
        print(f"run {folder.path}: resumed from point {start_point}, done")
    return code


def _last_time(path: Path, schema: TableSchema, fallback: float) -> float:
    """The run clock of the last reading, so time_s keeps increasing across a resume."""
    if not path.exists():
        return fallback
    with open(path, "rb") as handle:
        handle.seek(0, 2)
        size = handle.tell()
        handle.seek(max(0, size - 4096))
        tail = handle.read().decode("utf-8", errors="replace").strip().splitlines()
    try:
        row = next(csv.reader([tail[-1]]))
        return max(fallback, float(row[schema.index("time_s")]))
    except (IndexError, ValueError, StopIteration):
        return fallback
