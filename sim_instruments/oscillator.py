"""Mean energy of a quantum harmonic oscillator in thermal equilibrium, zero-point included.

    <E> = (hbar w / 2) coth(hbar w / (2 k_B T))

Written in kelvin (energies over k_B) with the oscillator temperature T_w = hbar w / k_B:
<E>/k_B = (T_w / 2) coth(T_w / (2 T)). It tends to T (equipartition) for T >> T_w and to the
zero-point value T_w / 2 as T -> 0. The magnon part of the simulated unidirectional
magnetoresistance follows it, normalised at the reference temperature.
"""

from __future__ import annotations

import math


def oscillator_mean_energy_K(oscillator_K: float, temperature_K: float) -> float:
    """<E> / k_B in kelvin; oscillator_K = hbar w / k_B >= 0, temperature_K >= 0."""
    if not (math.isfinite(oscillator_K) and oscillator_K >= 0.0):
        raise ValueError(f"oscillator temperature must be finite and >= 0, got {oscillator_K!r}")
    if not (math.isfinite(temperature_K) and temperature_K >= 0.0):
        raise ValueError(f"temperature must be finite and >= 0, got {temperature_K!r}")
    if oscillator_K == 0.0:
        return temperature_K  # the classical oscillator
    if temperature_K == 0.0:
        return 0.5 * oscillator_K
    # tanh saturates to exactly 1.0 for large arguments, which is the T -> 0 limit.
    return 0.5 * oscillator_K / math.tanh(0.5 * oscillator_K / temperature_K)


def oscillator_factor(oscillator_K: float, temperature_K: float, reference_K: float) -> float:
    """<E>(T) / <E>(T_ref): 1 at T_ref, linear in T well above T_w, T_w / (2 <E>(T_ref)) at 0."""
    return oscillator_mean_energy_K(oscillator_K, temperature_K) / oscillator_mean_energy_K(
        oscillator_K, reference_K
    )
