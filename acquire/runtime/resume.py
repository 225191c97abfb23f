"""Continuing an interrupted run in place, without losing or duplicating a reading."""

from __future__ import annotations

import csv
import sys
from collections.abc import Callable
from pathlib import Path

from acquire.errors import InputError
from acquire.runtime.cautions import CAUTION
from acquire.runtime.execute import RunOptions, closing, execute
from acquire.runtime.rebuild_record import RebuildRequest, rebuild_record
from acquire.runtime.session import clock_for, prepare
from acquire.runtime.stop_signals import StopSignals
from acquire.store.repair import PARTIAL_READINGS, repair_tables, split_complete_points
from acquire.store.rereduce import reduced_points, write_table
from acquire.store.run_folder import RunFolder, utc_now
from acquire.store.run_record import HistoryEvent
from acquire.store.tables import TableSchema

__all__ = ["PARTIAL_READINGS", "resume_run", "split_complete_points"]

SEED_STRIDE_PER_RESUME = 1000  # fresh simulated noise after a resume, still reproducible


def what_to_do(folder: RunFolder) -> Callable[[str], str]:
    def fix(name: str) -> str:
        return (f"restore {name} from a copy and resume again, or run 'flipsweep resume "
                f"{folder.path} --keep-points-aside' to keep the affected rows in files beside "
                "it and measure those points again")
    return fix


def resume_run(out: Path, progress: bool = True, keep_points_aside: bool = False,
               rebuild: RebuildRequest | None = None,
               signals: StopSignals | None = None, notify: bool = True) -> int:
    """Continue the run in `out`. `signals`: the caller's (a night plan); `notify`: False when
    the caller notifies instead."""
    folder = RunFolder(out)
    own_signals = signals is None
    signals = signals or StopSignals()
    if own_signals:
        with signals.installed():
            return _resume(folder, progress, keep_points_aside, rebuild, signals, notify)
    return _resume(folder, progress, keep_points_aside, rebuild, signals, notify)


def _resume(folder: RunFolder, progress: bool, keep_points_aside: bool,
            rebuild: RebuildRequest | None, signals: StopSignals, notify: bool) -> int:
    folder.require_folder()
    if rebuild is not None:
        folder.check_writable()
        for note in rebuild_record(folder, rebuild):
            print(f"resume: {note}")
    folder.read_run_json()  # a clear error for a folder that is not a run's
    folder.check_writable()
    folder.check_own_files()
    with folder.locked():
        return _resume_locked(folder, progress, keep_points_aside, signals, notify)


def _resume_locked(folder: RunFolder, progress: bool, keep_points_aside: bool,
                   signals: StopSignals, notify: bool) -> int:
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
    options = RunOptions(simulate=record.options.simulate, seed=record.options.seed,
                         realtime=record.options.realtime, progress=progress,
                         notify_in_rehearsal=record.options.notify_in_rehearsal, notify=notify)
    prepared = prepare(Path(record.protocol.path), Path(record.rig.path), options)
    loaded, rig, estimated = prepared.loaded, prepared.rig, prepared.estimated
    folder.check_space(estimated.data_bytes)
    mode = loaded.mode
    readings_schema, points_schema = mode.tables()[0], mode.tables()[-1]
    repaired = repair_tables(folder.path, readings_schema, points_schema,
                             mode.fixed_readings_per_point(loaded.protocol), keep_points_aside,
                             what_to_do(folder))
    for note in repaired.notes:
        print(f"resume: {note}")
    schema, points = reduced_points(folder, record, repaired.done)
    write_table(folder.path / schema.file_name, schema, points)
    start_point = repaired.start_point
    finished = bool(record.history) and record.history[-1].event == "done"
    if start_point >= estimated.points and finished:
        print(f"run {folder.path}: all {estimated.points} points already done")
        return 0
    # A run killed after its last point never made the instruments safe: the stretch below
    # then has nothing to measure, and does just that.
    resumes = record.resumes()
    last_clock = record.last_run_clock_s()
    record.history.append(HistoryEvent(event="resume", utc=utc_now(), from_point=start_point,
                                       notes=repaired.notes or None))
    folder.write_run_json(record)
    resumed_at = _last_time(folder.path / readings_schema.file_name, readings_schema,
                            last_clock)
    clock = clock_for(options, resumed_at)
    seed = None if options.seed is None else options.seed + SEED_STRIDE_PER_RESUME * (resumes + 1)
    if not options.simulate:
        # Real instruments: the operator sees the cautions again before anything is sent.
        print(CAUTION, file=sys.stderr)
    print(f"run {folder.path}: resuming from point {start_point} of {estimated.points}")
    end = execute(loaded, rig, folder, record, prepared.options, clock, start_point, estimated,
                  seed, signals)
    return closing(folder, end)


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
