"""Continuing an interrupted run in place, without losing or duplicating a reading."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from acquire.clock import Clock, RealClock, VirtualClock
from acquire.errors import InputError
from acquire.estimate import estimate
from acquire.load import check_pair, load_protocol, load_rig
from acquire.reduction import reduce_readings
from acquire.rereduce import read_readings, write_points
from acquire.run_folder import RunFolder, utc_now
from acquire.session import RunOptions, _execute, changed_files
from acquire.store import atomic_write_text

SEED_STRIDE_PER_RESUME = 1000  # fresh simulated noise after a resume, still reproducible


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
    """(rows of done points, rows of partial points). Done: every cycle of every channel."""
    if readings.empty:
        return readings, readings
    latest = readings.groupby("point")["attempt"].transform("max")
    counts = readings[readings["attempt"] == latest].groupby("point").size()
    done = set(counts[counts == rows_per_point].index)
    keep = readings["point"].isin(done)
    return readings[keep], readings[~keep]


def repair(folder: RunFolder, rows_per_point: int, pattern: str, per_step: int,
           density_per_ampere: float) -> int:
    """Move partial points aside, rebuild points.csv; return the first point still to measure."""
    _drop_truncated_tail(folder.readings)
    _drop_truncated_tail(folder.points)
    text = folder.readings.read_text(encoding="utf-8") if folder.readings.exists() else ""
    if not text.strip():
        return 0
    readings = read_readings(folder.readings)
    done, partial = split_complete_points(readings, rows_per_point)
    if not partial.empty:
        aside = folder.path / "readings.partial.csv"
        header = not aside.exists()
        partial.to_csv(aside, mode="a", header=header, index=False)
        lines = text.splitlines(keepends=True)
        keep_mask = [True, *(~readings.index.isin(partial.index))]
        atomic_write_text(folder.readings, "".join(
            line for line, keep in zip(lines, keep_mask) if keep))
    write_points(folder.points, reduce_readings(done, pattern, density_per_ampere, per_step))
    if done.empty:
        return 0
    return int(done["point"].max()) + 1


def resume_run(out: Path, progress: bool = True) -> int:
    folder = RunFolder(out)
    folder.read_run_json()  # a clear error for a folder that is not a run's
    with folder.locked():
        return _resume_locked(folder, progress)


def _resume_locked(folder: RunFolder, progress: bool) -> int:
    document = folder.read_run_json()
    for kind in ("protocol", "rig"):
        changed = changed_files(document[kind])
        if changed:
            raise InputError(
                f"the {kind} changed since the run started (SHA-256 differs): "
                + ", ".join(changed),
                file=str(folder.run_json), key=(kind,),
                fix="restore the original file, or start a new run in a new folder",
            )
    loaded = load_protocol(Path(document["protocol"]["path"]))
    rig = load_rig(Path(document["rig"]["path"]))
    check_pair(loaded, rig)
    estimated = estimate(loaded, rig)
    folder.check_space(estimated.data_bytes)
    protocol = loaded.protocol
    steps = len(protocol.alternation.pattern)
    rows_per_point = (protocol.alternation.cycles * steps * protocol.readings.per_step
                      * len(protocol.readings.channels))
    from acquire.sample_geometry import SampleGeometry

    density = SampleGeometry.from_sample(protocol.sample).carrier_density_per_ampere
    start_point = repair(folder, rows_per_point, protocol.alternation.pattern,
                         protocol.readings.per_step, density)
    if start_point >= estimated.points:
        print(f"run {folder.path}: all {estimated.points} points already done")
        return 0
    history = document.setdefault("history", [])
    resumes = sum(1 for entry in history if entry.get("event") == "resume")
    last_clock = max((entry.get("run_clock_s", 0.0) for entry in history), default=0.0)
    history.append({"event": "resume", "utc": utc_now(), "from_point": start_point})
    folder.write_run_json(document)
    options_record = document.get("options", {})
    options = RunOptions(simulate=options_record.get("simulate", False),
                         seed=options_record.get("seed"),
                         realtime=options_record.get("realtime", False), progress=progress)
    clock: Clock
    resumed_at = _last_time(folder, last_clock)
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


def _last_time(folder: RunFolder, fallback: float) -> float:
    """The run clock of the last reading, so time_s keeps increasing across a resume."""
    if not folder.readings.exists():
        return fallback
    with open(folder.readings, "rb") as handle:
        handle.seek(0, 2)
        size = handle.tell()
        handle.seek(max(0, size - 4096))
        tail = handle.read().decode("utf-8", errors="replace").strip().splitlines()
    try:
        return max(fallback, float(tail[-1].split(",")[5]))
    except (IndexError, ValueError):
        return fallback
