"""A 20,000-reading dry run: wall time (target < 30 s on 2 cores) and flat memory.

Memory: the peak traced allocation of a run four times longer is compared with a short one's;
a runner that kept whole-run lists would grow with the run (ratio ~4), a flat one stays ~1.

    python bench/dry_run.py
"""

from __future__ import annotations

import tempfile
import time
import tracemalloc
from pathlib import Path

from acquire.runtime.session import RunOptions, start_run

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"

PROTOCOL = """extends: {base}
extends_anywhere: true
name: dry-run benchmark
loops:
  - {{axis: field, values: [0.5 T]}}
  - {{axis: angle, start: 0 deg, stop: {stop} deg, step: 5 deg, alternate_direction: true}}
  - {{axis: current, values: [0.5 mA, 1 mA, 1.5 mA, 2 mA, 2.5 mA, 3 mA]}}
"""


def write_protocol(folder: Path, angles: int) -> Path:
    path = folder / f"bench_{angles}.yaml"
    path.write_text(PROTOCOL.format(base=ROOT / "protocols" / "base.yaml",
                                    stop=5 * (angles - 1)), encoding="utf-8")
    return path


def run(protocol: Path, folder: Path, name: str) -> float:
    started = time.perf_counter()
    start_run(protocol, RIG, folder / name, RunOptions(True, 1, False, False))
    return time.perf_counter() - started


def peak_memory(protocol: Path, folder: Path, name: str) -> int:
    tracemalloc.start()
    run(protocol, folder, name)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak


def main() -> None:
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        long_protocol = write_protocol(folder, 70)  # 420 points x 48 readings = 20,160
        short_protocol = write_protocol(folder, 18)  # 108 points
        run(short_protocol, folder, "warm-up")  # imports and caches out of the timing
        seconds = run(long_protocol, folder, "long")
        with open(folder / "long" / "readings.csv", encoding="utf-8") as handle:
            readings = sum(1 for _ in handle) - 1
        short_peak = peak_memory(short_protocol, folder, "short-traced")
        long_peak = peak_memory(long_protocol, folder, "long-traced")
    print(f"readings            {readings}")
    print(f"dry run             {seconds:.2f} s   (target < 30 s)")
    print(f"readings per second {readings / seconds:,.0f}")
    print(f"peak memory short   {short_peak / 1e6:.1f} MB (108 points)")
    print(f"peak memory long    {long_peak / 1e6:.1f} MB (420 points)")
    print(f"memory ratio        {long_peak / short_peak:.2f}   (flat: ~1; whole-run lists: ~3.9)")


if __name__ == "__main__":
    main()
