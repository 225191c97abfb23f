"""Grouping points into fits and the tidy table, on small synthetic point tables.

Expected values come from the generating formulas written here (and the trigonometric
identities named beside them), never from the code under test.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from acquire.analysis.fit_tables import (
    FIT_COLUMN_NAMES,
    FitOptions,
    RunContext,
    build_fits_table,
    group_ids,
    read_run_context,
)

LAYERS = (
    {"name": "CoFeB", "thickness_m": 2e-9, "resistivity_ohm_m": 1.5e-6, "carrier": False},
    {"name": "W", "thickness_m": 5e-9, "resistivity_ohm_m": 1.2e-6, "carrier": True},
)
DENSITY_PER_A = 1.25e12 / 33 * 1e3  # the stack above, 4 um wide (worked out in test_fits)


def points_table(**columns: object) -> pd.DataFrame:
    """A points.csv-shaped table; scalar columns are broadcast, missing ones left empty."""
    lengths = [len(v) for v in columns.values() if isinstance(v, list | np.ndarray)]
    n = max(lengths) if lengths else 1
    frame = pd.DataFrame({"point": np.arange(n)})
    for name, value in columns.items():
        frame[name] = value
    return frame


def rows(table: pd.DataFrame, analysis: str, quantity: str) -> pd.DataFrame:
    selected = table[(table["analysis"] == analysis) & (table["quantity"] == quantity)]
    return selected.reset_index(drop=True)


# --- grouping and context --------------------------------------------------------------------


def test_empty_keys_form_their_own_group_sorted_last() -> None:
    frame = pd.DataFrame(
        {"field_T": [1.0, np.nan, 0.5, 1.0, np.nan], "channel": ["a", "a", "a", "a", "b"]}
    )
    ids, keys = group_ids(frame, ("field_T", "channel"))
    assert ids.tolist() == [1, 2, 0, 1, 3]
    assert keys["field_T"].tolist()[:2] == [0.5, 1.0] and keys["field_T"].isna().tolist()[2:]
    assert keys["channel"].tolist() == ["a", "a", "a", "b"]


def test_channel_kind_prefers_the_rig_probe_over_the_name() -> None:
    context = RunContext(channel_probes={"v2": "transverse", "vxy": "longitudinal"})
    assert context.channel_kind("v2") == "transverse"
    assert context.channel_kind("vxy") == "longitudinal"  # the rig says so
    assert context.channel_kind("v_xy") == "transverse"  # by name
    assert context.channel_kind("hall_b") == "transverse"
    assert context.channel_kind("vxx") == "longitudinal"


def test_run_context_tolerates_missing_and_alternative_keys(tmp_path: Path) -> None:
    assert read_run_context(tmp_path) == RunContext()  # no run.json at all
    document = {
        "protocol": {
            "normalised": {
                "name": "cooldown scan",
                "rotation_plane": "zy",
                "sample": {
                    "id": "demo-C1",
                    "channel": {"length": 4e-5, "width": 4e-6},
                    "layers": [{"name": "W", "thickness": 5e-9, "resistivity": 1.2e-6}],
                    "sheet_resistance": 250.0,
                },
            }
        },
        "rig": {
            "normalised": {"instruments": {"v2": {"role": "voltmeter", "probe": "transverse"}}}
        },
    }
    (tmp_path / "run.json").write_text(json.dumps(document))
    context = read_run_context(tmp_path)
    assert context.rotation_plane == "zy" and context.sample_id == "demo-C1"
    assert context.width_m == 4e-6 and context.sheet_resistance_ohm == 250.0
    assert context.layers[0]["thickness_m"] == 5e-9
    assert context.channel_kind("v2") == "transverse"
    (tmp_path / "run.json").write_text(json.dumps({"protocol": {}}))
    assert read_run_context(tmp_path).rotation_plane == "xy"


# --- angle -----------------------------------------------------------------------------------


def angle_points(
    angles: np.ndarray, plane_terms: dict[str, float], channel: str = "vxx", current: float = 2e-3
) -> pd.DataFrame:
    phi = np.radians(angles)
    resistance = (
        plane_terms.get("c0", 900.0)
        + plane_terms.get("cos2", 0.0) * np.cos(2 * phi)
        + plane_terms.get("sin2", 0.0) * np.sin(2 * phi)
        + plane_terms.get("cos1", 0.0) * np.cos(phi)
    )
    unidirectional = plane_terms.get("u_sin1", 0.0) * np.sin(phi)
    return points_table(
        temperature_K=300.0,
        field_T=1.0,
        angle_deg=angles,
        current_A=current,
        current_density_A_m2=current * DENSITY_PER_A,
        channel=channel,
        resistance_ohm=resistance,
        resistance_ohm_err=1e-3,
        unidirectional_ohm=unidirectional,
        unidirectional_ohm_err=1e-5,
        unidirectional_ratio=unidirectional / resistance,
        unidirectional_ratio_err=1e-8,
    )


def test_angle_fits_need_five_distinct_angles() -> None:
    four = angle_points(np.array([0.0, 90.0, 180.0, 270.0, 0.0, 90.0]), {"cos2": 1.0})
    assert build_fits_table(four, RunContext()).query("analysis == 'angle'").empty
    five = angle_points(np.arange(0.0, 360.0, 72.0), {"cos2": 1.0})
    assert len(rows(build_fits_table(five, RunContext()), "angle", "amr_plus_smr_ohm")) == 1


@pytest.mark.parametrize(
    ("plane", "name", "expected"),
    [
        # xy: R = R_perp + dR cos^2 phi = R_perp + dR/2 + dR/2 cos 2phi, so dR = 2*a2 = 1.5
        ("xy", "amr_plus_smr_ohm", 1.5),
        # zy: cos 2 term 0.75 -> R(theta=0, m||z) - R(theta=90, m||y) = 2*0.75
        ("zy", "smr_ohm", 1.5),
        # zx: R(m||x) - R(m||z) = R(90) - R(0) = -2*a2
        ("zx", "amr_ohm", -1.5),
    ],
)
def test_named_magnetoresistance_per_rotation_plane(plane: str, name: str, expected: float):
    points = angle_points(np.arange(0.0, 360.0, 20.0), {"cos2": 0.75, "u_sin1": 3e-3})
    table = build_fits_table(points, RunContext(rotation_plane=plane))
    found = rows(table, "angle", name)
    assert found["value"].iloc[0] == pytest.approx(expected, abs=1e-9)
    umr = rows(table, "angle", "umr_ohm")
    assert umr["value"].iloc[0] == pytest.approx(3e-3, abs=1e-12)
    assert ("expected ~0" in umr["note"].iloc[0]) == (plane == "zx")


def test_planar_and_anomalous_hall_from_the_transverse_channel() -> None:
    angles = np.arange(0.0, 360.0, 15.0)
    points = angle_points(angles, {"c0": 0.0, "sin2": 0.6, "cos1": 0.2}, channel="vxy")
    xy = build_fits_table(points, RunContext(rotation_plane="xy"))
    # R_xy = R_PHE sin 2phi_M: a sin 2 term of 0.6 is R_PHE = 0.6
    assert rows(xy, "angle", "planar_hall_ohm")["value"].iloc[0] == pytest.approx(0.6)
    assert rows(xy, "angle", "amr_plus_smr_ohm").empty  # not a longitudinal channel
    zx = build_fits_table(points, RunContext(rotation_plane="zx"))
    assert rows(zx, "angle", "anomalous_hall_ohm")["value"].iloc[0] == pytest.approx(0.2)


def test_angle_offset_is_read_from_the_second_harmonic_and_can_be_removed() -> None:
    angles = np.arange(0.0, 360.0, 10.0)
    offset = 4.0
    # A cos 2(phi - offset) = A cos(2 offset) cos 2phi + A sin(2 offset) sin 2phi
    amplitude = 1.0
    terms = {
        "cos2": amplitude * math.cos(math.radians(2 * offset)),
        "sin2": amplitude * math.sin(math.radians(2 * offset)),
    }
    points = angle_points(angles, terms)
    plain = build_fits_table(points, RunContext())
    assert rows(plain, "angle", "angle_offset_deg")["value"].iloc[0] == pytest.approx(offset)
    corrected = build_fits_table(points, RunContext(), FitOptions(angle_offset=True))
    applied = rows(corrected, "angle", "angle_offset_applied_deg")
    assert applied["value"].iloc[0] == pytest.approx(offset)
    corrected_mr = rows(corrected, "angle", "amr_plus_smr_ohm")["value"].iloc[0]
    assert corrected_mr == pytest.approx(2 * amplitude)


# --- current ---------------------------------------------------------------------------------


def current_points(
    currents: np.ndarray, umr_of_x: np.ndarray, sigma: float = 1e-6, with_density: bool = True
) -> pd.DataFrame:
    density = currents * DENSITY_PER_A if with_density else np.nan
    return points_table(
        temperature_K=300.0,
        field_T=0.5,
        angle_deg=90.0,
        current_A=currents,
        current_density_A_m2=density,
        channel="vxx",
        resistance_ohm=900.0,
        resistance_ohm_err=1e-3,
        unidirectional_ohm=umr_of_x,
        unidirectional_ohm_err=sigma,
        unidirectional_ratio=umr_of_x / 900.0,
        unidirectional_ratio_err=sigma / 900.0,
    )


def test_current_fits_line_cubic_and_ratio() -> None:
    currents = np.array([0.5, 1.0, 1.5, 2.0, 2.5, 3.0]) * 1e-3
    x = currents * DENSITY_PER_A / 1e11  # in units of 1e11 A/m^2
    k1, k3 = 5e-3, -4e-4
    table = build_fits_table(current_points(currents, k1 * x + k3 * x**3), RunContext())
    assert rows(table, "current", "umr_linear_ohm")["value"].iloc[0] == pytest.approx(k1)
    assert rows(table, "current", "umr_cubic_ohm")["value"].iloc[0] == pytest.approx(k3)
    line = rows(table, "current", "umr_slope_ohm")
    # Source: the through-origin least-squares slope is sum(x*y)/sum(x^2) (equal weights).
    y = k1 * x + k3 * x**3
    assert line["value"].iloc[0] == pytest.approx(np.sum(x * y) / np.sum(x**2))
    assert line["unit"].iloc[0] == "ohm per 1e11 A/m^2"
    ratio = rows(table, "current", "umr_ratio_per_1e11_A_m2")["value"].iloc[0]
    assert ratio == pytest.approx(np.sum(x * y / 900.0) / np.sum(x**2))


def test_departure_from_linearity_is_the_first_current_off_the_low_current_line() -> None:
    currents = np.array([0.5, 1.0, 1.5, 2.0, 2.5, 3.0]) * 1e-3
    x = currents * DENSITY_PER_A / 1e11
    umr = 5e-3 * x
    umr[4:] += np.array([2e-5, 1e-4])  # 20 and 100 sigma off the line from 2.5 mA on
    table = build_fits_table(current_points(currents, umr), RunContext())
    onset = rows(table, "current", "nonlinear_from_A_m2")
    assert onset["value"].iloc[0] == pytest.approx(2.5e-3 * DENSITY_PER_A)
    linear = build_fits_table(current_points(currents, 5e-3 * x), RunContext())
    found = rows(linear, "current", "nonlinear_from_A_m2")
    assert math.isnan(found["value"].iloc[0]) and found["note"].iloc[0].startswith("none")


def test_current_density_from_the_sample_when_points_have_none() -> None:
    currents = np.array([1.0, 2.0, 3.0]) * 1e-3
    umr = 5e-3 * currents * DENSITY_PER_A / 1e11
    points = current_points(currents, umr, with_density=False)
    with_geometry = RunContext(layers=LAYERS, width_m=4e-6)
    slope = rows(build_fits_table(points, with_geometry), "current", "umr_slope_ohm")
    assert slope["value"].iloc[0] == pytest.approx(5e-3)
    # no geometry either: the fit falls back to the current in mA, and says so
    fallback = rows(build_fits_table(points, RunContext()), "current", "umr_slope_ohm")
    assert fallback["unit"].iloc[0] == "ohm per mA"
    assert fallback["value"].iloc[0] == pytest.approx(5e-3 * DENSITY_PER_A * 1e-3 / 1e11)
    assert "per mA" in fallback["note"].iloc[0]


def test_two_currents_are_not_a_current_dependence() -> None:
    points = current_points(np.array([1e-3, 2e-3]), np.array([1e-3, 2e-3]))
    assert rows(build_fits_table(points, RunContext()), "current", "umr_slope_ohm").empty


# --- field -----------------------------------------------------------------------------------


def field_points(fields: np.ndarray, umr: np.ndarray, sigma: float = 1e-6) -> pd.DataFrame:
    return points_table(
        temperature_K=300.0,
        field_T=fields,
        angle_deg=90.0,
        current_A=2e-3,
        current_density_A_m2=2e-3 * DENSITY_PER_A,
        channel="vxx",
        resistance_ohm=900.0,
        resistance_ohm_err=1e-3,
        unidirectional_ohm=umr,
        unidirectional_ohm_err=sigma,
        unidirectional_ratio=umr / 900.0,
        unidirectional_ratio_err=sigma / 900.0,
    )


def test_field_fit_inverse_form_with_both_signs_of_m_combined() -> None:
    magnitudes = np.array([0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0])
    independent, dependent, scale = 2e-3, 1.5e-3, 0.3
    umr = independent + dependent * scale / (magnitudes + scale)
    # The UMR is odd in m, and a negative field at 90 deg turns m to -y; an offset of the
    # unidirectional part (even in m) must cancel in the m-odd combination.
    offset = 4e-4
    points = field_points(np.concatenate([magnitudes, -magnitudes]),
                          np.concatenate([umr, -umr]) + offset)
    table = build_fits_table(points, RunContext())
    scale_rows = rows(table, "field", "umr_field_scale_T")
    assert scale_rows["value"].tolist() == pytest.approx([scale], rel=1e-5)
    independents = rows(table, "field", "umr_field_independent_ohm")
    assert independents["value"].tolist() == pytest.approx([independent], rel=1e-5)
    assert "+m and -m combined" in independents["note"].iloc[0]


def test_field_loop_branches_fitted_apart_without_zero_and_switching_fields() -> None:
    # A loop -1 T -> 1 T -> -1 T at 90 deg whose resistance differs between the branches
    # below 0.15 T (switching); the UMR follows the inverse form on both branches.
    up = np.round(np.arange(-1.0, 1.0001, 0.05), 10)
    fields = np.concatenate([up, up[::-1][1:]])
    branch_up = np.arange(fields.size) < up.size
    magnitude = np.abs(fields)
    umr = np.sign(fields) * (2e-3 + 1e-3 * 0.3 / (magnitude + 0.3))
    resistance = 900.0 + np.where((magnitude < 0.15) & branch_up, 0.5, 0.0)
    umr = np.where((magnitude < 0.15) & branch_up, -umr, umr)  # m not yet reversed
    umr[fields == 0] = 5e-3  # a spike at B = 0 that must not enter the fit
    points = field_points(fields, umr).assign(point=np.arange(fields.size),
                                              resistance_ohm=resistance)
    table = build_fits_table(points, RunContext())
    scale_rows = rows(table, "field", "umr_field_scale_T")
    assert sorted(scale_rows["branch"]) == ["back", "up"]
    assert scale_rows["value"].tolist() == pytest.approx([0.3, 0.3], rel=1e-4)
    note = scale_rows["note"].iloc[0]
    assert "B = 0 left out" in note and "switching region |B| <= 0.1 T" in note


def test_field_fit_warns_when_the_range_stops_near_the_field_scale() -> None:
    magnitudes = np.array([0.05, 0.1, 0.2, 0.4, 0.6, 0.8, 1.0])
    umr = 2e-3 + 1.5e-3 * 2.0 / (magnitudes + 2.0)  # Bs = 2 T, fields up to 0.5 Bs
    table = build_fits_table(field_points(magnitudes, umr, sigma=1e-7), RunContext())
    note = rows(table, "field", "umr_field_independent_ohm")["note"].iloc[0]
    assert "WARNING: the fields reach" in note


def test_no_field_or_current_umr_rows_for_a_hall_channel() -> None:
    magnitudes = np.array([0.1, 0.2, 0.5, 1.0, 2.0])
    points = field_points(magnitudes, 1e-3 + 0 * magnitudes).assign(channel="vxy")
    table = build_fits_table(points, RunContext())
    assert table[table["analysis"].isin(["field", "current"])].empty


def test_field_fit_with_three_fields_falls_back_to_the_linear_form() -> None:
    fields = np.array([1.0, 2.0, 3.0])
    table = build_fits_table(field_points(fields, 4e-3 - 2e-4 * fields), RunContext())
    slope = rows(table, "field", "umr_field_slope_ohm_per_T")
    assert slope["value"].iloc[0] == pytest.approx(-2e-4)
    assert "linear form used" in slope["note"].iloc[0]


# --- temperature and heating -----------------------------------------------------------------


def heating_points(dr_dt: float, heating_ohm_per_mA2: float) -> pd.DataFrame:
    temperatures = np.repeat([280.0, 290.0, 300.0, 310.0], 3)
    currents = np.tile([1e-3, 2e-3, 3e-3], 4)
    resistance = (
        900.0 + dr_dt * (temperatures - 300.0) + heating_ohm_per_mA2 * (currents * 1e3) ** 2
    )
    return points_table(
        temperature_K=temperatures,
        field_T=1.0,
        angle_deg=90.0,
        current_A=currents,
        current_density_A_m2=currents * DENSITY_PER_A,
        channel="vxx",
        resistance_ohm=resistance,
        resistance_ohm_err=1e-3,
        unidirectional_ohm=1e-3,
        unidirectional_ohm_err=1e-6,
        unidirectional_ratio=1e-6,
        unidirectional_ratio_err=1e-9,
    )


def test_heating_rise_from_the_runs_own_temperature_series() -> None:
    table = build_fits_table(heating_points(dr_dt=0.5, heating_ohm_per_mA2=0.1), RunContext())
    slopes = rows(table, "temperature", "dR_dT_ohm_per_K")
    assert slopes["value"].tolist() == pytest.approx([0.5] * 4)
    assert slopes["n_points"].tolist() == [2, 3, 3, 2]  # one-sided windows at the ends
    # dT = h I^2 / (dR/dT): 0.1 ohm/mA^2 / 0.5 ohm/K = 0.2 K/mA^2, 1.8 K at 3 mA
    rise = rows(table, "heating", "temperature_rise_K_per_mA2")
    assert rise["value"].tolist() == pytest.approx([0.2] * 4)
    at_max = rows(table, "heating", "temperature_rise_at_max_current_K")
    assert at_max["value"].tolist() == pytest.approx([1.8] * 4)
    assert not at_max["note"].str.startswith("WARNING").any()


def test_heating_warns_above_the_threshold_with_a_given_slope() -> None:
    points = heating_points(dr_dt=0.5, heating_ohm_per_mA2=0.1)
    options = FitOptions(dR_dT_ohm_per_K=0.05, heating_warn_K=10.0)
    at_max = rows(
        build_fits_table(points, RunContext(), options),
        "heating",
        "temperature_rise_at_max_current_K",
    )
    # 0.1 / 0.05 = 2 K/mA^2, 18 K at 3 mA: above 10 K
    assert at_max["value"].tolist() == pytest.approx([18.0] * 4)
    assert at_max["note"].str.startswith("WARNING: above 10 K").all()


def test_heating_without_any_dR_dT_says_what_is_missing() -> None:
    points = heating_points(dr_dt=0.5, heating_ohm_per_mA2=0.1)
    one_temperature = points[points["temperature_K"] == 300.0]
    rise = rows(
        build_fits_table(one_temperature, RunContext()), "heating", "temperature_rise_K_per_mA2"
    )
    assert math.isnan(rise["value"].iloc[0])
    assert "--dr-dt" in rise["note"].iloc[0]


def test_amplitudes_are_tabulated_per_temperature() -> None:
    angles = np.arange(0.0, 360.0, 30.0)
    frames = []
    for temperature, amplitude in ((100.0, 2e-3), (200.0, 3e-3)):
        frame = angle_points(angles, {"cos2": 0.5, "u_sin1": amplitude})
        frames.append(frame.assign(temperature_K=temperature))
    table = build_fits_table(pd.concat(frames, ignore_index=True), RunContext())
    umr = rows(table, "temperature", "umr_ohm").sort_values("temperature_K")
    assert umr["value"].tolist() == pytest.approx([2e-3, 3e-3])


def test_table_has_the_documented_columns_even_when_nothing_fits() -> None:
    table = build_fits_table(points_table(channel="vxx", current_A=1e-3), RunContext())
    assert list(table.columns) == list(FIT_COLUMN_NAMES) and table.empty


def test_angle_fit_errors_stay_honest_when_point_errors_come_from_four_cycles() -> None:
    # Each point's error is a standard error over 4 cycles (3 degrees of freedom), as the
    # reduction writes it. Weighting by such errors point by point would understate the
    # amplitude's error about twofold; the z-scores of the reported amplitudes against the
    # truth must have a standard deviation of 1. 400 sweeps give that standard deviation a
    # relative standard error of 1/sqrt(800) = 3.5 %: the 12 % band is over 3 sigma.
    rng = np.random.default_rng(13)
    angles = np.arange(0.0, 360.0, 15.0)
    n_sweeps, cycles, noise = 400, 4, 2e-5
    umr_true = 3e-3
    frames = []
    for sweep in range(n_sweeps):
        per_cycle = umr_true * np.sin(np.radians(angles))[:, None] + rng.normal(
            0, noise, (angles.size, cycles)
        )
        frame = angle_points(angles, {"cos2": 0.5})
        frame["unidirectional_ohm"] = per_cycle.mean(axis=1)
        frame["unidirectional_ohm_err"] = per_cycle.std(axis=1, ddof=1) / math.sqrt(cycles)
        frames.append(frame.assign(temperature_K=float(sweep)))
    table = build_fits_table(pd.concat(frames, ignore_index=True), RunContext())
    umr = rows(table, "angle", "umr_ohm")
    z = (umr["value"] - umr_true) / umr["error"]
    assert len(z) == n_sweeps
    assert 0.88 < z.std() < 1.12, z.std()
