"""Memory of one long point: a dry run of a single point of 4,000 readings against one of
40,000 (ten times longer), peak traced allocation.

Inside a point the readings are written step by step and reach the operating system every
2 s of run clock; what a point still holds is its raw voltages (8 bytes a reading) for the
reduction. So the growth per extra reading should be tens of bytes, far below the ~150 bytes
of text a row takes (what a point that buffered its rows until its end would hold).

    python bench/point_memory.py
"""

from __future__ import annotations

import tempfile
import tracemalloc
from pathlib import Path

from acquire.runtime.session import RunOptions, start_run

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"


def write_protocol(folder: Path, cycles: int) -> Path:
    (folder / "base.yaml").write_text((ROOT / "protocols" / "base.yaml").read_text())
    path = folder / f"point_{cycles}.yaml"
    # "+-" x cycles x 10 readings per step x 2 channels (base.yaml reads vxx and vxy).
    path.write_text("extends: base.yaml\nname: one long point\nloops:\n"
                    "  - {axis: current, values: [1 mA]}\n"
                    f"alternation: {{pattern: '+-', cycles: {cycles}, settle: 1 ms}}\n"
                    "readings: {per_step: 10}\n", encoding="utf-8")
    return path


def peak(protocol: Path, out: Path) -> tuple[int, int]:
    tracemalloc.start()
    start_run(protocol, RIG, out, RunOptions(simulate=True, seed=1, progress=False))
    _, top = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    with open(out / "readings.csv", encoding="utf-8") as handle:
        rows = sum(1 for _ in handle) - 1
    return top, rows


def main() -> None:
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        short, long = write_protocol(folder, 100), write_protocol(folder, 1000)
        peak(short, folder / "warm-up")
        short_peak, short_rows = peak(short, folder / "short")
        long_peak, long_rows = peak(long, folder / "long")
        with open(folder / "long" / "readings.csv", encoding="utf-8") as handle:
            row_bytes = (sum(len(line) for line in handle) / (long_rows + 1))
        per_reading = (long_peak - short_peak) / (long_rows - short_rows)
        print(f"one point of {short_rows} readings: peak {short_peak / 1e6:.2f} MB")
        print(f"one point of {long_rows} readings: peak {long_peak / 1e6:.2f} MB")
        print(f"growth per reading: {per_reading:.0f} bytes (a row's text: {row_bytes:.0f} "
              f"bytes; ratio {per_reading / row_bytes:.2f}, target < 0.5)")


if __name__ == "__main__":
    main()
