"""`flipsweep serve`: a simulated rig as LAN instruments on 127.0.0.1, with optional faults.

    flipsweep serve RIG --protocol PROTOCOL [--port-base 5025] [--seed N] [--write-rig PATH]
                    [--delay SECONDS] [--fault-rate F] [--drop-rate F] [--garble-rate F]
                    [--stall NAME[@N]] [--fault-seed N]

A second terminal then runs `flipsweep run PROTOCOL --rig PATH --out DIR` against the rig file
written by --write-rig, exactly as on a real rig. Ctrl-C (or SIGTERM) stops the server: that is
its normal end, so it exits 0.
"""

from __future__ import annotations

import argparse
import logging
import sys
import threading
from collections.abc import Callable
from contextlib import AbstractContextManager
from pathlib import Path

from acquire.errors import InputError
from acquire.runtime.stop_signals import on_stop_signals
from sim_instruments.faults import FaultPlan, parse_stall

DEFAULT_PORT_BASE = 5025  # the port commonly used for raw SCPI over TCP (common practice)
WAKE_S = 1.0  # the main thread's longest sleep between checks for a stop signal


def fault_plan_from(args: argparse.Namespace) -> FaultPlan:
    stall_after: dict[str, int] = {}
    for text in args.stall:
        try:
            name, after = parse_stall(text)
        except ValueError as error:
            raise InputError(str(error), key=("--stall",), fix="e.g. --stall vxx@200") from None
        stall_after[name] = after
    return FaultPlan.from_rates(
        fault_rate=args.fault_rate, drop_rate=args.drop_rate, garble_rate=args.garble_rate,
        delay_s=args.delay, stall_after=stall_after, seed=args.fault_seed,
    )


def stop_on_signals(stop: threading.Event) -> AbstractContextManager[None]:
    return on_stop_signals(lambda signum, frame: stop.set())


def _show_faults(logger_name: str) -> None:
    """Injected faults and refused connections to stderr, so the operator sees what happened."""
    logger = logging.getLogger(logger_name)
    if not logger.handlers:
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(asctime)s %(message)s"))
        logger.addHandler(handler)
    logger.setLevel(logging.INFO)


def cmd_serve(args: argparse.Namespace) -> int:
    from acquire.runtime.serve import served_rig
    from sim_instruments import socket_server

    plan = fault_plan_from(args)
    served = served_rig(Path(args.protocol), Path(args.rig), port_base=args.port_base,
                        seed=args.seed, faults=plan)
    _show_faults(socket_server.__name__)
    stop = threading.Event()
    try:
        with stop_on_signals(stop):
            resources = served.start()
            if args.write_rig:
                print(f"wrote {served.write_rig(Path(args.write_rig))}")
            width = max(len(name) for name in resources)
            for name, resource in resources.items():
                role = served.rig.instruments[name].role
                print(f"{name:<{width}}  {role:<14}  {resource}")
            print("serving; Ctrl-C to stop", flush=True)
            while not stop.wait(WAKE_S):
                pass
    finally:
        served.close()
    faults = ", ".join(f"{count} {fault.value}" for fault, count in served.faults.counts.items())
    print(f"stopped{f' (injected: {faults})' if faults else ''}", flush=True)
    return 0


def add_serve_arguments(add: Callable[[str, str], argparse.ArgumentParser]) -> None:
    serve = add("serve", "serve a simulated rig as SCPI over TCP on 127.0.0.1, one port per "
                         "instrument, with optional fault injection")
    serve.add_argument("rig", help="the rig file whose instruments are served")
    serve.add_argument("--protocol", required=True,
                       help="its sample section defines the simulated device")
    serve.add_argument("--port-base", type=int, default=DEFAULT_PORT_BASE, metavar="PORT",
                       help="port of the first instrument, the next ones follow (0: free ports)")
    serve.add_argument("--seed", type=int, metavar="N", help="noise seed of the simulated sample")
    serve.add_argument("--write-rig", metavar="PATH",
                       help="write the rig file with '@py' and the served addresses")
    serve.add_argument("--delay", type=float, default=0.0, metavar="SECONDS",
                       help="added to every reply")
    serve.add_argument("--fault-rate", type=float, default=0.0, metavar="F",
                       help="fraction of replies hit by a random fault (drop, garble, late)")
    serve.add_argument("--drop-rate", type=float, default=0.0, metavar="F",
                       help="fraction of replies replaced by closing the connection")
    serve.add_argument("--garble-rate", type=float, default=0.0, metavar="F",
                       help="fraction of replies replaced by line noise")
    serve.add_argument("--stall", action="append", default=[], metavar="NAME[@N]",
                       help="instrument NAME stops answering after N transactions (repeatable)")
    serve.add_argument("--fault-seed", type=int, default=0, metavar="N",
                       help="seed of the fault draws")


COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {"serve": cmd_serve}
ARGUMENTS: dict[str, Callable[[Callable[[str, str], argparse.ArgumentParser]], None]] = {
    "serve": add_serve_arguments}
