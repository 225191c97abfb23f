"""Command-line commands that run, inspect and analyse a run folder."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from pathlib import Path

from acquire.errors import InputError


def cmd_run(args: argparse.Namespace) -> int:
    from acquire.runtime.session import RunOptions, start_run

    options = RunOptions(simulate=args.simulate, seed=args.seed, realtime=args.realtime,
                         progress=not args.quiet, operator=args.operator,
                         notify_in_rehearsal=args.notify)
    protocols = [Path(protocol) for protocol in args.protocol]
    if len(protocols) > 1:
        from acquire.runtime.night_plan import start_plan

        return start_plan(protocols, Path(args.rig), Path(args.out), options)
    return start_run(protocols[0], Path(args.rig), Path(args.out), options)


def cmd_resume(args: argparse.Namespace) -> int:
    from acquire.runtime.night_plan import is_plan, resume_plan
    from acquire.runtime.rebuild_record import RebuildRequest
    from acquire.runtime.resume import resume_run

    rebuild = None
    given = [option for option, value in (("--protocol", args.protocol), ("--rig", args.rig),
                                          ("--simulate", args.simulate),
                                          ("--seed", args.seed is not None)) if value]
    if args.rebuild_record:
        if not (args.protocol and args.rig):
            raise InputError("--rebuild-record needs the files the run was started with",
                             key=("--rebuild-record",), fix="add --protocol FILE --rig FILE")
        rebuild = RebuildRequest(Path(args.protocol), Path(args.rig), simulate=args.simulate,
                                 seed=args.seed)
    elif given:
        raise InputError(f"{given[0]} applies only with --rebuild-record (a resume takes the "
                         "files from run.json)", key=(given[0],), fix=f"drop {given[0]}")
    if is_plan(Path(args.dir)):
        return resume_plan(Path(args.dir), progress=not args.quiet)
    return resume_run(Path(args.dir), progress=not args.quiet,
                      keep_points_aside=args.keep_points_aside, rebuild=rebuild)


def cmd_reduce(args: argparse.Namespace) -> int:
    from acquire.store.rereduce import rereduce

    path, count = rereduce(Path(args.dir))
    print(f"wrote {path} ({count} rows)")
    return 0


def cmd_status(args: argparse.Namespace) -> int:
    from acquire.cli.status import show_plan_status, show_status
    from acquire.runtime.night_plan import is_plan

    if is_plan(Path(args.dir)):
        return show_plan_status(Path(args.dir))
    return show_status(Path(args.dir))


def _with_points(run_dir: str) -> Path:
    """The folder of a run that has reduced points (exit 2 otherwise)."""
    from acquire.store.run_folder import RunFolder

    folder = RunFolder(Path(run_dir))
    folder.read_run_json()
    points = folder.points
    try:
        with open(points, encoding="utf-8", errors="replace") as handle:
            has_rows = bool(handle.readline()) and bool(handle.readline().strip())
    except OSError:
        has_rows = False
    if not has_rows:
        raise InputError("has no reduced points yet (points.csv is missing or empty)",
                         file=str(folder.path),
                         fix="wait for the run's first point, or 'flipsweep reduce "
                             f"{folder.path}' if readings.csv has rows")
    return folder.path


def cmd_fit(args: argparse.Namespace) -> int:
    from acquire.analysis import fit_run
    from acquire.analysis.fit_summary import fit_summary
    from acquire.analysis.fit_tables import read_fits_table

    path = fit_run(_with_points(args.dir), angle_offset=args.angle_offset,
                   field_form=args.field_form, dR_dT_ohm_per_K=args.dr_dt,
                   heating_warn_K=args.heating_warn, anisotropy_T=args.anisotropy,
                   anisotropy_from_hall=args.anisotropy_from_hall,
                   include_flagged=args.include_flagged, inflate_errors=args.inflate_errors)
    for line in fit_summary(read_fits_table(path)):
        print(line)
    print(f"wrote {path}")
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    from acquire.analysis import report_run

    path = report_run(_with_points(args.dir))
    print(f"wrote {path}")
    return 0


def cmd_instruments(args: argparse.Namespace) -> int:
    from acquire.cli.instruments_list import list_instruments

    return list_instruments(Path(args.rig) if args.rig else None, probe=args.probe)


COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {
    "run": cmd_run, "resume": cmd_resume, "status": cmd_status, "reduce": cmd_reduce,
    "fit": cmd_fit, "report": cmd_report, "instruments": cmd_instruments,
}


def _run_args(add: Callable[[str, str], argparse.ArgumentParser]) -> None:
    run = add("run", "run a protocol on a rig (or rehearse it with --simulate); several "
                     "protocols run one after the other, each into its own folder under --out")
    run.add_argument("protocol", nargs="+", help="the protocol file (YAML); several make a "
                                                 "night plan")
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
    run.add_argument("--notify", action="store_true",
                     help="run the protocol's notify program in a simulated run too")


AddCommand = Callable[[str, str], argparse.ArgumentParser]


def _dir_command(name: str, text: str) -> Callable[[AddCommand], None]:
    def add_arguments(add: Callable[[str, str], argparse.ArgumentParser]) -> None:
        command = add(name, text)
        command.add_argument("dir", help="the run folder (the --out of 'flipsweep run')")
        if name == "resume":
            command.add_argument("--quiet", action="store_true", help="no progress bar")
            command.add_argument("--keep-points-aside", action="store_true",
                                 help="keep damaged rows and points without readings in files "
                                      "beside the tables, and measure those points again")
            command.add_argument("--rebuild-record", action="store_true",
                                 help="write a lost or damaged run.json again from --protocol "
                                      "and --rig, checked against the folder's data")
            command.add_argument("--protocol", help="with --rebuild-record: the run's protocol")
            command.add_argument("--rig", help="with --rebuild-record: the run's rig")
            command.add_argument("--simulate", action="store_true",
                                 help="with --rebuild-record: the run was a simulated one")
            command.add_argument("--seed", type=int, help="with --rebuild-record: its seed")
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
                "--anisotropy", type=float, default=None, metavar="TESLA",
                help="hold the rotation plane's anisotropy field fixed in the angle fits "
                     "(B_k in xy, the effective demagnetising field B_eff in zx/zy), instead "
                     "of fitting it from each sweep")
            command.add_argument(
                "--anisotropy-from-hall", action="store_true",
                help="zx and zy: give each longitudinal sweep the B_eff fitted to the "
                     "transverse sweep measured with it (its anomalous Hall signal is m_z)")
            command.add_argument(
                "--dr-dt", type=float, default=None, metavar="OHM_PER_K",
                help="the sample's dR/dT in ohm/K, to turn the heating slope into a "
                     "temperature rise when the run has no temperature series of its own")
            command.add_argument(
                "--heating-warn", type=float, default=5.0, metavar="K",
                help="flag a Joule temperature rise at the largest current above this many "
                     "kelvin (default: 5)")
            command.add_argument(
                "--include-flagged", action="store_true",
                help="keep points flagged compliance, instrument_error or wait_timeout in the "
                     "fits (left out by default); fits.csv counts them in n_flagged either way")
            command.add_argument(
                "--inflate-errors", action="store_true",
                help="multiply each error by sqrt(reduced chi^2) where it exceeds 1 (off by "
                     "default: an improbable chi^2 is reported as a model that does not "
                     "describe the data)")
    return add_arguments


def _instruments_args(add: Callable[[str, str], argparse.ArgumentParser]) -> None:
    command = add("instruments", "list VISA resources and ask each for its identity")
    command.add_argument("--rig", help="ask the rig's instruments at their addresses (without "
                                       "it: every resource pyvisa-py finds)")
    command.add_argument("--probe", action="store_true",
                         help="without --rig: ask serial ports for their identity too")


ARGUMENTS: dict[str, Callable[[AddCommand], None]] = {
    "run": _run_args,
    "resume": _dir_command("resume", "continue an interrupted run in place"),
    "status": _dir_command("status", "progress, ETA, last reduced point, state"),
    "reduce": _dir_command("reduce", "recompute points.csv from readings.csv"),
    "fit": _dir_command("fit", "angle / current / field fits -> fits.csv"),
    "report": _dir_command("report", "figures and a one-page summary"),
    "instruments": _instruments_args,
}
