"""Reduction: the definitions of docs/conventions.md, checked against an independent
computation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import t as student_t

from acquire.modes.dc_reversal import POINTS
from acquire.modes.dc_reversal.reduction import reduce_blocks, reduce_readings

SIGN = {"+": 1, "0": 0, "-": -1}


def synthetic_voltages(
    pattern: str,
    cycles: int,
    repeats: int,
    current: float,
    resistance: float,
    unidirectional: float,
    offset: float,
    drift_per_step: float,
    noise: float,
    seed: int,
) -> np.ndarray:
    """V = I R + U I^2 / I0 + offset + drift, per step in time order.

    The unidirectional voltage is even in I (R(+I) - R(-I) = 2U), so V(+I0) = I0 (R + U) and
    V(-I0) = -I0 (R - U).
    """
    rng = np.random.default_rng(seed)
    out = np.empty((cycles, len(pattern), repeats))
    step_number = 0
    for cycle in range(cycles):
        for index, symbol in enumerate(pattern):
            i = SIGN[symbol] * current
            v = i * resistance + unidirectional * i**2 / current + offset
            v += drift_per_step * step_number
            out[cycle, index] = v + rng.normal(0, noise, repeats)
            step_number += 1
    return out


def independent_reduction(v: np.ndarray, pattern: str, current: float) -> dict[str, float]:
    """Plain loops over cycles, straight from the definitions in docs/conventions.md."""
    r_cycles, u_cycles = [], []
    for cycle in v:
        plus = np.mean([cycle[k].mean() for k, s in enumerate(pattern) if s == "+"])
        minus = np.mean([cycle[k].mean() for k, s in enumerate(pattern) if s == "-"])
        zeros = [cycle[k].mean() for k, s in enumerate(pattern) if s == "0"]
        zero = np.mean(zeros) if zeros else 0.0
        r_plus = (plus - zero) / current
        r_minus = (minus - zero) / (-current)
        r_cycles.append((r_plus + r_minus) / 2)
        u_cycles.append((r_plus - r_minus) / 2)
    n = len(r_cycles)
    # The quoted error is the half-width of the two-sided 68.27 % interval of Student's t with
    # n - 1 degrees of freedom (scipy.stats.t), not the bare standard error.
    t68 = student_t.ppf(0.5 + 0.682689492137086 / 2, n - 1)
    has_zero = "0" in pattern
    return {
        "R": float(np.mean(r_cycles)),
        "R_err": float(t68 * np.std(r_cycles, ddof=1) / np.sqrt(n)),
        "U": float(np.mean(u_cycles)) if has_zero else float("nan"),
        "U_err": float(t68 * np.std(u_cycles, ddof=1) / np.sqrt(n)) if has_zero else float("nan"),
    }


@pytest.mark.parametrize("pattern", ["+-", "-+", "+0-", "+0-0", "+--+"])
def test_matches_independent_numpy_computation(pattern: str) -> None:
    v = synthetic_voltages(pattern, 5, 3, 2e-3, 300.0, 2e-3, 1e-5, 0.0, 1e-7, seed=4)
    result = reduce_blocks(v[None], pattern, np.array([2e-3]))
    expected = independent_reduction(v, pattern, 2e-3)
    # Same arithmetic in another order: agreement to float64 rounding. The odd part is a small
    # difference of ~0.6 V readings, so its rounding floor is ~1e-16 * 0.6 V / 2 mA ~ 3e-14 ohm.
    rounding = 1e-12
    assert result.resistance_ohm[0] == pytest.approx(expected["R"], rel=1e-12)
    assert result.resistance_ohm_err[0] == pytest.approx(expected["R_err"], rel=1e-6)
    # Without a '0' step the unidirectional part is left empty (it would hold V_off/I).
    assert result.unidirectional_ohm[0] == pytest.approx(expected["U"], abs=rounding, nan_ok=True)
    assert result.unidirectional_ohm_err[0] == pytest.approx(expected["U_err"], rel=1e-6,
                                                             nan_ok=True)


def test_zero_step_removes_a_large_thermoelectric_offset() -> None:
    # Offset ten times the unidirectional voltage: '+0-' recovers the truth, '+-' does not.
    current, unidirectional = 1e-3, 5e-3  # ohm -> 5 uV unidirectional voltage
    offset = 10 * unidirectional * current
    truth = unidirectional
    with_zero = reduce_blocks(
        synthetic_voltages("+0-", 8, 2, current, 300.0, unidirectional, offset, 0.0, 2e-8, 1)[None],
        "+0-",
        np.array([current]),
    )
    without_zero = reduce_blocks(
        synthetic_voltages("+-", 8, 2, current, 300.0, unidirectional, offset, 0.0, 2e-8, 1)[None],
        "+-",
        np.array([current]),
    )
    error = with_zero.unidirectional_ohm_err[0]
    assert abs(with_zero.unidirectional_ohm[0] - truth) < 3 * error
    # '+-' would read offset/I as unidirectional (10x the truth): it reports none instead.
    assert np.isnan(without_zero.unidirectional_ohm[0])
    assert np.isnan(without_zero.unidirectional_ratio[0])
    assert without_zero.resistance_ohm[0] == pytest.approx(300.0, rel=1e-6)
    assert abs(with_zero.offset_V[0] - offset) < 3 * with_zero.offset_V_err[0] + 1e-12


def test_symmetric_pattern_cancels_linear_drift() -> None:
    current, resistance = 1e-3, 300.0
    drift = 2e-7  # volts per step: a slow thermal drift
    biases = {}
    errors = {}
    for pattern in ("+--+", "+-"):
        # The systematic bias from noiseless data; the standard error from the same run with noise.
        clean = synthetic_voltages(pattern, 10, 2, current, resistance, 0.0, 0.0, drift, 0.0, 2)
        noisy = synthetic_voltages(pattern, 10, 2, current, resistance, 0.0, 0.0, drift, 1e-8, 2)
        biases[pattern] = (
            reduce_blocks(clean[None], pattern, np.array([current])).resistance_ohm[0] - resistance
        )
        errors[pattern] = reduce_blocks(
            noisy[None], pattern, np.array([current])
        ).resistance_ohm_err[0]
    assert abs(biases["+--+"]) < 0.1 * errors["+--+"]
    # '+-': V- is read one step later, so R is low by drift/(2I) (worked by hand: 0.1 ohm).
    assert biases["+-"] == pytest.approx(-drift / (2 * current), rel=0.05)
    assert abs(biases["+-"]) > 10 * errors["+-"]


def test_bulk_reduction_equals_block_reduction() -> None:
    pattern, cycles, repeats = "+0-", 4, 2
    rows = []
    blocks = {}
    for point in range(3):
        for channel in ("vxx", "vxy"):
            v = synthetic_voltages(
                pattern,
                cycles,
                repeats,
                1e-3 * (point + 1),
                100.0 + point,
                1e-3,
                1e-6,
                0.0,
                1e-7,
                seed=point * 7 + len(channel),
            )
            blocks[(point, channel)] = v
            for c in range(cycles):
                for s, symbol in enumerate(pattern):
                    for r in range(repeats):
                        rows.append(
                            {
                                "point": point,
                                "attempt": 0,
                                "cycle": c,
                                "step": s,
                                "repeat": r,
                                "temperature_K": np.nan,
                                "field_T": 0.5,
                                "angle_deg": 90.0,
                                "current_A": SIGN[symbol] * 1e-3 * (point + 1),
                                "channel": channel,
                                "voltage_V": v[c, s, r],
                                "flags": "retry" if point == 1 else "",
                            }
                        )
    frame = pd.DataFrame(rows).sample(frac=1.0, random_state=3)  # order must not matter
    points = reduce_readings(frame, pattern, 2e13, None, POINTS.names)
    assert len(points) == 6
    for row in points.itertuples():
        single = reduce_blocks(
            blocks[(row.point, row.channel)][None], pattern, np.array([row.current_A])
        )
        assert row.resistance_ohm == single.resistance_ohm[0]
        assert row.unidirectional_ohm == single.unidirectional_ohm[0]
        assert row.current_density_A_m2 == pytest.approx(row.current_A * 2e13)
        assert row.flags == ("retry" if row.point == 1 else "")


def test_partial_point_is_left_out() -> None:
    pattern = "+-"
    rows = [
        {
            "point": 0,
            "attempt": 0,
            "cycle": c,
            "step": s,
            "repeat": 0,
            "temperature_K": 300.0,
            "field_T": np.nan,
            "angle_deg": np.nan,
            "current_A": (1, -1)[s] * 1e-3,
            "channel": "v",
            "voltage_V": (1, -1)[s] * 0.1,
            "flags": "",
        }
        for c in range(2)
        for s in range(2)
    ]
    rows.append({**rows[0], "point": 1})  # one reading of a point that was cut short
    points = reduce_readings(pd.DataFrame(rows), pattern, float("nan"), 1, POINTS.names)
    assert list(points["point"]) == [0]
    assert points["resistance_ohm"].iloc[0] == pytest.approx(100.0)
