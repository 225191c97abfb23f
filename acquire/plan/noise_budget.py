"""The noise budget of a current-reversal point, before the run (pure).

One reading integrates for tau = NPLC / mains frequency; its white noise has the equivalent
bandwidth of a boxcar average, df = 1 / (2 tau). Two independent sources add in power:

    sigma_reading^2 = ((1 + a) e_n^2 + 4 k_B T R_src) * df

e_n the voltmeter's input noise density (the rig's `noise_density`), a = 1 with autozero (its
zero reading carries the meter's noise once more), and the sample's Johnson-Nyquist noise
4 k_B T R_src through the resistance between the probes (R_src = R for the longitudinal pair,
about one square, R w / L, for the transverse pair). The `per_step` readings of a step are
averaged: sigma_step^2 = sigma_reading^2 / per_step.

Each cycle's resistance and unidirectional part are linear in the step means, with weights
w_k per step: R = sum(w_k V_k) / I, so var(R per cycle) = sigma_step^2 * sum(w_k^2) / I^2.
For equal time per step this gives (n+, n-, n0 the steps of each polarity in the pattern)

    var(R) = sigma_step^2 (1/n+ + 1/n-) / (4 I^2)
    var(U) = sigma_step^2 (1/n+ + 1/n- + 4/n0) / (4 I^2)

and over N cycles both divide by N. The unidirectional ratio's error is sigma_U / R (the
term U sigma_R / R^2 is smaller by U/R, some 1e-5). Noise that is not white (1/f, a drifting
bath, a noisy source) comes on top: the budget is the floor the night cannot beat.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

ROOM_TEMPERATURE_K = 300.0  # used when no temperature loop says otherwise
DETECTION_SIGMAS = 3.0  # a point's ratio "resolved" when it exceeds this many errors


@dataclass(frozen=True)
class PatternFactors:
    """Noise variance factors of one cycle's estimators: var = sigma_step^2 * factor / I^2."""

    resistance: float
    unidirectional: float


def pattern_factors(polarities: Sequence[int]) -> PatternFactors:
    """From the pattern's step weights (the reduction's: V+, V-, V0 each a mean over its
    steps; V0 = 0 with no zero step)."""
    plus = sum(1 for p in polarities if p > 0)
    minus = sum(1 for p in polarities if p < 0)
    zero = sum(1 for p in polarities if p == 0)
    resistance = (1 / plus + 1 / minus) / 4
    unidirectional = resistance + (1 / zero if zero else 0.0)
    return PatternFactors(resistance, unidirectional)


def johnson_density2(resistance_ohm: float, temperature_K: float) -> float:
    """4 k_B T R, V^2/Hz (Nyquist 1928), k_B from CODATA via scipy.constants."""
    from scipy.constants import k as boltzmann  # only the estimate needs scipy here

    return 4.0 * boltzmann * temperature_K * resistance_ohm


def reading_sigma_V(noise_density_V_per_rtHz: float, autozero: bool, source_ohm: float,
                    temperature_K: float, integration_s: float) -> float:
    meter2 = noise_density_V_per_rtHz**2 * (2.0 if autozero else 1.0)
    density2 = meter2 + johnson_density2(source_ohm, temperature_K)
    return math.sqrt(density2 / (2.0 * integration_s))


@dataclass(frozen=True)
class ChannelNoise:
    """One voltmeter channel's noise per reading."""

    channel: str
    longitudinal: bool
    noise_density_V_per_rtHz: float
    density_given: bool  # False: the default density
    autozero: bool
    integration_s: float
    source_ohm: float
    johnson_V_per_rtHz: float
    reading_sigma_V: float
    step_sigma_V: float  # of the mean of per_step readings


@dataclass(frozen=True)
class PointNoise:
    """Predicted standard errors of one point (channel, current) after `cycles` cycles."""

    channel: str
    current_A: float
    cycles: float
    resistance_err_ohm: float
    unidirectional_err_ohm: float
    ratio_err: float | None  # None for a transverse channel (its R is not a resistance scale)


def point_errors(noise: ChannelNoise, factors: PatternFactors, current_A: float,
                 cycles: float, resistance_ohm: float) -> PointNoise:
    step2 = noise.step_sigma_V**2
    err_r = math.sqrt(step2 * factors.resistance / cycles) / current_A
    err_u = math.sqrt(step2 * factors.unidirectional / cycles) / current_A
    ratio = err_u / resistance_ohm if noise.longitudinal else None
    return PointNoise(noise.channel, current_A, cycles, err_r, err_u, ratio)


