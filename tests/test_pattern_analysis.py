"""What each alternation pattern cancels, against a derivation by hand and synthetic data.

Hand derivation (equal time tau per step, step times t_k counted from the middle of the cycle
in units of tau; s_k the polarity; I w_k the estimator weights times the current):

    R = (V+ - V-)/(2I)      U = (V+ + V- - 2 V0)/(2I)       (V+, V-, V0: means over the steps)

    bias to an offset V_off          = sum I w_k          x V_off/I
    bias to a voltage drift dV/dt    = sum I w_k t_k      x (dV/dt) tau/I
    bias to a resistance drift dR/dt = sum I w_k s_k t_k  x (dR/dt) tau
    noise factor                     = sum (I w_k)^2      x sigma^2/I^2 per cycle

'+-'    t = (-1/2, 1/2).  R: Iw = (1/2, -1/2): offset 0; drift -1/4 - 1/4 = -1/2;
        s t = (-1/2, -1/2): R drift -1/4 + 1/4 = 0; noise 1/2.  U: no '0' step, not reported.
'+0-'   t = (-1, 0, 1).  R: Iw = (1/2, 0, -1/2): offset 0; drift -1/2 - 1/2 = -1;
        s t = (-1, 0, -1): R drift -1/2 + 1/2 = 0; noise 1/2.
        U: Iw = (1/2, -1, 1/2): offset 0; drift -1/2 + 1/2 = 0; R drift -1/2 - 1/2 = -1;
        noise 1/4 + 1 + 1/4 = 3/2.
'+0-0'  t = (-3/2, -1/2, 1/2, 3/2).  R: Iw = (1/2, 0, -1/2, 0): offset 0;
        drift -3/4 - 1/4 = -1; s t = (-3/2, 0, -1/2, 0): R drift -3/4 + 1/4 = -1/2; noise 1/2.
        U: Iw = (1/2, -1/2, 1/2, -1/2): offset 0; drift (-3/2 + 1/2 + 1/2 - 3/2)/2 = -1;
        R drift (-3/2 - 1/2)/2 = -1; noise 4/4 = 1.
'+--+'  t = (-3/2, -1/2, 1/2, 3/2).  R: Iw = (1/4, -1/4, -1/4, 1/4): offset 0;
        drift (-3/2 + 1/2 - 1/2 + 3/2)/4 = 0; s t = (-3/2, 1/2, -1/2, 3/2):
        R drift (-3/2 - 1/2 + 1/2 + 3/2)/4 = 0; noise 4/16 = 1/4.  U: not reported.
'+0--0+' t = (-5/2, ..., 5/2).  R: Iw = (1/4, 0, -1/4, -1/4, 0, 1/4): offset 0;
        drift (-5/2 + 1/2 - 1/2 + 5/2)/4 = 0; s t = (-5/2, 0, 1/2, -1/2, 0, 5/2): R drift 0;
        noise 1/4.  U: Iw = (1/4, -1/2, 1/4, 1/4, -1/2, 1/4): offset 0; drift 0 (symmetric
        weights, odd t); R drift (-5/2 + 1/2 - 1/2 + 5/2)/4 = 0; noise 4/16 + 2/4 = 3/4.

The U noise factors agree with the textbook variance of a difference of means (common
practice): var U = sigma^2 (1/n+ + 1/n- + 4/n0) / (4 I^2), n the steps of each polarity.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from acquire.modes.dc_reversal.pattern_analysis import (
    COMMON_PATTERNS,
    analyse_pattern,
    table_lines,
)
from acquire.modes.dc_reversal.reduction import reduce_blocks

ROOT = Path(__file__).resolve().parent.parent
NOT_REPORTED = None

# pattern: (R offset, R drift, R resistance drift, R noise, U ... or None when not reported)
HAND: dict[str, tuple[tuple[float, float, float, float], tuple[float, ...] | None]] = {
    "+-": ((0, -0.5, 0, 0.5), NOT_REPORTED),
    "+0-": ((0, -1, 0, 0.5), (0, 0, -1, 1.5)),
    "+0-0": ((0, -1, -0.5, 0.5), (0, -1, -1, 1.0)),
    "+--+": ((0, 0, 0, 0.25), NOT_REPORTED),
    "+0--0+": ((0, 0, 0, 0.25), (0, 0, 0, 0.75)),
}


def _row(properties: object) -> tuple[float, ...]:
    bias = properties.bias  # type: ignore[attr-defined]
    return (bias["offset"], bias["voltage drift"], bias["resistance drift"],
            properties.noise_factor)  # type: ignore[attr-defined]


@pytest.mark.parametrize("pattern", sorted(HAND))
def test_the_analysis_matches_the_hand_derivation(pattern: str) -> None:
    analysis = analyse_pattern(pattern)
    resistance, unidirectional = HAND[pattern]
    assert _row(analysis.resistance) == pytest.approx(resistance, abs=1e-12)
    if unidirectional is None:
        assert not analysis.unidirectional_reported
    else:
        assert analysis.unidirectional_reported
        assert _row(analysis.unidirectional) == pytest.approx(unidirectional, abs=1e-12)


@pytest.mark.parametrize("pattern", ["+0-", "+0-0", "+0--0+", "+00-", "++0--0"])
def test_the_unidirectional_noise_follows_the_variance_of_a_difference_of_means(
    pattern: str,
) -> None:
    n_plus, n_minus, n_zero = (pattern.count(symbol) for symbol in "+-0")
    expected = (1 / n_plus + 1 / n_minus + 4 / n_zero) / 4  # common practice (see above)
    assert analyse_pattern(pattern).unidirectional.noise_factor == pytest.approx(expected)


def _synthetic(pattern: str, cycles: int, current: float, resistance: float, unidirectional: float,
               offset: float = 0.0, voltage_drift: float = 0.0,
               resistance_drift: float = 0.0) -> np.ndarray:
    """Step voltages of one point, time in units of tau counted from the point's middle."""
    polarity = np.array([{"+": 1, "0": 0, "-": -1}[s] for s in pattern], dtype=float)
    steps = len(pattern)
    time = np.arange(cycles * steps, dtype=float).reshape(cycles, steps) - (cycles * steps - 1) / 2
    r_of_t = resistance + resistance_drift * time
    voltage = polarity * current * r_of_t + np.abs(polarity) * current * unidirectional
    voltage = voltage + offset + voltage_drift * time
    return voltage[None, :, :, None]  # G=1, cycles, steps, repeats=1


