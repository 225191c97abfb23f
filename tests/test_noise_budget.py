"""The noise budget `estimate` prints, against hand derivations, CODATA and a simulated night."""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from scipy import constants

from acquire.cli import main
from acquire.inputs.load import load_protocol, load_rig
from acquire.plan.estimate import estimate
from acquire.plan.noise_budget import johnson_density2, pattern_factors, reading_sigma_V
from drivers import units
from drivers.roles.voltmeter import DEFAULT_NOISE_DENSITY_V_PER_RTHZ
from sim_instruments.sample_parameters import SampleParameters

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"
# One seed in the suite; FLIPSWEEP_NOISE_SEEDS=30 runs thirty (each a 40-point night, ~3 s).
SEEDS = range(3, 3 + int(os.environ.get("FLIPSWEEP_NOISE_SEEDS", "1")))


def _counts(pattern: str) -> tuple[int, int, int]:
    return pattern.count("+"), pattern.count("-"), pattern.count("0")


@pytest.mark.parametrize("pattern", ["+-", "+0-", "+0-0", "+--+", "+0--0+", "+00-"])
def test_pattern_factors_follow_the_hand_derivation(pattern: str) -> None:
    # Hand derivation: with equal time per step and V+, V-, V0 the means of n+, n-, n0 steps,
    # var(V+ - V-) = s^2 (1/n+ + 1/n-), var(V+ + V- - 2 V0) = s^2 (1/n+ + 1/n- + 4/n0),
    # each divided by (2 I)^2.
    plus, minus, zero = _counts(pattern)
    factors = pattern_factors([{"+": 1, "-": -1, "0": 0}[s] for s in pattern])
    assert factors.resistance == pytest.approx((1 / plus + 1 / minus) / 4, rel=1e-12)
    expected_u = (1 / plus + 1 / minus + (4 / zero if zero else 0.0)) / 4
    assert factors.unidirectional == pytest.approx(expected_u, rel=1e-12)


def test_pattern_factors_match_a_monte_carlo_of_the_reduction() -> None:
    # numpy's generator as the outside check: the reduction's own estimator on pure noise.
    from acquire.modes.dc_reversal.reduction import reduce_blocks

    rng = np.random.default_rng(1)
    for pattern in ("+0-", "+0--0+"):
        voltages = rng.standard_normal((20000, 1, len(pattern), 1))  # sigma_step = 1 V
        result = reduce_blocks(voltages, pattern, np.ones(20000))
        factors = pattern_factors([{"+": 1, "-": -1, "0": 0}[s] for s in pattern])
        # 20,000 samples: the variance is known to sqrt(2/20000) = 1 %; 5 % is 5 sigma.
        assert np.var(result.resistance_ohm) == pytest.approx(factors.resistance, rel=0.05)
        assert np.var(result.unidirectional_ohm) == pytest.approx(factors.unidirectional,
                                                                  rel=0.05)


def test_johnson_nyquist_noise_is_4_kT_R() -> None:
    # Nyquist, Phys. Rev. 32, 110 (1928): S_V = 4 k_B T R (one-sided). k_B from CODATA
    # (scipy.constants). Worked example: 1 kohm at 300 K is 4.07 nV/rtHz (from memory).
    assert johnson_density2(1000.0, 300.0) == pytest.approx(4 * constants.k * 300.0 * 1000.0,
                                                            rel=1e-12)
    assert math.sqrt(johnson_density2(1000.0, 300.0)) == pytest.approx(4.07e-9, rel=0.002)


def test_a_reading_averages_over_the_boxcar_bandwidth() -> None:
    # A boxcar average over tau has the noise bandwidth 1/(2 tau) (common practice): with no
    # Johnson noise, sigma = e_n / sqrt(2 tau); autozero doubles the meter's power.
    assert reading_sigma_V(20e-9, False, 0.0, 300.0, 0.02) == pytest.approx(20e-9 / 0.2)
    assert reading_sigma_V(20e-9, True, 0.0, 300.0, 0.02) == pytest.approx(
        20e-9 * math.sqrt(2) / 0.2)


def test_the_simulated_meter_and_the_rig_default_agree() -> None:
    # The rehearsal must show what the estimate predicts when no density is given.
    assert SampleParameters().noise_density_V_per_rtHz == DEFAULT_NOISE_DENSITY_V_PER_RTHZ


def test_noise_density_is_read_with_its_unit() -> None:
    assert units.to_si("20 nV/rtHz", units.NOISE_DENSITY) == pytest.approx(2e-8)
    with pytest.raises(units.UnitError, match="nV/rtHz"):
        units.to_si("20 nV", units.NOISE_DENSITY)
    assert units.to_si("0.05 ppm", units.RATIO) == pytest.approx(5e-8)
    with pytest.raises(units.UnitError, match="ppm"):
        units.to_si("10 deg", units.RATIO)


PROTOCOL = """extends: {base}
extends_anywhere: true
name: noise budget check
alternation: {{pattern: "+0-", cycles: 16, settle: 20 ms}}
readings: {{per_step: 1, channels: [vxx, vxy]}}
loops:
  - {{axis: current, start: 0.5 mA, stop: 2.45 mA, step: 0.05 mA}}
"""


@pytest.mark.parametrize("seed", SEEDS)
def test_predicted_errors_are_the_simulated_rigs(tmp_path: Path, seed: int) -> None:
    rig = yaml.safe_load(RIG.read_text())
    # One meter with the rig key (and autozero, NPLC 2), the other on the default density.
    rig["instruments"]["vxx"].update({"noise_density": "60 nV/rtHz", "autozero": True,
                                      "nplc": 2})
    rig_path = tmp_path / "rig.yaml"
    rig_path.write_text(yaml.safe_dump(rig))
    protocol = tmp_path / "protocol.yaml"
    protocol.write_text(PROTOCOL.format(base=ROOT / "protocols" / "base.yaml"))
    out = tmp_path / "run"
    assert main(["run", str(protocol), "--rig", str(rig_path), "--simulate", "--seed", str(seed),
                 "--out", str(out), "--quiet"]) == 0
    budget = estimate(load_protocol(protocol), load_rig(rig_path)).noise
    assert budget is not None
    predicted = {(p.channel, round(p.current_A, 9)): p for p in budget.points}
    points = pd.read_csv(out / "points.csv")
    assert len(points) == 80
    for channel in ("vxx", "vxy"):
        rows = points[points["channel"] == channel]
        for column, attribute in (("resistance_ohm_err", "resistance_err_ohm"),
                                  ("unidirectional_ohm_err", "unidirectional_err_ohm")):
            ratios = [getattr(predicted[(channel, round(row.current_A, 9))], attribute)
                      / getattr(row, column) for row in rows.itertuples()]
            # The mean square of the quoted errors estimates the true variance without bias;
            # 40 points x 15 degrees of freedom know it to sqrt(2/600) = 5.8 %, the error
            # itself to 2.9 %: [0.9, 1.1] is 3.4 sigma on either side.
            predicted_over_observed = 1 / math.sqrt(np.mean(1 / np.square(ratios)))
            assert 0.9 <= predicted_over_observed <= 1.1, (channel, column,
                                                          predicted_over_observed)