def cycles_for_target(cycle_variance_V2: float, current_A: float, resistance_ohm: float,
                      target_ratio: float, minimum: int, maximum: int) -> int:
    """Cycles that bring sigma_U / R to the target: the smallest N with
    cycle_variance / (I^2 N) <= (target R)^2, within [minimum, maximum].
    `cycle_variance_V2` is the variance of one cycle's unidirectional part times I^2."""
    if not (cycle_variance_V2 > 0 and math.isfinite(cycle_variance_V2) and resistance_ohm > 0):
        return minimum
    needed = cycle_variance_V2 / (current_A * resistance_ohm * target_ratio) ** 2
    # A hair below an integer stays that integer (rounding of the product above).
    return max(minimum, min(maximum, math.ceil(needed * (1 - 1e-12))))


@dataclass(frozen=True)
class NoiseBudget:
    """What `estimate` prints: per channel and current, the predicted errors of a point."""

    temperature_K: float
    temperature_note: str
    factors: PatternFactors
    pattern: str
    polarities: tuple[int, ...]
    channels: tuple[ChannelNoise, ...]
    points: tuple[PointNoise, ...]
    angles_per_sweep: int  # points of an angle sweep (0: no angle loop)
    expected_ratio: dict[float, float]  # current -> the simulated device's |U/R|, if known
    cycles_range: tuple[int, int] | None = None  # (min, max) of precision-targeted cycles
    target_ratio: float | None = None


SHOWN_CURRENTS = 3  # a long current loop: its smallest, middle and largest current


def _shown(points: Sequence[PointNoise]) -> list[PointNoise]:
    currents = sorted({point.current_A for point in points})
    if len(currents) > SHOWN_CURRENTS:
        currents = [currents[0], currents[len(currents) // 2], currents[-1]]
    return [point for point in points if point.current_A in currents]


def render_budget(budget: NoiseBudget) -> list[str]:
    f = budget.factors
    lines = [f"noise budget  pattern {budget.pattern!r}: var(R) = {f.resistance:.4g}, "
             f"var(U) = {f.unidirectional:.4g} x sigma_step^2 / I^2 a cycle; "
             f"{budget.temperature_note}"]
    for noise in budget.channels:
        given = "" if noise.density_given else " (default: set the voltmeter's noise_density)"
        lines.append(
            f"  {noise.channel}: meter {noise.noise_density_V_per_rtHz * 1e9:.3g} nV/rtHz"
            f"{given}{', autozero' if noise.autozero else ''}, Johnson "
            f"{noise.johnson_V_per_rtHz * 1e9:.3g} nV/rtHz ({noise.source_ohm:.4g} ohm), "
            f"{noise.integration_s * 1e3:.3g} ms: {noise.reading_sigma_V * 1e9:.3g} nV a reading")
    shown = _shown(budget.points)
    for point in shown:
        ratio = (f", ratio +-{point.ratio_err * 1e6:.3g} ppm" if point.ratio_err is not None
                 else "")
        lines.append(
            f"  {point.channel} {point.current_A * 1e3:g} mA, {point.cycles:g} cycles: "
            f"R +-{point.resistance_err_ohm:.3g} ohm, U +-{point.unidirectional_err_ohm:.3g} "
            f"ohm{ratio}")
    if len(shown) < len(budget.points):
        lines.append("  (the loop's other currents lie between these)")
    if 0 not in budget.polarities:
        lines.append("resolves      no unidirectional part: the pattern has no zero step, so "
                     "it carries the thermoelectric offset (use '+0-')")
        return lines
    return lines + _resolves(budget, shown)


def _resolves(budget: NoiseBudget, shown: Sequence[PointNoise]) -> list[str]:
    lines = []
    for point in shown:
        if point.ratio_err is None:
            continue
        parts = [f"above {DETECTION_SIGMAS * point.ratio_err * 1e6:.3g} ppm in one point "
                 f"({DETECTION_SIGMAS:g} errors)"]
        if budget.angles_per_sweep >= 3:
            # A sin(phi) fit over n evenly spread angles: sigma_amplitude = sigma sqrt(2/n).
            amplitude = point.ratio_err * math.sqrt(2.0 / budget.angles_per_sweep)
            parts.append(f"amplitude over {budget.angles_per_sweep} angles "
                         f"+-{amplitude * 1e6:.3g} ppm")
        expected = budget.expected_ratio.get(point.current_A)
        if expected:
            parts.append(f"simulated device {expected * 1e6:.3g} ppm = "
                         f"{expected / point.ratio_err:.3g} errors a point")
        lines.append(f"resolves      {point.channel} {point.current_A * 1e3:g} mA: "
                     + "; ".join(parts))
    return lines
