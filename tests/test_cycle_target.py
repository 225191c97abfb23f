"""Precision-targeted cycles: the stopping rule keeps means unbiased and errors honest; the
estimate gives the expected and the longest night; a killed run resumes."""

from __future__ import annotations

import math
import os
import signal
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from acquire.cli import main
from acquire.inputs.load import load_protocol, load_rig
from acquire.modes.dc_reversal.cycle_target import CyclePlanner, CycleTarget
from acquire.modes.dc_reversal.reduction import reduce_blocks
from acquire.plan.estimate import estimate, render
from acquire.plan.noise_budget import cycles_for_target
from tests.test_resume import start, wait_for_rows

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"
SEEDS = range(int(os.environ.get("FLIPSWEEP_CYCLE_SEEDS", "1")))  # more seeds: set it


def test_cycles_for_target_is_the_smallest_count_that_reaches_it() -> None:
    # Hand arithmetic: per-cycle sigma_U = 1e-4 ohm at 1 mA (s^2 = 1e-14 V^2), R = 100 ohm:
    # the ratio's error is 1e-6 / sqrt(N); a 0.25 ppm target needs N = 16, 0.26 ppm N = 15.
    assert cycles_for_target(1e-14, 1e-3, 100.0, 0.25e-6, 3, 40) == 16
    assert cycles_for_target(1e-14, 1e-3, 100.0, 0.26e-6, 3, 40) == 15
    assert cycles_for_target(1e-14, 1e-3, 100.0, 1e-6, 3, 40) == 3  # never fewer than min
    assert cycles_for_target(1e-14, 1e-3, 100.0, 1e-9, 3, 40) == 40  # never more than max


TRUE_RATIO = 0.3e-6
R_OHM, I_A = 300.0, 1e-3


