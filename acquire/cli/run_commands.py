"""Command-line commands that run, inspect and analyse a run folder."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from datetime import datetime, timezone
from pathlib import Path


def cmd_run(args: argparse.Namespace) -> int:
    from acquire.runtime.session import RunOptions, start_run

    options = RunOptions(simulate=args.simulate, seed=args.seed, realtime=args.realtime,
                         progress=not args.quiet, operator=args.operator)
    return start_run(Path(args.protocol), Path(args.rig), Path(args.out), options)


def cmd_resume(args: argparse.Namespace) -> int:
    from acquire.runtime.resume import resume_run

    return resume_run(Path(args.dir), progress=not args.quiet)


def cmd_reduce(args: argparse.Namespace) -> int:
    from acquire.store.rereduce import rereduce

    path, count = rereduce(Path(args.dir))
    print(f"wrote {path} ({count} rows)")
    return 0


def cmd_status(args: argparse.Namespace) -> int:
    from acquire.store.run_folder import RunFolder

    folder = RunFolder(Path(args.dir))
    folder.read_run_json()
    status = folder.read_status()
    if status is None:
        starting = " (a process is starting the run)" if folder.is_running() else ""
        print(f"{folder.path}: no status yet{starting}")
        return 0
    updated = datetime.fromisoformat(status["updated_utc"])
    age = (datetime.now(timezone.utc) - updated).total_seconds()
    # The folder lock tells for sure on this machine; the heartbeat's age from elsewhere.
    alive = status["state"] == "running" and (folder.is_running() or age < 60)
    state = status["state"]
    if state == "running" and not alive:
        state = f"running? no heartbeat for {age:.0f} s: the process may have died; " \
                "'flipsweep resume' continues it"
    done, total = status["points_done"], status["points_total"]
    print(f"state      {state}")
    print(f"progress   {done}/{total} points ({done / max(total, 1):.0%})")
    if status["state"] == "running":
        print(f"ETA        {status['eta_s'] / 60:.1f} min (run clock)")
    print(f"heartbeat  {age:.0f} s ago (pid {status.get('pid')} on {status.get('host')})")
    last = status.get("last_point") or {}
    if last:
        print(f"last point {last['point']}: R = {last['resistance_ohm']:.6g} ohm, "
              f"unidirectional {last['unidirectional_ratio_ppm']:+.3f} ppm"
              + (f", flags {last['flags']}" if last.get("flags") else ""))
    return 0


def cmd_fit(args: argparse.Namespace) -> int:
    from acquire.analysis import fit_run
    from acquire.analysis.fit_summary import fit_summary
    from acquire.analysis.fit_tables import read_fits_table

    path = fit_run(Path(args.dir), angle_offset=args.angle_offset, field_form=args.field_form,
                   dR_dT_ohm_per_K=args.dr_dt, heating_warn_K=args.heating_warn)
    for line in fit_summary(read_fits_table(path)):
        print(line)
    print(f"wrote {path}")
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    from acquire.analysis import report_run

    path = report_run(Path(args.dir))
    print(f"wrote {path}")
    return 0


def cmd_instruments(args: argparse.Namespace) -> int:
    from acquire.cli.instruments_list import list_instruments

    return list_instruments(Path(args.rig) if args.rig else None)


COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {
    "run": cmd_run, "resume": cmd_resume, "status": cmd_status, "reduce": cmd_reduce,
    "fit": cmd_fit, "report": cmd_report, "instruments": cmd_instruments,
}


def _run_args(add: Callable[[str, str], argparse.ArgumentParser]) -> None:
    run = add("run", "run a protocol on a rig (or rehearse it with --simulate)")
    run.add_argument("protocol", help="the protocol file (YAML)")
    run.add_argument("--rig", required=True, help="the rig file (YAML): instruments and limits")
    run.add_argument("--out", required=True, metavar="DIR",
                     help="new folder for this run's files (must not hold a run already)")
    run.add_argument("--simulate", action="store_true",
                     help="simulated instruments with the rig's limits, on a virtual clock")
    run.add_argument("--seed", type=int, metavar="N",
                     help="noise seed of the simulated sample (with --simulate)")
    run.add_argument("--realtime", action="store_true",
                     help="simulate in real time instead of on the virtual clock")
    run.add_argument("--quiet", action="store_true", help="no progress bar")
    run.add_argument("--operator", metavar="NAME",
                     help="who runs it, recorded in run.json as host.user (default: your login "
                          "name; --operator '' records none)")


AddCommand = Callable[[str, str], argparse.ArgumentParser]


def _dir_command(name: str, text: str) -> Callable[[AddCommand], None]:
    def add_arguments(add: Callable[[str, str], argparse.ArgumentParser]) -> None:
        command = add(name, text)
        command.add_argument("dir", help="the run folder (the --out of 'flipsweep run')")
        if name == "resume":
            command.add_argument("--quiet", action="store_true", help="no progress bar")
        if name == "fit":
            command.add_argument(
                "--angle-offset", action="store_true",
                help="estimate the sample's mounting offset from the 2phi phase of the angle "
                     "sweeps and refit them with it removed (angle_offset_applied_deg)")
            command.add_argument(
                "--field-form", default="inverse", choices=["inverse", "linear"],
                help="model of the unidirectional part against field: 'inverse' "
                     "A + C*Bs/(|B| + Bs), 'linear' A + slope*|B| (default: inverse)")
            command.add_argument(
                "--dr-dt", type=float, default=None, metavar="OHM_PER_K",
                help="the sample's dR/dT in ohm/K, to turn the heating slope into a "
                     "temperature rise when the run has no temperature series of its own")
            command.add_argument(
                "--heating-warn", type=float, default=5.0, metavar="K",
                help="flag a Joule temperature rise at the largest current above this many "
                     "kelvin (default: 5)")
    return add_arguments


def _instruments_args(add: Callable[[str, str], argparse.ArgumentParser]) -> None:
    command = add("instruments", "list VISA resources and ask each for its identity")
    command.add_argument("--rig", help="ask the rig's instruments at their addresses (without "
                                       "it: every resource pyvisa-py finds)")


ARGUMENTS: dict[str, Callable[[AddCommand], None]] = {
    "run": _run_args,
    "resume": _dir_command("resume", "continue an interrupted run in place"),
    "status": _dir_command("status", "progress, ETA, last reduced point, state"),
    "reduce": _dir_command("reduce", "recompute points.csv from readings.csv"),
    "fit": _dir_command("fit", "angle / current / field fits -> fits.csv"),
    "report": _dir_command("report", "figures and a one-page summary"),
    "instruments": _instruments_args,
}
