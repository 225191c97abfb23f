"""The simulated sample's cost per field change: what bounds a night's rehearsal time.

An angle scan at four fields in each rotation plane, plus a slow field loop near the coercive
field (the costly case: the magnetisation switches). Prints the mean time per
`apply_field` call and its ratio to the budget that keeps a night's rehearsal in seconds.

    python bench/sample_model.py
"""

from __future__ import annotations

import math
import time

from sim_instruments.sample_model import BilayerSample, SampleParameters

BUDGET_S = 200e-6  # per call: 10,000 field changes in a night rehearse in 2 s


def main() -> None:
    calls = 0
    started = time.perf_counter()
    for plane in ("xy", "zx", "zy"):
        sample = BilayerSample(SampleParameters(), rotation_plane=plane)
        for field_T in (0.004, 0.05, 0.5, 2.0):
            for angle in range(0, 361, 10):
                sample.apply_field(field_T, float(angle))
                calls += 1
    sample = BilayerSample(SampleParameters(), rotation_plane="xy")
    for i in range(400):
        sample.apply_field(0.01 * math.cos(2 * math.pi * i / 400), 20.0)
        calls += 1
    mean_s = (time.perf_counter() - started) / calls
    print(f"apply_field calls   {calls}")
    print(f"mean per call       {mean_s * 1e6:.1f} us")
    print(f"ratio to budget     {mean_s / BUDGET_S:.2f}   (target <= 1)")


if __name__ == "__main__":
    main()
