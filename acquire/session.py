"""Starting and ending a run: the shell around the runner (instruments, files, signals)."""

from __future__ import annotations

import dataclasses
import logging
import signal
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from acquire.cautions import CAUTION
from acquire.clock import Clock, RealClock, VirtualClock
from acquire.errors import InputError, RunFailure
from acquire.estimate import Estimate, estimate, format_duration
from acquire.instrument_set import Instruments
from acquire.load import LoadedProtocol, LoadedRig, check_pair, load_protocol, load_rig
from acquire.normalise import normalised_protocol, normalised_rig
from acquire.progress import Progress
from acquire.run_folder import (
    RunFolder,
    attach_log,
    detach_log,
    host_description,
    sha256_text,
    software_versions,
    utc_now,
)
from acquire.runner import PointOutcome, Runner, StopRun
from acquire.stop_signals import on_stop_signals
from acquire.store import AppendTable
from acquire.tables import POINT_COLUMN_SPECS, READING_COLUMNS

log = logging.getLogger("flipsweep")

EXIT_DONE, EXIT_FAILURE, EXIT_INTERRUPTED = 0, 1, 130
BUILT_IN_SIMULATION = "@sim"
DRY_RUN_SYNC_S = 1.0  # wall seconds between fsyncs and status writes on the virtual clock


class Interrupted(Exception):
    """SIGINT or SIGTERM: stop, make safe, exit 130."""


@dataclass(frozen=True)
class RunOptions:
    simulate: bool = False
    seed: int | None = None
    realtime: bool = False
    progress: bool = True


def files_record(document_texts: dict[str, str], main: Path) -> dict[str, Any]:
    return {
        "path": str(main.resolve()),
        "files": [
            {"path": path, "sha256": sha256_text(text), "text": text}
            for path, text in document_texts.items()
        ],
    }


def changed_files(record: dict[str, Any]) -> list[str]:
    changed = []
    for entry in record["files"]:
        try:
            text = Path(entry["path"]).read_text(encoding="utf-8")
        except OSError:
            changed.append(f"{entry['path']} (missing)")
            continue
        if sha256_text(text) != entry["sha256"]:
            changed.append(entry["path"])
    return changed


def _raise_interrupt(signum: int, frame: object) -> None:
    raise Interrupted(signal.Signals(signum).name)


class SweepLog:
    """One log line per pass of the innermost loop."""

    def __init__(self) -> None:
        self.sweep: int | None = None
        self.rows: list[tuple[float, float]] = []
        self.first_point = 0

    def add(self, outcome: PointOutcome) -> None:
        if self.sweep is not None and outcome.point.sweep != self.sweep:
            self.flush()
        if self.sweep != outcome.point.sweep:
            self.sweep, self.first_point = outcome.point.sweep, outcome.point.number
        if outcome.result is not None:
            self.rows.append((float(outcome.result.resistance_ohm[0]),
                              float(outcome.result.unidirectional_ratio[0])))

    def flush(self) -> None:
        if self.sweep is None:
            return
        if self.rows:
            resistances = [r for r, _ in self.rows]
            ratios = [u * 1e6 for _, u in self.rows]
            count = len(self.rows)
            log.info(
                "sweep %d (from point %d): %d point%s, R %.6g..%.6g ohm, "
                "unidirectional %+.2f..%+.2f ppm", self.sweep, self.first_point, count,
                "" if count == 1 else "s", min(resistances), max(resistances), min(ratios),
                max(ratios),
            )
        else:
            log.info("sweep %d (from point %d): no point measured", self.sweep, self.first_point)
        self.rows = []


def _open(loaded: LoadedProtocol, rig: LoadedRig, clock: Clock, options: RunOptions,
          seed: int | None) -> tuple[dict[str, Any], Any]:
    from drivers.factory import open_instruments
    from drivers.visa_library import resource_manager_for

    if options.simulate:
        from sim_instruments.for_protocol import simulate

        simulated = simulate(loaded, rig, clock, seed)
        return open_instruments(rig.rig, simulated.resource_manager), simulated
    manager = resource_manager_for(rig.rig.visa_library, rig.rig, rig.path.parent)
    return open_instruments(rig.rig, manager), None


def _notify(loaded: LoadedProtocol, state: str, folder: RunFolder) -> None:
    command = loaded.protocol.notify
    if not command:
        return
    try:
        # An argument list, never a shell: a protocol file cannot inject shell syntax.
        subprocess.run([*command, state, str(folder.path)], timeout=60, check=False,
                       stdin=subprocess.DEVNULL)
    except (OSError, subprocess.TimeoutExpired) as error:
        log.warning("notification program failed: %s", error)


