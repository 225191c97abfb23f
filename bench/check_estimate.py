"""`check` and `estimate` of a 1,000,000-point protocol; print the times against the target.

Target: each under 2 s on a 2-core machine (the estimate's moves and its loop-order advice
are computed from the loop counts, so neither walks the million points).

    python bench/check_estimate.py [--points-per-axis N]

The protocol sweeps temperature x field x angle x current = 10 x 100 x 100 x 10 points (an
invented night, far longer than any real one; `max_points` is raised to allow it) on the
simulated rig. Each command runs in-process through the CLI entry point, as a user runs it;
the best of three runs is printed, with the ratio to the target.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from acquire.cli import main

REPO = Path(__file__).resolve().parents[1]
RIG = REPO / "protocols" / "rigs" / "simulated.yaml"
TARGET_S = 2.0
PROTOCOL = """name: million-point bench
max_points: {points}
sample:
  id: bench-bar
  channel: {{length: 40 um, width: 5 um}}
  layers:
    - {{name: NiFe, thickness: 4 nm, resistivity: 40 uohm*cm}}
    - {{name: Pt, thickness: 5 nm, resistivity: 30 uohm*cm, carrier: true}}
loops:
  - {{axis: temperature, start: 10 K, stop: 300 K, num: {outer}}}
  - {{axis: field, start: -1 T, stop: 1 T, num: {inner}}}
  - {{axis: angle, start: 0 deg, stop: 350 deg, num: {inner}, alternate_direction: true}}
  - {{axis: current, start: 0.5 mA, stop: 5 mA, num: {outer}}}
alternation: {{pattern: "+0-", cycles: 2, settle: 5 ms}}
readings: {{per_step: 1, channels: [vxx]}}
limits: {{current: 5 mA}}
"""


def timed(argv: list[str]) -> tuple[float, int, str]:
    out, err = io.StringIO(), io.StringIO()
    start = time.perf_counter()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return time.perf_counter() - start, code, out.getvalue() + err.getvalue()


def main_bench() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points-per-axis", type=int, default=100,
                        help="values of the field and angle loops (10 temperatures and "
                             "currents each)")
    args = parser.parse_args()
    inner, outer = args.points_per_axis, 10
    points = inner * inner * outer * outer
    with tempfile.TemporaryDirectory(prefix="flipsweep-bench-") as folder:
        protocol = Path(folder) / "million.yaml"
        protocol.write_text(PROTOCOL.format(points=points, inner=inner, outer=outer),
                            encoding="utf-8")
        print(f"protocol: {points:,} points on {RIG.name}")
        worst = 0.0
        for command in ("check", "estimate"):
            runs = [timed([command, str(protocol), "--rig", str(RIG)]) for _ in range(3)]
            best, code, text = min(runs)
            if code != 0:
                print(f"{command} failed (exit {code}): {text.strip()}")
                return 1
            worst = max(worst, best)
            print(f"{command:<9} {best:6.3f} s  ({best / TARGET_S:.2f} of the {TARGET_S:g} s "
                  "target)")
            if command == "estimate":
                print("  " + "\n  ".join(text.strip().splitlines()[:3]))
        print(f"{'pass' if worst < TARGET_S else 'FAIL'}: slowest {worst:.3f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main_bench())
