"""One stretch of a run, start or resume: open the instruments, run, and end it properly.

However the stretch ends -- done, a stop signal, an instrument failure, a full disk, a bug --
the end is the same: the safe shutdown (stop signals from then on are noted, not acted on), the
state read back, the tables closed, status.json and run.json's history written, the log
closed, `notify` run; each of these is attempted even if an earlier one fails. The closing
line says what was verified; the exit code is 1 whenever the safe state was not verified.
"""

from __future__ import annotations

import logging
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from acquire.errors import InputError, RunFailure
from acquire.inputs.load import LoadedProtocol, LoadedRig
from acquire.plan.estimate import Estimate, format_duration
from acquire.plan.limits import command_limits
from acquire.runtime.clock import Clock, VirtualClock
from acquire.runtime.fault_budget import InstrumentSilent
from acquire.runtime.instruments import Instruments
from acquire.runtime.progress import Progress
from acquire.runtime.runner import Runner, StopRun
from acquire.runtime.safe_shutdown import SafeReport, make_safe
from acquire.runtime.stop_signals import Interrupted, StopSignals
from acquire.runtime.sweep_log import SweepLog
from acquire.store.append_table import AppendTable
from acquire.store.run_folder import RunFolder, attach_log, detach_log, utc_now
from acquire.store.run_record import HistoryEvent, RunRecord

log = logging.getLogger("flipsweep")

EXIT_DONE, EXIT_FAILURE, EXIT_INTERRUPTED = 0, 1, 130
DRY_RUN_SYNC_S = 1.0  # wall seconds between fsyncs and status writes on the virtual clock


@dataclass(frozen=True)
class RunOptions:
    simulate: bool = False
    seed: int | None = None
    operator: str | None = None  # run.json's host.user: None records the login name
    realtime: bool = False
    progress: bool = True
    notify_in_rehearsal: bool = False  # a simulated run runs `notify` only when asked
    notify: bool = True  # False: the caller notifies (a night plan, once at its end)


@dataclass
class RunEnd:
    """How one stretch of a run ended."""

    state: str = "failed"  # done, interrupted, failed
    reason: str = ""
    safe: SafeReport = field(default_factory=SafeReport)
    signals: str = ""  # what the stop signals during the shutdown were
    storage: list[str] = field(default_factory=list)  # files that could not be written

    @property
    def code(self) -> int:
        if self.state == "failed" or not self.safe.ok:
            return EXIT_FAILURE
        return EXIT_INTERRUPTED if self.state == "interrupted" else EXIT_DONE

    def clauses(self) -> str:
        parts = [self.reason] if self.reason else []
        parts += [self.safe.summary()]
        if self.signals:
            parts.append(self.signals)
        parts += [problem for problem in self.storage if problem != self.reason]
        return "; ".join(parts)


def storage_reason(error: OSError) -> str:
    where = f" {error.filename}" if error.filename else ""
    return f"cannot write{where}: {error.strerror or error}"


def _notify(loaded: LoadedProtocol, state: str, folder: RunFolder, options: RunOptions) -> None:
    command = loaded.protocol.notify
    if not command or not options.notify:
        return
    if options.simulate and not options.notify_in_rehearsal:
        log.info("notify: not run in a rehearsal (--notify runs it)")
        return
    notify_program(command, state, str(folder.path))


def notify_program(command: list[str], state: str, path: str) -> None:
    try:
        # An argument list, never a shell: a protocol file cannot inject shell syntax.
        subprocess.run([*command, state, path], timeout=60, check=False,
                       stdin=subprocess.DEVNULL)
    except (OSError, subprocess.TimeoutExpired) as error:
        log.warning("notification program failed: %s", error)


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


def _both(first: Callable[[Any], None], second: Callable[[Any], None], value: Any) -> None:
    first(value)
    second(value)