def _execute(
    loaded: LoadedProtocol, rig: LoadedRig, folder: RunFolder, options: RunOptions,
    clock: Clock, start_point: int, estimated: Estimate, seed: int | None,
) -> int:
    handler = attach_log(folder)
    readings = AppendTable(folder.readings, READING_COLUMNS, "one row per voltmeter reading")
    points = AppendTable(folder.points, POINT_COLUMN_SPECS, "one row per (point, channel)")
    virtual = isinstance(clock, VirtualClock)
    progress = Progress(folder, estimated.points, estimated.duration_s, clock.now,
                        show_bar=options.progress,
                        min_status_interval_s=DRY_RUN_SYNC_S if virtual else 0.0)
    sweeps = SweepLog()
    runner: Runner | None = None
    simulated = None
    state, code, reason = "failed", EXIT_FAILURE, ""
    document = folder.read_run_json()
    try:
        with on_stop_signals(_raise_interrupt):
            opened, simulated = _open(loaded, rig, clock, options, seed)
            instruments = Instruments.from_opened(rig, opened, loaded.protocol.readings.channels)
            runner = Runner(loaded, rig, instruments, clock, readings, points,
                            on_point=lambda o: (progress.point_done(o), sweeps.add(o)),
                            heartbeat=progress.heartbeat,
                            sync_interval_s=DRY_RUN_SYNC_S if virtual else 0.0)
            document["instruments"] = runner.identities(opened)
            if simulated is not None:
                document["simulation"] = simulated.truth()
            folder.write_run_json(document)
            progress.start(start_point)
            log.info("starting at point %d of %d", start_point, estimated.points)
            runner.configure()
            runner.run(start_point)
            sweeps.flush()
            state, code = "done", EXIT_DONE
    except Interrupted as signal_name:
        state, code, reason = "interrupted", EXIT_INTERRUPTED, f"interrupted by {signal_name}"
    except KeyboardInterrupt:
        state, code, reason = "interrupted", EXIT_INTERRUPTED, "interrupted by the user"
    except StopRun as error:
        reason = str(error)
    except InputError:
        raise
    except Exception as error:  # any other failure still ends in the safe state
        reason = f"{type(error).__name__}: {error}"
        log.exception("run failed")
    finally:
        problems = runner.shutdown() if runner is not None else []
        for problem in problems:
            log.error("safe shutdown: %s", problem)
        readings.close()
        points.close()
        progress.close(state)
        if simulated is not None:
            simulated.close()
        document = folder.read_run_json()
        document["history"].append({"event": state, "utc": utc_now(), "reason": reason,
                                     "run_clock_s": round(clock.now(), 3)})
        folder.write_run_json(document)
        if reason:
            log.error("%s: %s", state, reason)
        log.info("run %s at run-clock %s", state, format_duration(clock.now()))
        detach_log(handler)
        _notify(loaded, state, folder)
    if code == EXIT_FAILURE:
        raise RunFailure(reason + " (instruments left in the safe state)")
    return code


def start_run(protocol_path: Path, rig_path: Path, out: Path, options: RunOptions) -> int:
    loaded = load_protocol(protocol_path)
    rig = load_rig(rig_path)
    check_pair(loaded, rig)
    estimated = estimate(loaded, rig)
    if rig.rig.visa_library == BUILT_IN_SIMULATION and not options.simulate:
        # Static pyvisa-sim replies cannot follow a field ramp or a current: the built-in
        # simulated rig only makes sense with the sample model behind it.
        print(f"note: rig {rig.rig.name!r} is the built-in simulation; running with --simulate")
        options = dataclasses.replace(options, simulate=True)
    if options.seed is not None and not options.simulate:
        raise InputError("--seed applies to simulated runs", key=("--seed",),
                         fix="add --simulate or drop --seed")
    if not options.simulate:
        # Real instruments: the operator sees the cautions once more before anything is sent.
        print(CAUTION, file=sys.stderr)
    if options.simulate:
        from sim_instruments.for_protocol import sample_for

        sample_for(loaded, rig, options.seed)  # bad simulation settings: exit 2 before any file
    folder = RunFolder(out)
    folder.prepare_new(estimated.data_bytes)
    clock: Clock = VirtualClock() if options.simulate and not options.realtime else RealClock()
    document = {
        "flipsweep_run": 1,
        "protocol": {**files_record(loaded.document.texts, protocol_path),
                     "normalised": normalised_protocol(loaded)},
        "rig": {**files_record(rig.document.texts, rig_path), "normalised": normalised_rig(rig)},
        "options": {"simulate": options.simulate, "seed": options.seed,
                    "realtime": options.realtime},
        "estimate": {"points": estimated.points, "readings": estimated.readings,
                     "duration_s": estimated.duration_s, "breakdown_s": estimated.breakdown_s},
        "software": software_versions(),
        "host": host_description(),
        "history": [{"event": "start", "utc": utc_now()}],
    }
    with folder.locked():
        folder.write_run_json(document)
        code = _execute(loaded, rig, folder, options, clock, 0, estimated, options.seed)
    if options.simulate:
        print(f"simulated duration {format_duration(clock.now())} "
              f"(estimate {format_duration(estimated.duration_s)})")
    if code == EXIT_DONE:
        print(f"run {folder.path}: done")
    else:
        print(f"run {folder.path}: interrupted; 'flipsweep resume {folder.path}' continues it")
    return code
