"""Alternation patterns on the simulated rig: what a zero step and a symmetric pattern buy."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from acquire.cli import main
from tests.test_run_simulated import truth_model

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"

# 16 cycles: the standard error over cycles is then itself known to ~18 %, so a 3-sigma
# window is a fair test (with 8 cycles Student's t tails make 3-sigma misses common).
PROTOCOL = """extends: {base}
extends_anywhere: true
name: pattern check
alternation: {{pattern: "{pattern}", cycles: 16, settle: 20 ms}}
readings: {{per_step: 2, channels: [vxx]}}
loops:
  - {{axis: field, values: [0.5 T]}}
  - {{axis: angle, values: [90 deg, 270 deg]}}
  - {{axis: current, values: [1 mA]}}
"""


def run_pattern(tmp_path: Path, pattern: str, simulation: dict[str, float]) -> tuple[Path, Path]:
    rig = yaml.safe_load(RIG.read_text())
    rig["simulation"] = {**rig.get("simulation", {}), **simulation}
    rig_path = tmp_path / f"rig_{len(pattern)}.yaml"
    rig_path.write_text(yaml.safe_dump(rig))
    protocol = tmp_path / f"pattern_{pattern.replace('+', 'p').replace('-', 'm')}.yaml"
    protocol.write_text(PROTOCOL.format(base=ROOT / "protocols" / "base.yaml", pattern=pattern))
    out = tmp_path / f"run_{protocol.stem}"
    assert (
        main(
            [
                "run",
                str(protocol),
                "--rig",
                str(rig_path),
                "--simulate",
                "--seed",
                "9",
                "--out",
                str(out),
                "--quiet",
            ]
        )
        == 0
    )
    return protocol, out


def deviations(protocol: Path, out: Path, quantity: str) -> list[tuple[float, float, float]]:
    """(measured - truth, standard error, truth) of `quantity` for every point of a run."""
    model = truth_model(protocol, out)
    rows = []
    for row in pd.read_csv(out / "points.csv").itertuples():
        model.apply_field(row.field_T, row.angle_deg)
        truth = getattr(model.expected("longitudinal", row.current_A, 300.0), quantity)
        rows.append((getattr(row, quantity) - truth, getattr(row, f"{quantity}_err"), truth))
    return rows


def test_zero_step_removes_a_thermoelectric_offset_ten_times_the_signal(tmp_path: Path) -> None:
    offset = 15e-6  # V; the odd voltage at 1 mA is ~1.3 uV here, so about ten times smaller
    results = {
        pattern: deviations(
            *run_pattern(tmp_path, pattern, {"thermoelectric_offset_V": offset}),
            "unidirectional_ohm",
        )
        for pattern in ("+0-", "+-")
    }
    for bias, error, truth in results["+0-"]:
        assert abs(truth) * 1e-3 * 10 < offset  # the offset really is ~10x the odd voltage
        assert abs(bias) < 3 * error
    for bias, error, _ in results["+-"]:
        # Without a zero step the estimate would hold offset / I = 15 mOhm: none is given.
        assert np.isnan(bias) and np.isnan(error)


def test_symmetric_pattern_cancels_a_linear_drift(tmp_path: Path) -> None:
    drift = 2e-5  # V/s: a fast thermal drift, to make the '+-' bias obvious
    found = {
        pattern: deviations(
            *run_pattern(tmp_path, pattern, {"drift_V_per_s": drift}), "resistance_ohm"
        )
        for pattern in ("+--+", "+-")
    }
    for bias, error, _ in found["+--+"]:
        assert abs(bias) < 3 * error  # only noise is left
    for bias, error, _ in found["+-"]:
        # V- is read one step after V+: R is low by drift x (step time) / (2 I).
        assert bias < 0 and abs(bias) > 10 * error


def test_the_demo_field_loop_reports_no_offset_as_unidirectional(tmp_path: Path) -> None:
    from acquire.analysis import fit_run

    out = tmp_path / "mr"
    protocol = ROOT / "protocols" / "mr_loop.yaml"
    assert main(["run", str(protocol), "--rig", str(RIG), "--simulate", "--seed", "7",
                 "--out", str(out), "--quiet"]) == 0
    fits = pd.read_csv(fit_run(out))
    model = truth_model(protocol, out)
    model.apply_field(0.04, 20.0)  # the loop's largest field, at its angle
    truth = model.expected("longitudinal", 1e-3, 300.0).unidirectional_ohm
    offset_over_current = 10e-6 / 1e-3  # what '+-' reported as UMR: V_off/I = 10 mOhm
    rows = fits[(fits["quantity"] == "umr_field_independent_ohm") & (fits["channel"] == "vxx")]
    assert len(rows) == 2  # the positive and the negative branch
    for row in rows.itertuples():
        # The high-field part is the UMR at saturation, odd in the field: +-truth within
        # 3 sigma (the inverse form's A is the |B| -> infinity limit; at 40 mT the field-
        # dependent part has decayed to below its error here), nowhere near V_off/I.
        sign = -1.0 if "negative fields" in row.note else 1.0
        assert abs(row.value - sign * truth) < 3 * row.error, (row.value, row.error, truth)
        assert abs(row.value) < 0.1 * offset_over_current