@pytest.mark.parametrize("pattern", COMMON_PATTERNS)
@pytest.mark.parametrize("disturbance", ["offset", "voltage drift", "resistance drift"])
def test_synthetic_data_with_one_disturbance_is_biased_as_the_analysis_says(
    pattern: str, disturbance: str
) -> None:
    current, resistance, unidirectional = 1e-3, 250.0, 0.02
    size = {"offset": 3e-5, "voltage drift": 2e-7, "resistance drift": 1e-3}[disturbance]
    keyword = disturbance.replace(" ", "_")
    voltages = _synthetic(pattern, 5, current, resistance, unidirectional, **{keyword: size})
    result = reduce_blocks(voltages, pattern, np.array([current]))
    unit = size if disturbance == "resistance drift" else size / current
    hand_r, hand_u = HAND[pattern]
    column = ("offset", "voltage drift", "resistance drift").index(disturbance)
    # Linear disturbances on a linear estimator: the bias is exact up to rounding (1e-9 rel).
    assert result.resistance_ohm[0] - resistance == pytest.approx(
        hand_r[column] * unit, abs=1e-9 * resistance)
    if hand_u is None:
        assert np.isnan(result.unidirectional_ohm[0])
    else:
        assert result.unidirectional_ohm[0] - unidirectional == pytest.approx(
            hand_u[column] * unit, abs=1e-9 * resistance)


def test_the_noise_factor_is_the_variance_of_noisy_synthetic_cycles() -> None:
    # 40,000 cycles of pure noise: the sample variance is within ~1.5 % of the true one
    # (relative sd sqrt(2/n) = 0.7 %), so a 4 % window is over 5 sigma.
    rng = np.random.default_rng(11)
    sigma, current = 1e-6, 1e-3
    for pattern in ("+0-", "+0--0+", "+0-0"):
        steps = len(pattern)
        noise = rng.normal(0, sigma, size=(40000, 1, steps, 1))
        per_cycle = reduce_blocks(noise, pattern, np.full(40000, current))
        analysis = analyse_pattern(pattern)
        expected_u = analysis.unidirectional.noise_factor * sigma**2 / current**2
        expected_r = analysis.resistance.noise_factor * sigma**2 / current**2
        assert np.var(per_cycle.unidirectional_ohm) == pytest.approx(expected_u, rel=0.04)
        assert np.var(per_cycle.resistance_ohm) == pytest.approx(expected_r, rel=0.04)


def test_the_readme_table_is_the_tools_output() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    found = re.search(r"<!-- pattern table:[^\n]*-->\n(.*?)<!-- end of pattern table -->",
                      readme, re.S)
    assert found, "README.md lost its pattern table markers"
    assert found.group(1).strip().splitlines() == table_lines(COMMON_PATTERNS)


def test_check_and_estimate_print_the_pattern_and_warn(cli: object) -> None:
    protocol = ROOT / "protocols" / "mr_loop.yaml"
    for command in ("check", "estimate"):
        result = cli([command, str(protocol)])  # type: ignore[operator]
        assert result.code == 0
        assert f"pattern '{_pattern_of(protocol)}'" in result.out
    base = cli(["check", str(ROOT / "tests" / "protocols" / "no_zero_step.yaml")])  # type: ignore[operator]
    assert base.code == 0
    assert "has no '0' step" in base.out and "'+0--0+'" in base.out
    assert "biased by a voltage drift" in base.out


def _pattern_of(protocol: Path) -> str:
    import yaml

    document = yaml.safe_load(protocol.read_text(encoding="utf-8"))
    return str(document["alternation"]["pattern"])
