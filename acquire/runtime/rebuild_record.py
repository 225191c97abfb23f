"""A lost or damaged run.json rebuilt from the protocol and rig the run was started with.

    flipsweep resume DIR --rebuild-record --protocol PROTOCOL --rig RIG [--simulate [--seed N]]

Only when run.json is missing or unreadable. The files given are checked before anything is
written: their SHA-256 against every hash the folder still holds (status.json keeps them, and
whatever of the damaged run.json can still be read), and the protocol's schedule against the
readings already taken (every point's setpoints and current as readings.csv has them). Any
disagreement refuses the rebuild (exit 2) with what differs.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from acquire.errors import InputError
from acquire.plan.schedule import iterate_points, plans_from
from acquire.runtime.execute import RunOptions
from acquire.runtime.session import Prepared, new_record, prepare
from acquire.store import csvw
from acquire.store.run_folder import RunFolder
from drivers.roles import movable_axes

HASH_PAIR = re.compile(r'"path":\s*"((?:[^"\\]|\\.)*)",\s*"sha256":\s*"([0-9a-f]{64})"')
# Setpoints are written with repr() and planned by the same code: they agree to the last bit;
# the tolerance only absorbs a parse round trip.
SETPOINT_RTOL = 1e-9


@dataclass(frozen=True)
class RebuildRequest:
    protocol: Path
    rig: Path
    simulate: bool = False
    seed: int | None = None
    realtime: bool = False


def _record_is_lost(folder: RunFolder) -> bool:
    try:
        folder.read_run_json()
    except InputError:
        return True
    return False


def recorded_hashes(folder: RunFolder) -> set[str]:
    """Every input SHA-256 the folder still holds (status.json, what run.json still shows)."""
    found: set[str] = set()
    status = folder.read_status() or {}
    inputs = status.get("inputs")
    if isinstance(inputs, dict):
        for files in inputs.values():
            if isinstance(files, dict):
                found.update(str(sha) for sha in files.values())
    try:
        text = folder.run_json.read_bytes().decode("utf-8", errors="replace")
    except OSError:
        text = ""
    found.update(sha for _path, sha in HASH_PAIR.findall(text))
    return found


def _check_hashes(folder: RunFolder, prepared: Prepared, recorded: set[str]) -> str:
    if not recorded:
        return "no recorded SHA-256 survived; checked against the readings only"
    record = new_record(prepared.loaded, prepared.rig, prepared.protocol_path,
                        prepared.rig_path, prepared.options, prepared.estimated)
    for kind, entry in (("protocol", record.protocol), ("rig", record.rig)):
        main = entry.files[-1]  # the file given; the ones before it are its bases
        if main.sha256 not in recorded:
            raise InputError(
                f"the {kind} {main.path} is not the one this run was started with (its SHA-256 "
                "differs from the one the run recorded)", file=str(folder.path),
                key=(f"--{kind}",), fix=f"give the {kind} file the run was started with")
    return "SHA-256 of the protocol and the rig match the ones the run recorded"


def _check_readings(folder: RunFolder, prepared: Prepared) -> str:
    mode = prepared.loaded.mode
    schema = mode.tables()[0]
    path = folder.path / schema.file_name
    if not path.exists() or path.stat().st_size == 0:
        return "no readings to check against"
    with open(path, encoding="utf-8", errors="replace") as handle:
        header = handle.readline().rstrip("\n")
    if header != csvw.header(list(schema.columns)):
        raise InputError(f"{schema.file_name} does not have the columns this protocol's mode "
                         f"({mode.name}) writes", file=str(path), key=("--protocol",),
                         fix="give the protocol the run was started with")
    columns = ["point", "current_A", "polarity", *(axis.setpoint_column
                                                    for axis in movable_axes())]
    try:
        readings = pd.read_csv(path, usecols=columns, on_bad_lines="skip")
    except (ValueError, pd.errors.ParserError) as error:
        raise InputError(f"{schema.file_name} cannot be read to check the protocol ({error})",
                         file=str(path)) from None
    readings = readings[pd.to_numeric(readings["point"], errors="coerce").notna()]
    measured = readings[readings["polarity"] != 0].groupby("point").first()
    if measured.empty:
        return "no readings to check against"
    planned = {point.number: point for point in iterate_points(
        plans_from(prepared.loaded.protocol, prepared.loaded.loop_values))}
    for number, row in measured.iterrows():
        point = planned.get(int(number))
        if point is None:
            raise InputError(f"{schema.file_name} holds point {number}, the protocol has only "
                             f"{len(planned)}", file=str(path), key=("--protocol",),
                             fix="give the protocol the run was started with")
        expected = {"current_A": point.current_A, **{
            axis.setpoint_column: point.setpoint(axis.name) for axis in movable_axes()}}
        got = {"current_A": abs(float(row["current_A"])),
               **{axis.setpoint_column: row[axis.setpoint_column] for axis in movable_axes()}}
        for column, value in expected.items():
            taken = got[column]
            same = (pd.isna(taken) if value is None
                    else not pd.isna(taken) and bool(np.isclose(float(taken), value,
                                                                rtol=SETPOINT_RTOL, atol=0.0)))
            if not same:
                raise InputError(
                    f"{schema.file_name}: point {number} was measured with {column} = {taken}, "
                    f"this protocol plans {value}", file=str(path), key=("--protocol",),
                    fix="give the protocol the run was started with")
    return f"the protocol's schedule matches the {len(measured)} point(s) in {schema.file_name}"


def rebuild_record(folder: RunFolder, request: RebuildRequest) -> list[str]:
    """Write a new run.json from the request's files, after the checks; the notes."""
    if not _record_is_lost(folder):
        raise InputError("run.json is readable: there is nothing to rebuild",
                         file=str(folder.run_json), key=("--rebuild-record",),
                         fix="drop --rebuild-record")
    options = RunOptions(simulate=request.simulate, seed=request.seed,
                         realtime=request.realtime)
    prepared = prepare(request.protocol, request.rig, options)
    notes = [_check_hashes(folder, prepared, recorded_hashes(folder)),
             _check_readings(folder, prepared)]
    damaged = folder.run_json
    if damaged.exists():
        aside = damaged.with_name("run.damaged.json")
        damaged.replace(aside)
        notes.append(f"the damaged run.json is kept as {aside.name}")
    record = new_record(prepared.loaded, prepared.rig, prepared.protocol_path,
                        prepared.rig_path, prepared.options, prepared.estimated,
                        event="rebuilt")
    record.history[0].reason = "run.json rebuilt from the protocol and rig: " + "; ".join(notes)
    folder.write_run_json(record)
    notes.append("run.json rebuilt")
    return notes