class Stretch:
    """The instruments, tables and progress of one stretch, and its proper end."""

    def __init__(self, loaded: LoadedProtocol, rig: LoadedRig, folder: RunFolder,
                 record: RunRecord, options: RunOptions, clock: Clock, estimated: Estimate,
                 signals: StopSignals) -> None:
        self.loaded, self.rig, self.folder, self.record = loaded, rig, folder, record
        self.options, self.clock, self.signals = options, clock, signals
        try:
            folder.check_own_files()
            self.log_handler = attach_log(folder)
            folder.reserve_space()
        except OSError as error:
            raise InputError(f"the run folder cannot be written ({error.strerror})",
                             file=str(folder.path),
                             fix="make the folder writable (or copy it to a disk that is)"
                             ) from None
        mode = loaded.mode
        self.tables = {schema.file_name: AppendTable(folder.path, schema)
                       for schema in mode.tables()}
        virtual = isinstance(clock, VirtualClock)
        self.sync_s = DRY_RUN_SYNC_S if virtual else 0.0
        # The inputs' SHA-256 also in status.json: if run.json is lost, a rebuilt one is
        # checked against them (`resume --rebuild-record`).
        inputs = {kind: {entry.path: entry.sha256 for entry in entry_record.files}
                  for kind, entry_record in (("protocol", record.protocol), ("rig", record.rig))}
        self.progress = Progress(folder, estimated.points, estimated.duration_s, clock.now,
                                 show_bar=options.progress, min_status_interval_s=self.sync_s,
                                 summary=mode.summary, extra_status={"inputs": inputs})
        self.sweeps = SweepLog(mode.summary)
        self.instruments: Instruments | None = None
        self.runner: Runner | None = None
        self.simulated: Any = None

    def run(self, start_point: int, seed: int | None, estimated: Estimate) -> RunEnd:
        end = RunEnd()
        try:
            try:
                opened, self.simulated = _open(self.loaded, self.rig, self.clock, self.options,
                                               seed)
                self.instruments = Instruments(self.rig.rig, opened,
                                               command_limits(self.loaded, self.rig))
                progress = self.progress
                self.runner = runner = Runner(
                    self.loaded, self.rig, self.instruments, self.clock, self.tables,
                    on_point=lambda o: _both(progress.point_done, self.sweeps.add, o),
                    heartbeat=progress.heartbeat, sync_interval_s=self.sync_s,
                    activity=progress.activity)
                self.record.instruments = runner.identities(opened)
                if self.simulated is not None:
                    self.record.simulation = self.simulated.truth()
                self.folder.write_run_json(self.record)
                progress.start(start_point)
                log.info("starting at point %d of %d", start_point, estimated.points)
                runner.configure()
                runner.run(start_point)
                self.sweeps.flush()
                end = RunEnd("done")
            except Interrupted as signal_name:
                end = RunEnd("interrupted", f"interrupted by {signal_name}")
            except (StopRun, InstrumentSilent) as error:
                end = RunEnd("failed", str(error))
            except OSError as error:  # the disk is full, the folder became read-only
                end = RunEnd("failed", storage_reason(error))
                log.error("run folder: %s", end.reason)
            except InputError as error:  # found before anything was sent (exit 2)
                end = RunEnd("failed", error.one_line())
                raise
            except Exception as error:  # any other failure still ends in the safe state
                end = RunEnd("failed", f"{type(error).__name__}: {error}")
                log.exception("run failed")
        except Interrupted as late:  # the first stop signal came while a failure was noted
            if not end.reason:
                end = RunEnd("interrupted", f"interrupted by {late}")
        finally:
            self.signals.hold()
            self.finish(end)
        return end

    def finish(self, end: RunEnd) -> None:
        """Everything the end of a stretch does, each part attempted whatever the others did."""
        self.folder.release_space()  # room for the status, the history and the log
        self.progress.activity("making the instruments safe")
        log.info("safe shutdown (%s)", end.state)
        instruments = self.instruments
        if instruments is not None:
            disconnected = self.runner._disconnected if self.runner is not None else set()
            end.safe = self._attempt("safe shutdown", end, lambda: make_safe(
                instruments, self.loaded.protocol.finish, disconnected)) or SafeReport(
                unverified=["the safe shutdown itself failed (see run.log)"])
        else:
            end.safe = SafeReport(opened=False)
        for problem in end.safe.problems:
            log.error("safe shutdown: %s", problem)
        for table in self.tables.values():
            self._attempt(f"close {table.path.name}", end, table.close)
        if self.simulated is not None:
            self._attempt("close the simulation", end, self.simulated.close)
        if end.storage and end.state == "done":
            end.state, end.reason = "failed", end.storage[0]
        end.signals = self.signals.note()
        received = list(self.signals.received)  # one list for status.json and the history
        summary = end.safe.summary()
        extra = {"reason": end.reason, "safe_state": summary, "safe_state_verified": end.safe.ok,
                 "stop_signals": received}
        self._attempt("write status.json", end, lambda: self.progress.close(end.state, extra))
        self.record.history.append(HistoryEvent(
            event=end.state, utc=utc_now(), reason=end.reason or None,
            run_clock_s=round(self.clock.now(), 3), safe_state=summary,
            stop_signals=received or None))
        self._attempt("write run.json", end, lambda: self.folder.write_run_json(self.record))
        if end.reason:
            log.error("%s: %s", end.state, end.reason)
        if end.signals:
            log.warning("%s", end.signals)
        (log.info if end.safe.ok else log.error)("%s", summary)
        log.info("run %s at run-clock %s", end.state, format_duration(self.clock.now()))
        _notify(self.loaded, end.state, self.folder, self.options)
        detach_log(self.log_handler)

    def _attempt(self, what: str, end: RunEnd, action: Callable[[], Any]) -> Any:
        try:
            return action()
        except OSError as error:
            end.storage.append(storage_reason(error))
            log.error("%s: %s", what, storage_reason(error))
        except Exception as error:  # the end must go on: a bug here still notifies
            end.storage.append(f"{what}: {type(error).__name__}: {error}")
            log.exception("%s failed", what)
        return None


def execute(loaded: LoadedProtocol, rig: LoadedRig, folder: RunFolder, record: RunRecord,
            options: RunOptions, clock: Clock, start_point: int, estimated: Estimate,
            seed: int | None, signals: StopSignals) -> RunEnd:
    return Stretch(loaded, rig, folder, record, options, clock, estimated, signals).run(
        start_point, seed, estimated)


def closing(folder: RunFolder, end: RunEnd, what: str = "run") -> int:
    """The closing line (stdout), or RunFailure (the command line prints it, exit 1)."""
    again = f"'flipsweep resume {folder.path}' continues it"
    if end.code == EXIT_FAILURE:
        raise RunFailure(f"{what} {folder.path}: {end.state}: {end.clauses()}; "
                         + (again if end.state != "done" else "check the instruments"))
    if end.state == "done":
        print(f"{what} {folder.path}: done; {end.clauses()}")
    else:
        print(f"{what} {folder.path}: {end.clauses()}; {again}")
    sys.stdout.flush()
    return end.code
