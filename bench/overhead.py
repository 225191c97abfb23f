"""Runner overhead: flipsweep's dry run against a bare pyvisa loop doing the same work.

Both arms drive the same pyvisa-sim instruments with the live sample model behind them, on a
virtual clock. A flipsweep dry run is recorded first: every write and query in order, and every
sleep the runner itself makes (settles, wait polls), so the bare arm replays the same clock:
the simulated field ramps and rotations then end where they ended in the run, and the sample
model re-solves its magnetisation as often in both arms (a replay without the sleeps would see
the field still ramping at every query and do far more physics). Sleeps the simulated meters
make for their integration time happen in both arms by themselves.

Then pairs are timed, interleaved: (a) the bare replay, (b) `flipsweep run --simulate` of the
protocol. The ratio b/a of each pair is flipsweep's cost relative to pyvisa's own for the same
physics; the median over the pairs is printed last, with its spread. Target <= 1.15.

    python bench/overhead.py [PROTOCOL] [--pairs N]
"""

from __future__ import annotations

import argparse
import contextlib
import io
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import pyvisa.resources

from acquire.inputs.load import load_protocol, load_rig
from acquire.runtime.clock import VirtualClock
from acquire.runtime.session import RunOptions, start_run

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"
SIMULATOR_PACKAGE = "sim_instruments"

Event = tuple[str, str, Any]  # ("write" | "query", resource, message) or ("sleep", "", s)


def _called_from_simulator() -> bool:
    frame = sys._getframe(2)
    while frame is not None:
        if frame.f_globals.get("__name__", "").startswith(SIMULATOR_PACKAGE):
            return True
        frame = frame.f_back
    return False


def record(protocol: Path) -> list[Event]:
    events: list[Event] = []
    resource_class = pyvisa.resources.MessageBasedResource
    original_write, original_query = resource_class.write, resource_class.query
    original_sleep = VirtualClock.sleep
    depth = [0]

    def write(self, message, *args, **kwargs):  # type: ignore[no-untyped-def]
        if depth[0] == 0:
            events.append(("write", self.resource_name, message))
        return original_write(self, message, *args, **kwargs)

    def query(self, message, *args, **kwargs):  # type: ignore[no-untyped-def]
        events.append(("query", self.resource_name, message))
        depth[0] += 1  # query() calls write() inside pyvisa: keep the outer call only
        try:
            return original_query(self, message, *args, **kwargs)
        finally:
            depth[0] -= 1

    def sleep(self, seconds):  # type: ignore[no-untyped-def]
        if not _called_from_simulator():
            events.append(("sleep", "", seconds))
        return original_sleep(self, seconds)

    resource_class.write, resource_class.query = write, query  # type: ignore[method-assign]
    VirtualClock.sleep = sleep  # type: ignore[method-assign]
    try:
        with tempfile.TemporaryDirectory() as folder, contextlib.redirect_stdout(io.StringIO()):
            start_run(protocol, RIG, Path(folder) / "run", RunOptions(True, 1, False, False))
    finally:
        resource_class.write, resource_class.query = original_write, original_query
        VirtualClock.sleep = original_sleep  # type: ignore[method-assign]
    return events


def bare_replay(protocol: Path, events: list[Event]) -> float:
    from acquire.runtime.simulation import sample_for
    from sim_instruments.simulated_rig import open_simulated_rig

    loaded, rig = load_protocol(protocol), load_rig(RIG)
    model = sample_for(loaded, rig, 1)
    clock = VirtualClock()
    # Opening the instruments counts in both arms: a bare script has to open them too.
    started = time.perf_counter()
    simulated = open_simulated_rig(rig.rig, model, clock)
    handles = {}
    for spec in rig.rig.instruments.values():
        handle = simulated.resource_manager.open_resource(spec.resource)
        handle.read_termination = spec.read_termination
        handle.write_termination = spec.write_termination
        handles[handle.resource_name] = handle
    for kind, resource, payload in events:
        if kind == "write":
            handles[resource].write(payload)
        elif kind == "query":
            handles[resource].query(payload)
        else:
            clock.sleep(payload)
    elapsed = time.perf_counter() - started
    simulated.close()
    return elapsed


def flipsweep_run(protocol: Path) -> float:
    with tempfile.TemporaryDirectory() as folder, contextlib.redirect_stdout(io.StringIO()):
        started = time.perf_counter()
        start_run(protocol, RIG, Path(folder) / "run", RunOptions(True, 1, False, False))
        return time.perf_counter() - started


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("protocol", nargs="?", type=Path,
                        default=ROOT / "protocols" / "angle_scan.yaml")
    parser.add_argument("--pairs", type=int, default=7, help="interleaved pairs (>= 7)")
    arguments = parser.parse_args()
    protocol = arguments.protocol
    events = record(protocol)
    transactions = sum(1 for kind, _, _ in events if kind != "sleep")
    ratios, bare_times, full_times = [], [], []
    for _ in range(max(arguments.pairs, 1)):
        bare = bare_replay(protocol, events)
        full = flipsweep_run(protocol)
        bare_times.append(bare)
        full_times.append(full)
        ratios.append(full / bare)
    print(f"protocol            {protocol.name}")
    print(f"transactions        {transactions}  (+ {len(events) - transactions} runner sleeps "
          "replayed)")
    print(f"(a) bare pyvisa     median {statistics.median(bare_times):.3f} s")
    print(f"(b) flipsweep run   median {statistics.median(full_times):.3f} s "
          "(whole run: load, plan, files, reduction)")
    print(f"pairs               {len(ratios)}: ratios {min(ratios):.2f}..{max(ratios):.2f}")
    print(f"ratio b/a           {statistics.median(ratios):.2f}   (median of pairs; "
          "target <= 1.15)")


if __name__ == "__main__":
    main()
