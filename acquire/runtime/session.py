"""Starting a run: check the inputs, prepare the folder and its record, then run the first
stretch (acquire.runtime.execute) with the stop signals held by the run."""

from __future__ import annotations

import dataclasses
import logging
import sys
from pathlib import Path
from typing import Any

from acquire.errors import InputError
from acquire.inputs.load import LoadedProtocol, LoadedRig, check_pair, load_protocol, load_rig
from acquire.inputs.normalise import normalised_protocol, normalised_rig
from acquire.plan.estimate import Estimate, estimate, format_duration
from acquire.runtime.cautions import CAUTION
from acquire.runtime.clock import Clock, RealClock, VirtualClock
from acquire.runtime.execute import (
    EXIT_DONE,
    EXIT_FAILURE,
    EXIT_INTERRUPTED,
    RunOptions,
    closing,
    execute,
)
from acquire.runtime.stop_signals import Interrupted, StopSignals
from acquire.store.run_folder import (
    RunFolder,
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

__all__ = ["EXIT_DONE", "EXIT_FAILURE", "EXIT_INTERRUPTED", "Interrupted", "RunOptions",
           "input_record", "new_record", "prepare", "start_run"]

BUILT_IN_SIMULATION = "@sim"


def input_record(document_texts: dict[str, str], main: Path, normalised: dict[str, Any]
                 ) -> InputRecord:
    return InputRecord(
        path=str(main.resolve()),
        files=[FileRecord(path=path, sha256=sha256_text(text),
                          text=text if path == str(main.resolve()) else None)
               for path, text in document_texts.items()],
        normalised=normalised,
    )


def new_record(loaded: LoadedProtocol, rig: LoadedRig, protocol_path: Path, rig_path: Path,
               options: RunOptions, estimated: Estimate, event: str = "start") -> RunRecord:
    return RunRecord(
        protocol=input_record(loaded.document.texts, protocol_path, normalised_protocol(loaded)),
        rig=input_record(rig.document.texts, rig_path, normalised_rig(rig)),
        options=OptionsRecord(simulate=options.simulate, seed=options.seed,
                              realtime=options.realtime,
                              notify_in_rehearsal=options.notify_in_rehearsal),
        estimate=EstimateRecord(points=estimated.points, readings=estimated.readings,
                                duration_s=estimated.duration_s,
                                breakdown_s=estimated.breakdown_s),
        software=software_versions(),
        host=host_description(options.operator),
        history=[HistoryEvent(event=event, utc=utc_now())],
    )


@dataclasses.dataclass(frozen=True)
class Prepared:
    """A protocol and rig checked for a run, with its options settled and its estimate."""

    loaded: LoadedProtocol
    rig: LoadedRig
    protocol_path: Path
    rig_path: Path
    options: RunOptions
    estimated: Estimate


def prepare(protocol_path: Path, rig_path: Path, options: RunOptions,
            loaded_rig: LoadedRig | None = None) -> Prepared:
    """Everything checked before a folder or an instrument is touched (InputError: exit 2)."""
    loaded = load_protocol(protocol_path)
    rig = loaded_rig or load_rig(rig_path)
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
    if options.notify_in_rehearsal and not options.simulate:
        raise InputError("--notify applies to simulated runs (a real run always notifies)",
                         key=("--notify",), fix="drop --notify")
    if not options.simulate:
        from drivers.factory import driver_class

        for name, spec in rig.rig.instruments.items():
            if spec.driver is not None:
                driver_class(name, spec)  # a bad `driver:` is exit 2 before any folder
    if options.simulate:
        from acquire.runtime.simulation import sample_for

        sample_for(loaded, rig, options.seed)  # bad simulation settings: exit 2 before any file
    return Prepared(loaded, rig, protocol_path, rig_path, options, estimated)


def clock_for(options: RunOptions, offset_s: float = 0.0) -> Clock:
    if options.simulate and not options.realtime:
        clock = VirtualClock()
        clock.sleep(offset_s)
        return clock
    return RealClock(offset_s=offset_s)


def run_prepared(prepared: Prepared, out: Path, signals: StopSignals) -> int:
    """A new run of a prepared protocol into the new folder `out`."""
    options = prepared.options
    if not options.simulate:
        # Real instruments: the operator sees the cautions once more before anything is sent.
        print(CAUTION, file=sys.stderr)
    folder = RunFolder(out)
    folder.prepare_new(prepared.estimated.data_bytes)
    clock = clock_for(options)
    record = new_record(prepared.loaded, prepared.rig, prepared.protocol_path,
                        prepared.rig_path, options, prepared.estimated)
    with folder.locked():
        folder.write_run_json(record)
        end = execute(prepared.loaded, prepared.rig, folder, record, options, clock, 0,
                      prepared.estimated, options.seed, signals)
    if options.simulate:
        print(f"simulated duration {format_duration(clock.now())} "
              f"(estimate {format_duration(prepared.estimated.duration_s)})")
    return closing(folder, end)


def start_run(protocol_path: Path, rig_path: Path, out: Path, options: RunOptions) -> int:
    signals = StopSignals()
    with signals.installed():
        prepared = prepare(protocol_path, rig_path, options)
        return run_prepared(prepared, out, signals)
