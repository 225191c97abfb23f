"""Scattered transport faults over a served rig: 10 runs of a 1,000-point protocol at a 5 %
fault rate (drops, line noise and late replies in equal parts), then a stall.

Target: 10/10 runs complete, every point once, every point hit by a fault flagged `retry`,
every injected fault accounted for in the log, and the source read back safe. Then a voltmeter
that stalls for good still ends the run (exit 1) in the verified safe state.

The rig is the socket test rig with 0.2 s timeouts, and the backoffs are shortened to 10-50 ms:
neither changes which faults a run survives (that is the retry budget and the silence limit),
only how long the bench takes. About a minute per run on 2 cores.

    python bench/fault_rate.py [--runs 10] [--points 1000] [--rate 0.05]
"""

from __future__ import annotations

import argparse
import contextlib
import io
import re
import tempfile
import time
from pathlib import Path

import pandas as pd

from acquire.cli import main as cli
from acquire.runtime.runner import Runner
from acquire.runtime.serve import served_rig
from sim_instruments.faults import FaultPlan

ROOT = Path(__file__).resolve().parent.parent
SOCKET_RIG = ROOT / "tests" / "protocols" / "socket_rig.yaml"
KEY = ["point", "attempt", "channel", "cycle", "step", "repeat"]
RETRY = re.compile(r"point (\d+): .*; retry \d of \d in ")
AGAIN = re.compile(r"point (\d+): .*still failing after")


def write_inputs(folder: Path, points: int) -> tuple[Path, Path]:
    (folder / "base.yaml").write_text((ROOT / "protocols" / "base.yaml").read_text())
    protocol = folder / "loop.yaml"
    protocol.write_text(
        "extends: base.yaml\n"
        f"name: socket loop of {points} points\n"
        f"loops:\n  - {{axis: current, start: 0.1 mA, stop: 2 mA, num: {points}}}\n"
        "alternation: {pattern: '+-', cycles: 2, settle: 1 ms}\n"
        "readings: {per_step: 1, channels: [vxx]}\n")
    rig = folder / "rig.yaml"
    rig.write_text(SOCKET_RIG.read_text().replace("timeout: 0.5 s", "timeout: 0.2 s"))
    return protocol, rig


def one_run(folder: Path, protocol: Path, rig: Path, plan: FaultPlan, name: str
            ) -> dict[str, object]:
    out = folder / name
    with served_rig(protocol, rig, seed=plan.seed, faults=plan) as served:
        rig_file = served.write_rig(folder / f"{name}.rig.yaml")
        shown, errors = io.StringIO(), io.StringIO()
        started = time.perf_counter()
        with contextlib.redirect_stdout(shown), contextlib.redirect_stderr(errors):
            code = cli(["run", str(protocol), "--rig", str(rig_file), "--out", str(out),
                        "--quiet"])
        seconds = time.perf_counter() - started
        injected = len(served.faults.events)
        source = served.world.instruments["source"]
        safe = source.level_A == 0.0 and source.output is False
    log = (out / "run.log").read_text()
    noticed = (len(re.findall(r"; retry \d of \d in ", log)) + log.count("still failing after")
               + log.count("safe shutdown: read back"))
    points = pd.read_csv(out / "points.csv", keep_default_na=False)
    readings = pd.read_csv(out / "readings.csv", keep_default_na=False)
    hit = {int(n) for n in RETRY.findall(log)} | {int(n) for n in AGAIN.findall(log)}
    flagged = set(points.loc[points["flags"].str.contains("retry"), "point"])
    return {
        "code": code, "seconds": seconds, "injected": injected, "noticed": noticed,
        "points": len(points), "unique": points["point"].nunique(),
        "duplicates": int(readings.duplicated(KEY).sum()), "hit": len(hit),
        "unflagged": len(hit - flagged), "safe": safe,
        "verified": "safe state verified" in shown.getvalue() + errors.getvalue(),
        "closing": (errors.getvalue().strip().splitlines() or [""])[-1],
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=10)
    parser.add_argument("--points", type=int, default=1000)
    parser.add_argument("--rate", type=float, default=0.05)
    args = parser.parse_args()
    Runner.retry_backoff_s = (0.01, 0.02, 0.05)
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        protocol, rig = write_inputs(folder, args.points)
        complete = 0
        print(f"{args.runs} runs of {args.points} points at a fault rate of {args.rate:g}")
        print("seed  exit  faults  noticed  points  hit  unflagged  dup  safe  seconds")
        for seed in range(1, args.runs + 1):
            plan = FaultPlan.from_rates(fault_rate=args.rate, seed=seed)
            result = one_run(folder, protocol, rig, plan, f"run{seed}")
            ok = (result["code"] == 0 and result["unique"] == args.points
                  and result["points"] == args.points and result["duplicates"] == 0
                  and result["unflagged"] == 0 and result["noticed"] == result["injected"]
                  and result["safe"] and result["verified"])
            complete += ok
            print(f"{seed:>4}  {result['code']:>4}  {result['injected']:>6}  "
                  f"{result['noticed']:>7}  {result['unique']:>6}  {result['hit']:>3}  "
                  f"{result['unflagged']:>9}  {result['duplicates']:>3}  "
                  f"{'yes' if result['safe'] else 'NO':>4}  {result['seconds']:>7.1f}"
                  + ("" if ok else f"  <- {result['closing']}"))
        print(f"complete, flagged, nothing lost: {complete}/{args.runs}")
        stall = FaultPlan(stall_after={"vxx": 400}, seed=99)
        result = one_run(folder, protocol, rig, stall, "stall")
        print(f"vxx stalled after 400 transactions: exit {result['code']}, "
              f"source {'safe' if result['safe'] else 'NOT SAFE'}, "
              f"{'verified' if result['verified'] else 'NOT verified'}, "
              f"{result['seconds']:.1f} s")


if __name__ == "__main__":
    main()
