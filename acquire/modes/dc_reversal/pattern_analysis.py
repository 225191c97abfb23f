"""What an alternation pattern cancels: first-order biases and noise of its estimators (pure).

The reduction's estimators are linear in the step means of a cycle (reduction.step_weights),
so each disturbance that adds a known vector d to the step means biases an estimator with
weights w by exactly w . d. The disturbances, with equal time tau per step and the time t_k
of step k counted from the middle of the cycle (t_k = k - (steps - 1)/2, in steps):

    offset            V_k += V_off                    d_k = 1          bias in V_off / I
    voltage drift     V_k += (dV/dt) tau t_k          d_k = t_k        bias in (dV/dt) tau / I
    resistance drift  V_k += s_k I (dR/dt) tau t_k    d_k = s_k t_k    bias in (dR/dt) tau

(s_k the polarity +1, 0, -1). The biases are relative to the values at the middle of the
point: over many cycles the cycles' middles average to the point's middle, so an estimator
whose offset coefficient is zero has the same drift coefficient for the whole point.

The noise variance factor is sum_k (I w_k)^2: the variance of one cycle's estimate in units
of sigma^2/I^2, sigma the noise of one step mean (uncorrelated steps). Over n cycles it is
divided by n. `per step` multiplies it by the steps per cycle: the variance for a fixed
measuring time, to compare patterns of different lengths fairly.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from acquire.modes.dc_reversal.reduction import has_zero_step, polarities_of, step_weights

# Below this a coefficient is rounding noise of the weights (they are ratios of small integers).
_ZERO = 1e-12
DISTURBANCES: tuple[str, ...] = ("offset", "voltage drift", "resistance drift")
DISTURBANCE_UNITS: dict[str, str] = {
    "offset": "V_off/I",
    "voltage drift": "(dV/dt)*tau/I",
    "resistance drift": "(dR/dt)*tau",
}


@dataclass(frozen=True)
class EstimatorProperties:
    """One estimator of a pattern: bias coefficient per disturbance and the noise factor."""

    name: str
    bias: dict[str, float]
    noise_factor: float
    steps: int

    @property
    def noise_per_step(self) -> float:
        return self.noise_factor * self.steps

    def biased_by(self) -> list[str]:
        return [name for name, value in self.bias.items() if abs(value) > _ZERO]


@dataclass(frozen=True)
class PatternAnalysis:
    pattern: str
    resistance: EstimatorProperties
    unidirectional: EstimatorProperties
    unidirectional_reported: bool

    def warnings(self) -> list[str]:
        found = []
        if not self.unidirectional_reported:
            found.append(no_zero_step_message(self.pattern))
        for estimator in (self.resistance, self.unidirectional):
            if estimator.name == "unidirectional" and not self.unidirectional_reported:
                continue
            for disturbance in estimator.biased_by():
                coefficient = estimator.bias[disturbance]
                found.append(
                    f"pattern {self.pattern!r}: the {estimator.name} part is biased by a "
                    f"{disturbance} ({_signed(coefficient)} x {DISTURBANCE_UNITS[disturbance]}); "
                    f"{suggestion(disturbance, estimator.name)}"
                )
        return found


def disturbance_vectors(pattern: str) -> dict[str, np.ndarray]:
    polarity = polarities_of(pattern).astype(float)
    time = np.arange(polarity.size) - (polarity.size - 1) / 2
    return {
        "offset": np.ones(polarity.size),
        "voltage drift": time,
        "resistance drift": polarity * time,
    }


def analyse_pattern(pattern: str) -> PatternAnalysis:
    weights = step_weights(pattern)
    vectors = disturbance_vectors(pattern)

    def properties(name: str, w: np.ndarray) -> EstimatorProperties:
        bias = {key: _clean(float(w @ vector)) for key, vector in vectors.items()}
        return EstimatorProperties(name, bias, _clean(float(w @ w)), len(pattern))

    return PatternAnalysis(
        pattern,
        properties("resistance", weights.resistance),
        properties("unidirectional", weights.unidirectional),
        has_zero_step(pattern),
    )


def _clean(value: float) -> float:
    return 0.0 if abs(value) < _ZERO else value


def _signed(value: float) -> str:
    return f"{value:+.3g}"


COMMON_PATTERNS: tuple[str, ...] = ("+-", "+0-", "+0-0", "+--+", "+0--0+")


def cancelling_patterns(estimator: str, disturbances: tuple[str, ...]) -> list[str]:
    """Common patterns whose `estimator` is free of every named disturbance."""
    chosen = []
    for pattern in COMMON_PATTERNS:
        analysis = analyse_pattern(pattern)
        if estimator == "unidirectional" and not analysis.unidirectional_reported:
            continue
        properties = getattr(analysis, estimator)
        if not set(disturbances) & set(properties.biased_by()):
            chosen.append(pattern)
    return chosen


def suggestion(disturbance: str, estimator: str) -> str:
    options = cancelling_patterns(estimator, (disturbance,))
    if not options:
        return "no common pattern cancels it"
    return "patterns that cancel it: " + ", ".join(repr(p) for p in options)


def no_zero_step_message(pattern: str) -> str:
    options = ", ".join(repr(p) for p in COMMON_PATTERNS if has_zero_step(p))
    return (
        f"pattern {pattern!r} has no '0' step: without a zero-current reading the "
        "unidirectional part would include the thermoelectric offset (V_off/I), so it is not "
        f"reported (the resistance is); patterns with a '0' step give it: {options}"
    )


def table_lines(patterns: tuple[str, ...]) -> list[str]:
    """A Markdown table of the patterns' bias coefficients and noise factors."""
    header = (
        "| pattern | estimator | offset (V_off/I) | voltage drift ((dV/dt)*tau/I) "
        "| resistance drift ((dR/dt)*tau) | noise factor | per step |"
    )
    lines = [header, "|" + " --- |" * 7]
    for pattern in patterns:
        analysis = analyse_pattern(pattern)
        for estimator in (analysis.resistance, analysis.unidirectional):
            if estimator.name == "unidirectional" and not analysis.unidirectional_reported:
                lines.append(f"| `{pattern}` | unidirectional | not reported (no '0' step) "
                             "| | | | |")
                continue
            cells = [_number(estimator.bias[name]) for name in DISTURBANCES]
            lines.append(
                f"| `{pattern}` | {estimator.name} | " + " | ".join(cells)
                + f" | {_number(estimator.noise_factor)} | {_number(estimator.noise_per_step)} |"
            )
    return lines


def _number(value: float) -> str:
    return "0" if value == 0 else f"{value:.4g}"


def summary_lines(pattern: str) -> list[str]:
    """What `check` and `estimate` print about the protocol's pattern."""
    analysis = analyse_pattern(pattern)
    lines = [f"pattern {pattern!r}: first-order bias per disturbance, noise factor "
             "(variance of one cycle in sigma^2/I^2)"]
    for estimator in (analysis.resistance, analysis.unidirectional):
        if estimator.name == "unidirectional" and not analysis.unidirectional_reported:
            lines.append("  unidirectional  not reported: the pattern has no '0' step")
            continue
        biases = ", ".join(
            f"{name} {_number(estimator.bias[name])} {DISTURBANCE_UNITS[name]}"
            for name in DISTURBANCES
        )
        lines.append(f"  {estimator.name:<15} {biases}; noise {_number(estimator.noise_factor)}")
    return lines
