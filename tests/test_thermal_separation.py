"""The thermal and spin-dependent parts of the unidirectional amplitude in xy sweeps.

Source: the anomalous-Nernst field E = kappa (grad T x m) (textbook form; Avci et al., Nature
Physics 11, 570 (2015) separate the thermal part through the transverse signal, # from
memory), computed here with numpy.cross, not with the analysis's formula; and the simulated
device's own split of its unidirectional resistance (what run.json's truth gives).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from acquire.analysis.fit_tables import RunContext, build_fits_table
from tests.test_angle_magnetisation import CONTEXT, fitted, sweep_points

LENGTH, WIDTH = 40e-6, 5e-6


def cross_product_points(spin_ohm: float, nernst: float, current_A: float) -> pd.DataFrame:
    """Odd parts from E = k (grad T x m), grad T along +z, read over L and over w; the
    coefficient k g is `nernst` (volt per metre per A^2), m = (cos phi, sin phi, 0)."""
    angles = np.arange(0.0, 360.0, 10.0)
    phi = np.radians(angles)
    m = np.column_stack([np.cos(phi), np.sin(phi), np.zeros_like(phi)])
    field = nernst * current_A**2 * np.cross([0.0, 0.0, 1.0], m)
    # V = E . l along each pair, divided by I: the unidirectional resistance of each pair
    longitudinal = spin_ohm * m[:, 1] + field[:, 0] * LENGTH / current_A
    transverse = field[:, 1] * WIDTH / current_A
    rows = []
    for channel, odd, even in (("vxx", longitudinal, 300.0 + 0.2 * np.cos(2 * phi)),
                               ("vxy", transverse, 0.03 * np.sin(2 * phi))):
        rows.append(pd.DataFrame({
            "point": np.arange(angles.size), "field_T": 1.0, "angle_deg": angles,
            "current_A": current_A, "channel": channel, "resistance_ohm": even,
            "resistance_ohm_err": 1e-6, "unidirectional_ohm": odd,
            "unidirectional_ohm_err": 1e-7,
        }))
    return pd.concat(rows, ignore_index=True)


def context() -> RunContext:
    return RunContext(rotation_plane="xy", length_m=LENGTH, width_m=WIDTH, **CONTEXT)


def test_parts_follow_the_cross_product_with_opposite_signs_on_the_two_pairs() -> None:
    current, spin, nernst = 2e-3, 1.5e-3, -1.0e4
    table = build_fits_table(cross_product_points(spin, nernst, current), context())
    # E_x = -k g m_y: the longitudinal thermal part at m = +y is -nernst I^2 L / I
    expected_thermal = -nernst * current * LENGTH
    thermal = fitted(table, "umr_thermal_ohm", "vxx")
    assert thermal["value"] == pytest.approx(expected_thermal, rel=1e-6)
    assert fitted(table, "umr_spin_ohm", "vxx")["value"] == pytest.approx(spin, rel=1e-5)
    assert "torque" in thermal["note"] and "field-independent" in thermal["note"]


def test_no_separation_without_the_channel_geometry_or_outside_xy() -> None:
    points = cross_product_points(1e-3, 1e4, 2e-3)
    bare = build_fits_table(points, RunContext(rotation_plane="xy", **CONTEXT))
    assert bare[bare["quantity"] == "umr_thermal_ohm"].empty


def test_simulated_parts_recovered_within_five_percent() -> None:
    points, sample = sweep_points("xy", 0.5, 3e-3, seed=21, sigma=1e-5)
    table = build_fits_table(points, context())
    sample.apply_field(0.5, 90.0)  # m along +y: the parts' amplitudes
    parts = sample.unidirectional_parts("longitudinal", 3e-3, 300.0)
    thermal = fitted(table, "umr_thermal_ohm", "vxx")
    spin = fitted(table, "umr_spin_ohm", "vxx")
    assert thermal["value"] == pytest.approx(parts.thermal_ohm, rel=0.05)
    assert spin["value"] == pytest.approx(parts.spin_ohm + parts.threshold_ohm, rel=0.05)
    # and within their own errors (4 sigma)
    assert abs(thermal["value"] - parts.thermal_ohm) < 4 * thermal["error"]
