"""Runner overhead: flipsweep's dry run against a bare pyvisa loop sending the same commands.

Both drive the same pyvisa-sim instruments (with the live sample model behind them). First a
flipsweep dry run is recorded (every write and query, in order); then (a) a bare loop replays
that sequence straight through pyvisa, and (b) flipsweep runs the protocol again. The printed
ratio b/a is flipsweep's cost per transaction relative to pyvisa's own. Target: <= 1.3.

    python bench/overhead.py [PROTOCOL]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import pyvisa.resources

from acquire.inputs.load import load_protocol, load_rig
from acquire.runtime.clock import VirtualClock
from acquire.runtime.session import RunOptions, start_run

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"
REPEATS = 5


def record(protocol: Path) -> list[tuple[str, str, str]]:
    calls: list[tuple[str, str, str]] = []
    resource_class = pyvisa.resources.MessageBasedResource
    original_write, original_query = resource_class.write, resource_class.query

    def write(self, message, *args, **kwargs):  # type: ignore[no-untyped-def]
        calls.append(("write", self.resource_name, message))
        return original_write(self, message, *args, **kwargs)

    def query(self, message, *args, **kwargs):  # type: ignore[no-untyped-def]
        calls.append(("query", self.resource_name, message))
        return original_query(self, message, *args, **kwargs)

    resource_class.write, resource_class.query = write, query  # type: ignore[method-assign]
    try:
        with tempfile.TemporaryDirectory() as folder:
            start_run(protocol, RIG, Path(folder) / "run", RunOptions(True, 1, False, False))
    finally:
        resource_class.write, resource_class.query = original_write, original_query
    # query() calls write() inside pyvisa: keep the outer call only.
    cleaned: list[tuple[str, str, str]] = []
    for call in calls:
        if cleaned and cleaned[-1][0] == "query" and call == ("write", *cleaned[-1][1:]):
            continue
        cleaned.append(call)
    return cleaned


def bare_loop(protocol: Path, calls: list[tuple[str, str, str]]) -> float:
    from acquire.runtime.simulation import sample_for
    from sim_instruments.simulated_rig import open_simulated_rig

    loaded, rig = load_protocol(protocol), load_rig(RIG)
    model = sample_for(loaded, rig, 1)
    # Opening the instruments counts in both arms: a bare script has to open them too.
    started = time.perf_counter()
    simulated = open_simulated_rig(rig.rig, model, VirtualClock())
    handles = {}
    for spec in rig.rig.instruments.values():
        handle = simulated.resource_manager.open_resource(spec.resource)
        handle.read_termination = spec.read_termination
        handle.write_termination = spec.write_termination
        handles[handle.resource_name] = handle
    for kind, resource, message in calls:
        if kind == "write":
            handles[resource].write(message)
        else:
            handles[resource].query(message)
    elapsed = time.perf_counter() - started
    simulated.close()
    return elapsed


def flipsweep_run(protocol: Path) -> float:
    with tempfile.TemporaryDirectory() as folder:
        started = time.perf_counter()
        start_run(protocol, RIG, Path(folder) / "run", RunOptions(True, 1, False, False))
        return time.perf_counter() - started


def main() -> None:
    protocol = Path(sys.argv[1]) if len(sys.argv) > 1 else ROOT / "protocols" / "angle_scan.yaml"
    calls = record(protocol)
    # Interleaved repeats, best of each: other load on the machine slows single runs.
    bare_times, full_times = [], []
    for _ in range(REPEATS):
        bare_times.append(bare_loop(protocol, calls))
        full_times.append(flipsweep_run(protocol))
    bare, full = min(bare_times), min(full_times)
    print(f"protocol            {protocol.name}")
    print(f"transactions        {len(calls)}")
    print(f"(a) bare pyvisa     {bare:.3f} s  ({len(calls) / bare:,.0f} transactions/s)")
    print(f"(b) flipsweep run   {full:.3f} s  (whole run: load, plan, files, reduction)")
    print(f"ratio b/a           {full / bare:.2f}   (target <= 1.3)")


if __name__ == "__main__":
    main()