def _synthetic_night(rule: str, seed: int, points: int, target: float = 0.15e-6
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(cycles, ratio - truth, standard error) of each point of a synthetic night whose noise
    wanders by +-40 % (so the cycles must follow it); the reduction is the project's."""
    rng = np.random.default_rng(seed)
    planner = CyclePlanner(CycleTarget(target=f"{target * 1e6} ppm", min=3, max=40),
                           prior_variance_V2=1.5 * (100e-9) ** 2, prior_resistance_ohm=R_OHM)
    clean = np.array([I_A * R_OHM * (1 + TRUE_RATIO), 0.0, -I_A * R_OHM * (1 - TRUE_RATIO)])
    rows = []
    for k in range(points):
        sigma = 100e-9 * (1 + 0.4 * math.sin(2 * math.pi * k / 500))

        def cycles(n: int, sigma: float = sigma) -> np.ndarray:
            return (clean + sigma * rng.standard_normal((n, 3)))[None, :, :, None]

        if rule == "planned":
            voltages = cycles(planner.cycles(I_A))
        else:  # the tempting rule: stop when the point's own error reaches the target
            voltages = cycles(3)
            while (reduce_blocks(voltages, "+0-", np.array([I_A])).unidirectional_ratio_err[0]
                   > target and voltages.shape[1] < 40):
                voltages = np.concatenate([voltages, cycles(1)], axis=1)
        result = reduce_blocks(voltages, "+0-", np.array([I_A]))
        planner.record(I_A, result.n_cycles, float(result.unidirectional_ohm_err[0]),
                       float(result.resistance_ohm[0]))
        # The reduction quotes the 68.27 % t half-width; back to the standard error with
        # Student's t of n - 1 dof (scipy.stats.t).
        t68 = stats.t.ppf(stats.norm.cdf(1.0), result.n_cycles - 1)
        rows.append((result.n_cycles, result.unidirectional_ratio[0] - TRUE_RATIO,
                     result.unidirectional_ratio_err[0] / t68))
    n, deviation, error = (np.array(column) for column in zip(*rows))
    return n, deviation, error


def _coverage(n: np.ndarray, deviation: np.ndarray, error: np.ndarray) -> float:
    # Student's t with n - 1 degrees of freedom (scipy.stats.t): the 68.27 % interval.
    half_width = stats.t.ppf(stats.norm.cdf(1.0), n - 1)
    return float(np.mean(np.abs(deviation / error) <= half_width))


@pytest.mark.parametrize("seed", SEEDS)
def test_planned_cycles_keep_the_mean_unbiased_and_the_error_honest(seed: int) -> None:
    points = 2000
    n, deviation, error = _synthetic_night("planned", 100 + seed, points)
    assert n.min() >= 3 and n.max() <= 40 and len(set(n)) > 5  # the cycles did follow
    # Unbiased: the mean deviation within 4 standard errors of zero.
    assert abs(deviation.mean()) < 4 * deviation.std() / math.sqrt(points)
    # Honest: each pull through Student's t (n - 1 dof) to a normal quantile (scipy.stats):
    # std 1 within 4 sigma of its sampling error, 1/sqrt(2 * 2000) = 1.6 %.
    z = stats.norm.ppf(stats.t.cdf(deviation / error, n - 1))
    assert abs(z.std() - 1) < 4 / math.sqrt(2 * points)
    # Coverage of the 68.27 % intervals within 4 binomial standard errors (1.04 %).
    nominal = stats.norm.cdf(1.0) - stats.norm.cdf(-1.0)
    assert abs(_coverage(n, deviation, error) - nominal) < 4 * math.sqrt(
        nominal * (1 - nominal) / points)
    # The target is met as the pooled variance predicts: the typical error at the target
    # (rounding N up puts it a little below; the pooled variance is known to ~26 %).
    assert 0.8 <= np.median(error) / 0.15e-6 <= 1.05


def test_stopping_on_the_points_own_error_would_quote_too_small_errors() -> None:
    # The check above can fail: the tempting rule stops when its own scatter is small.
    points = 1000
    n, deviation, error = _synthetic_night("own error", 7, points)
    nominal = stats.norm.cdf(1.0) - stats.norm.cdf(-1.0)
    assert _coverage(n, deviation, error) < nominal - 4 * math.sqrt(
        nominal * (1 - nominal) / points)


PROTOCOL = """extends: {base}
extends_anywhere: true
name: targeted cycles
alternation: {{pattern: "+0-", cycles: {{target: 0.1 ppm, min: 3, max: 40}}, settle: 20 ms}}
readings: {{per_step: 2, channels: [vxx, vxy]}}
loops:
  - {{axis: field, values: [0.5 T]}}
  - {{axis: angle, values: [0 deg, 60 deg, 120 deg, 180 deg, 240 deg, 300 deg]}}
  - {{axis: current, values: [1 mA, 2 mA, 3 mA]}}
"""


@pytest.fixture
def targeted(tmp_path: Path) -> Path:
    path = tmp_path / "targeted.yaml"
    path.write_text(PROTOCOL.format(base=ROOT / "protocols" / "base.yaml"))
    return path


def _run(protocol: Path, out: Path) -> None:
    assert main(["run", str(protocol), "--rig", str(RIG), "--simulate", "--seed", "4",
                 "--out", str(out), "--quiet"]) == 0


def _assert_whole(out: Path, points_total: int) -> pd.DataFrame:
    readings = pd.read_csv(out / "readings.csv")
    key = ["point", "attempt", "channel", "cycle", "step", "repeat"]
    assert not readings.duplicated(key).any(), "a reading was written twice"
    points = pd.read_csv(out / "points.csv")
    assert sorted(set(points["point"])) == list(range(points_total))
    rows = readings.groupby("point").size()
    # Every point holds whole cycles: n_cycles x 3 steps x 2 repeats x 2 channels.
    per_point = points.groupby("point")["n_cycles"].first()
    assert (rows == per_point * 3 * 2 * 2).all()
    return points


def test_a_targeted_night_on_the_simulated_rig(targeted: Path, tmp_path: Path) -> None:
    out = tmp_path / "run"
    _run(targeted, out)
    points = _assert_whole(out, 18)
    longitudinal = points[points["channel"] == "vxx"]
    cycles = longitudinal.groupby("current_A")["n_cycles"].median()
    # The budget's arithmetic (20 nV/rtHz, NPLC 1 at 50 Hz, 2 readings a step, +0-, 300 ohm):
    # sigma_U/R per cycle 0.29 ppm at 1 mA, so 9 cycles there, 3 at 2 mA (min), 3 at 3 mA.
    assert cycles.loc[1e-3] >= 7 and cycles.loc[3e-3] == 3
    at_1mA = longitudinal[longitudinal["current_A"] == 1e-3]["unidirectional_ratio_err"]
    # 6 points of ~9 cycles: their error is the target within the scatter of s (~25 %).
    assert 0.6e-7 <= float(np.sqrt(np.mean(at_1mA**2))) <= 1.3e-7
    est = estimate(load_protocol(targeted), load_rig(RIG))
    assert est.worst_duration_s is not None and est.expected_cycles is not None
    assert est.duration_s < est.worst_duration_s
    assert est.expected_cycles == pytest.approx(longitudinal["n_cycles"].mean(), rel=0.3)
    text = render(est, load_protocol(targeted).protocol)
    assert "expected" in text and "at most" in text


def test_a_run_cut_inside_a_targeted_point_resumes(targeted: Path, tmp_path: Path) -> None:
    reference = tmp_path / "reference"
    _run(targeted, reference)
    expected = pd.read_csv(reference / "points.csv")
    out = tmp_path / "cut"
    _run(targeted, out)
    readings = (out / "readings.csv").read_text().splitlines(keepends=True)
    table = pd.read_csv(out / "readings.csv")
    first_of_5 = int(np.flatnonzero(table["point"].to_numpy() == 5)[0])
    # Cut inside point 5 (a power cut) and keep points.csv's first five points.
    (out / "readings.csv").write_text("".join(readings[:1 + first_of_5 + 7]))
    kept = (out / "points.csv").read_text().splitlines(keepends=True)
    (out / "points.csv").write_text("".join(kept[:1 + 5 * 2]))
    assert main(["resume", str(out), "--quiet"]) == 0
    points = _assert_whole(out, 18)
    # The cycles of a point come from the points before it only: the point measured again
    # after the cut takes the cycles the uninterrupted night gave it.
    got = points.set_index(["point", "channel"])["n_cycles"]
    want = expected.set_index(["point", "channel"])["n_cycles"]
    assert (got.loc[list(range(6))] == want.loc[list(range(6))]).all()


def test_a_killed_targeted_run_resumes(targeted: Path, tmp_path: Path) -> None:
    out = tmp_path / "killed"
    process = start(targeted, out)
    wait_for_rows(out, process)
    process.send_signal(signal.SIGKILL)
    if process.wait() == 0:
        pytest.skip("the run finished before the kill")
    done_before = len(pd.read_csv(out / "points.csv")) // 2 if (out / "points.csv").exists() else 0
    assert done_before < 18
    assert main(["resume", str(out), "--quiet"]) == 0
    _assert_whole(out, 18)
