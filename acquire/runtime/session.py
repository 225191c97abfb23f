"""Starting and ending a run: the shell around the runner (instruments, files, signals)."""

from __future__ import annotations

import dataclasses
import logging
import signal
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from acquire.errors import InputError, RunFailure
from acquire.inputs.load import LoadedProtocol, LoadedRig, check_pair, load_protocol, load_rig
from acquire.inputs.normalise import normalised_protocol, normalised_rig
from acquire.plan.estimate import Estimate, estimate, format_duration
from acquire.plan.limits import command_limits
from acquire.runtime.cautions import CAUTION
from acquire.runtime.clock import Clock, RealClock, VirtualClock
from acquire.runtime.instruments import Instruments
from acquire.runtime.progress import Progress
from acquire.runtime.runner import Runner, StopRun
from acquire.runtime.stop_signals import on_stop_signals
from acquire.runtime.sweep_log import SweepLog
from acquire.store.append_table import AppendTable
from acquire.store.run_folder import (
    RunFolder,
    attach_log,
    detach_log,
    host_description,
    software_versions,
    utc_now,
)
from acquire.store.run_record import (
    EstimateRecord,
    FileRecord,
    HistoryEvent,
    InputRecord,
    OptionsRecord,
    RunRecord,
    sha256_text,
)

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
    operator: str | None = None  # run.json's host.user: None records the login name
    realtime: bool = False
    progress: bool = True


def input_record(document_texts: dict[str, str], main: Path, normalised: dict[str, Any]
                 ) -> InputRecord:
    return InputRecord(
        path=str(main.resolve()),
        files=[FileRecord(path=path, sha256=sha256_text(text),
                          text=text if path == str(main.resolve()) else None)
               for path, text in document_texts.items()],
        normalised=normalised,
    )


def _raise_interrupt(signum: int, frame: object) -> None:
    raise Interrupted(signal.Signals(signum).name)


def _both(first: Callable[[Any], None], second: Callable[[Any], None], value: Any) -> None:
    first(value)
    second(value)


def _open(loaded: LoadedProtocol, rig: LoadedRig, clock: Clock, options: RunOptions,
          seed: int | None) -> tuple[dict[str, Any], Any]:
    from acquire.runtime.visa_library import resource_manager_for
    from drivers.factory import open_instruments

    if options.simulate:
        from acquire.runtime.simulation import simulate

        simulated = simulate(loaded, rig, clock, seed)
        return open_instruments(simulated.rig or rig.rig, simulated.resource_manager), simulated
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
    mode = loaded.mode
    tables = {schema.file_name: AppendTable(folder.path, schema) for schema in mode.tables()}
    virtual = isinstance(clock, VirtualClock)
    progress = Progress(folder, estimated.points, estimated.duration_s, clock.now,
                        show_bar=options.progress,
                        min_status_interval_s=DRY_RUN_SYNC_S if virtual else 0.0,
                        summary=mode.summary)
    sweeps = SweepLog(mode.summary)
    runner: Runner | None = None
    simulated = None
    state, code, reason = "failed", EXIT_FAILURE, ""
    record = folder.read_run_json()
    try:
        with on_stop_signals(_raise_interrupt):
            opened, simulated = _open(loaded, rig, clock, options, seed)
            instruments = Instruments(rig.rig, opened, command_limits(loaded, rig))
            runner = Runner(loaded, rig, instruments, clock, tables,
                            on_point=lambda o: _both(progress.point_done, sweeps.add, o),
                            heartbeat=progress.heartbeat,
                            sync_interval_s=DRY_RUN_SYNC_S if virtual else 0.0)
            record.instruments = runner.identities(opened)
            if simulated is not None:
                record.simulation = simulated.truth()
            folder.write_run_json(record)
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
        for table in tables.values():
            table.close()
        progress.close(state)
        if simulated is not None:
            simulated.close()
        record = folder.read_run_json()
        record.history.append(HistoryEvent(event=state, utc=utc_now(), reason=reason,
                                           run_clock_s=round(clock.now(), 3)))
        folder.write_run_json(record)
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
        from acquire.runtime.simulation import sample_for

        sample_for(loaded, rig, options.seed)  # bad simulation settings: exit 2 before any file
    folder = RunFolder(out)
    folder.prepare_new(estimated.data_bytes)
    clock: Clock = VirtualClock() if options.simulate and not options.realtime else RealClock()
    record = RunRecord(
        protocol=input_record(loaded.document.texts, protocol_path, normalised_protocol(loaded)),
        rig=input_record(rig.document.texts, rig_path, normalised_rig(rig)),
        options=OptionsRecord(simulate=options.simulate, seed=options.seed,
                              realtime=options.realtime),
        estimate=EstimateRecord(points=estimated.points, readings=estimated.readings,
                                duration_s=estimated.duration_s,
                                breakdown_s=estimated.breakdown_s),
        software=software_versions(),
        host=host_description(options.operator),
        history=[HistoryEvent(event="start", utc=utc_now())],
    )
    with folder.locked():
        folder.write_run_json(record)
        code = _execute(loaded, rig, folder, options, clock, 0, estimated, options.seed)
    if options.simulate:
        print(f"simulated duration {format_duration(clock.now())} "
              f"(estimate {format_duration(estimated.duration_s)})")
    if code == EXIT_DONE:
        print(f"run {folder.path}: done")
    else:
        print(f"run {folder.path}: interrupted; 'flipsweep resume {folder.path}' continues it")
    return code
