"""fit_run and report_run on synthetic run folders built here (an invented sample, demo-B3).

The folder builder writes points.csv, readings.csv and run.json from a sample model whose
true parameters the tests know, so the tests compare fits with those, not with the code.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.stats import t as student_t

from acquire.analysis import fit_run, report_run
from acquire.analysis.fit_tables import FIT_COLUMN_NAMES

PATTERN = (1, 0, -1)  # "+0-"


@dataclass(frozen=True)
class SyntheticSample:
    """True parameters of the invented sample; resistances in ohm, densities in A/m^2."""

    resistance_300K: float = 850.0
    dR_dT: float = 0.4  # ohm/K
    amr: float = 2.5  # R(m||x) - R(m||y) in xy, R(m||z) - R(m||y) in zy (smr)
    planar_hall: float = 1.2
    offset_deg: float = 3.0
    umr_per_1e11: float = 4e-3  # ohm per 1e11 A/m^2 at high field
    umr_cubic_per_1e33: float = 0.0  # ohm per (1e11 A/m^2)^3
    umr_field_dependent: float = 2e-3  # extra UMR at zero field, ohm per 1e11 A/m^2
    umr_field_scale_T: float = 0.5
    heating_ohm_per_mA2: float = 0.04
    density_per_A: float = 1.25e12 / 33 * 1e3  # W/CoFeB stack below: 3.79e10 A/m^2 per mA
    noise_resistance: float = 2e-3
    noise_unidirectional: float = 2e-5

    def resistance(self, temperature, angle, current_A, transverse):
        phi = np.deg2rad(angle - self.offset_deg)
        if transverse:
            return 0.5 * self.planar_hall * np.sin(2 * phi) + 0 * temperature
        heating = self.heating_ohm_per_mA2 * (current_A * 1e3) ** 2
        base = self.resistance_300K + self.dR_dT * (temperature - 300.0)
        return base + 0.5 * self.amr * (1 + np.cos(2 * phi)) + heating

    def unidirectional(self, field_T, angle, current_A, transverse):
        x = current_A * self.density_per_A / 1e11
        phi = np.deg2rad(angle - self.offset_deg)
        scale = self.umr_field_scale_T
        per_unit = self.umr_per_1e11 + self.umr_field_dependent * scale / (abs(field_T) + scale)
        amplitude = per_unit * x + self.umr_cubic_per_1e33 * x**3
        return (0.1 if transverse else 1.0) * amplitude * np.sin(phi)


@dataclass
class SyntheticRun:
    temperatures: list[float] = field(default_factory=lambda: [300.0])
    fields: list[float] = field(default_factory=lambda: [1.0])
    angles: list[float] = field(default_factory=lambda: list(np.arange(0.0, 360.0, 15.0)))
    currents: list[float] = field(default_factory=lambda: [1e-3, 2e-3, 3e-3])
    channels: tuple[str, ...] = ("vxx", "vxy")
    plane: str = "xy"
    sample: SyntheticSample = field(default_factory=SyntheticSample)
    seed: int = 7
    cycles: int = 2
    repeats: int = 2
    write_density: bool = True


def build_synthetic_run(run_dir: Path, run: SyntheticRun) -> Path:
    """Write points.csv, readings.csv and run.json of a noisy run of the invented sample."""
    run_dir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(run.seed)
    grid = np.array(
        np.meshgrid(run.temperatures, run.fields, run.angles, run.currents, indexing="ij")
    ).reshape(4, -1)
    temperature, field_T, angle, current = grid
    n_points = temperature.size
    point_rows = []
    reading_rows = []
    time_s = 0.0
    sample = run.sample
    for channel in run.channels:
        transverse = "xy" in channel
        r_true = sample.resistance(temperature, angle, current, transverse)
        u_true = np.array(
            [sample.unidirectional(b, a, i, transverse) for b, a, i in zip(field_T, angle, current)]
        )
        r_meas = r_true + rng.normal(0, sample.noise_resistance, n_points)
        u_meas = u_true + rng.normal(0, sample.noise_unidirectional, n_points)
        ratio = u_meas / r_meas
        ratio_err = np.abs(ratio) * np.hypot(
            sample.noise_unidirectional / np.abs(u_meas), sample.noise_resistance / r_meas
        )
        # points.csv quotes 68.3 % half-widths, Student's t with cycles - 1 dof times the
        # standard error (scipy.stats.t); the generator's standard error is the true sigma.
        t68 = float(student_t.ppf(0.5 + 0.682689492137086 / 2, run.cycles - 1))
        point_rows.append(
            pd.DataFrame(
                {
                    "point": np.arange(n_points),
                    "temperature_K": temperature,
                    "field_T": field_T,
                    "angle_deg": angle,
                    "current_A": current,
                    "current_density_A_m2": current * sample.density_per_A
                    if run.write_density
                    else np.nan,
                    "channel": channel,
                    "n_cycles": run.cycles,
                    "dof": run.cycles - 1,
                    "resistance_ohm": r_meas,
                    "resistance_ohm_err": sample.noise_resistance * t68,
                    "unidirectional_ohm": u_meas,
                    "unidirectional_ohm_err": sample.noise_unidirectional * t68,
                    "unidirectional_ratio": ratio,
                    "unidirectional_ratio_err": ratio_err * t68,
                    "offset_V": 2e-6,
                    "offset_V_err": 1e-8,
                    "flags": "",
                }
            )
        )
    points = pd.concat(point_rows).sort_values(["point", "channel"], kind="stable")
    points.to_csv(run_dir / "points.csv", index=False)

    # readings.csv for the first few points only: the time-trace figure needs no more.
    for point in range(min(n_points, 4)):
        for cycle in range(run.cycles):
            for polarity in PATTERN:
                for repeat in range(run.repeats):
                    time_s += 0.05
                    for channel in run.channels:
                        transverse = "xy" in channel
                        i = current[point] * polarity
                        r = sample.resistance(
                            temperature[point], angle[point], current[point], transverse
                        )
                        u = sample.unidirectional(
                            field_T[point], angle[point], current[point], transverse
                        )
                        voltage = i * r + abs(i) * u + 2e-6 + rng.normal(0, 2e-8)
                        reading_rows.append(
                            (
                                point,
                                cycle,
                                repeat,
                                round(time_s, 3),
                                "",
                                temperature[point],
                                field_T[point],
                                angle[point],
                                i,
                                polarity,
                                channel,
                                voltage,
                                temperature[point],
                                field_T[point],
                                angle[point],
                                "",
                            )
                        )
    pd.DataFrame(
        reading_rows,
        columns=[
            "point",
            "cycle",
            "repeat",
            "time_s",
            "timestamp",
            "temperature_K",
            "field_T",
            "angle_deg",
            "current_A",
            "polarity",
            "channel",
            "voltage_V",
            "temperature_read_K",
            "field_read_T",
            "angle_read_deg",
            "flags",
        ],
    ).to_csv(run_dir / "readings.csv", index=False)

    run_json = {
        "protocol": {
            "normalised": {
                "name": "demo angle and current scan",
                "rotation_plane": run.plane,
                "sample": {
                    "id": "demo-B3",
                    "stack": "CoFeB 2 nm / W 5 nm",
                    "channel": {"length_m": 40e-6, "width_m": 4e-6},
                    "layers": [
                        {"name": "CoFeB", "thickness_m": 2e-9, "resistivity_ohm_m": 1.5e-6},
                        {
                            "name": "W",
                            "thickness_m": 5e-9,
                            "resistivity_ohm_m": 1.2e-6,
                            "carrier": True,
                        },
                    ],
                },
            }
        },
        "rig": {"normalised": {"instruments": {"vxx": {"role": "voltmeter"}}}},
    }
    (run_dir / "run.json").write_text(json.dumps(run_json), encoding="utf-8")
    return run_dir


def _full_run() -> SyntheticRun:
    return SyntheticRun(
        temperatures=[250.0, 275.0, 300.0],
        fields=[0.1, 0.3, 1.0, 3.0],
        currents=[1e-3, 2e-3, 3e-3, 4e-3],
    )


def test_fit_run_writes_table_and_metadata_with_every_analysis(tmp_path: Path) -> None:
    run_dir = build_synthetic_run(tmp_path / "run", _full_run())
    fits_path = fit_run(run_dir)
    assert fits_path == run_dir / "fits.csv"
    metadata = json.loads((run_dir / "fits.csv-metadata.json").read_text())
    names = [column["name"] for column in metadata["tableSchema"]["columns"]]
    assert names == list(FIT_COLUMN_NAMES)
    fits = pd.read_csv(fits_path)
    assert list(fits.columns) == list(FIT_COLUMN_NAMES)
    assert set(fits["analysis"]) == {"angle", "current", "field", "temperature", "heating"}


def test_fit_run_recovers_the_sample_within_errors(tmp_path: Path) -> None:
    run = _full_run()
    sample = run.sample
    run_dir = build_synthetic_run(tmp_path / "run", run)
    fits = pd.read_csv(fit_run(run_dir))

    def rows(analysis: str, quantity: str) -> pd.DataFrame:
        selected = fits[(fits["analysis"] == analysis) & (fits["quantity"] == quantity)]
        assert not selected.empty, quantity
        return selected

    # The generator's noise is Gaussian with the errors it writes, so a correct fit lands
    # within 4 sigma in (nearly) every group; 4 rather than 3 because dozens of groups are
    # checked at once (P(|z| > 4) = 6e-5 per group).
    # Without the offset option the fit reports the cos 2phi projection: a cos 2(phi - phi0)
    # term has cos 2phi coefficient a*cos(2 phi0) (angle-difference identity).
    projection = math.cos(math.radians(2 * sample.offset_deg))
    amr = rows("angle", "amr_plus_smr_ohm")
    assert np.all(np.abs(amr["value"] - sample.amr * projection) < 4 * amr["error"])
    hall = rows("angle", "planar_hall_ohm")
    # R_xy = R_PHE sin 2phi_M: the generator's 0.5 * planar_hall is R_PHE
    expected_hall = 0.5 * sample.planar_hall * projection
    assert np.all(np.abs(hall["value"] - expected_hall) < 4 * hall["error"])
    offset = rows("angle", "angle_offset_deg")
    assert np.all(np.abs(offset["value"] - sample.offset_deg) < 4 * offset["error"])

    umr = rows("angle", "umr_ohm")
    x = umr["current_A"] * sample.density_per_A / 1e11
    scale = sample.umr_field_scale_T
    per_unit = sample.umr_per_1e11 + sample.umr_field_dependent * scale / (umr["field_T"] + scale)
    # the sin(phi - offset) model projects onto sin phi with cos(offset)
    expected = per_unit * x * math.cos(math.radians(sample.offset_deg))
    assert np.all(np.abs(umr["value"] - expected) < 4 * umr["error"])

    rise = rows("heating", "temperature_rise_K_per_mA2")
    true_rise = sample.heating_ohm_per_mA2 / sample.dR_dT
    assert np.all(np.abs(rise["value"] - true_rise) < 4 * rise["error"])


def test_fit_run_options_are_applied(tmp_path: Path) -> None:
    run_dir = build_synthetic_run(tmp_path / "run", _full_run())
    fits = pd.read_csv(
        fit_run(
            run_dir,
            angle_offset=True,
            field_form="linear",
            dR_dT_ohm_per_K=0.01,
            heating_warn_K=0.5,
        )
    )
    applied = fits[fits["quantity"] == "angle_offset_applied_deg"]
    assert len(applied) == 1
    assert abs(applied["value"].iloc[0] - 3.0) < 4 * applied["error"].iloc[0]
    # after subtracting the offset the AMR sits in cos 2phi alone: sin 2phi term ~ 0
    sin2 = fits[(fits["quantity"] == "resistance_sin2") & (fits["channel"] == "vxx")]
    assert np.all(np.abs(sin2["value"]) < 4 * sin2["error"] + 0.02)
    assert "umr_field_slope_ohm_per_T" in set(fits["quantity"])
    # dR/dT of 0.01 ohm/K makes 0.04 ohm/mA^2 a 4 K/mA^2 rise: 64 K at 4 mA, above 0.5 K
    at_max = fits[fits["quantity"] == "temperature_rise_at_max_current_K"]
    assert at_max["note"].str.startswith("WARNING").all()


def test_fit_run_without_a_points_file_says_so(tmp_path: Path) -> None:
    with pytest.raises(FileNotFoundError, match=r"points\.csv"):
        fit_run(tmp_path)


def test_fit_run_rejects_an_unknown_field_form(tmp_path: Path) -> None:
    run_dir = build_synthetic_run(tmp_path / "run", SyntheticRun())
    with pytest.raises(ValueError, match="field_form"):
        fit_run(run_dir, field_form="quadratic")


def test_report_run_writes_figures_and_page(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    run_dir = build_synthetic_run(tmp_path / "run", _full_run())
    page_path = report_run(run_dir)
    assert page_path == run_dir / "report.html"
    assert (run_dir / "fits.csv").exists()  # fitted on the way, as none existed
    page = page_path.read_text(encoding="utf-8")
    pngs = sorted((run_dir / "figures").glob("*.png"))
    assert len(pngs) == 5
    for png in pngs:
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, sec. 5.2)
        assert f'src="figures/{png.name}"' in page
    assert "demo-B3" in page and "demo angle and current scan" in page


def test_report_run_skips_figures_the_data_cannot_support(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    run = SyntheticRun(angles=[30.0], currents=[1e-3], channels=("vxx",))
    run_dir = build_synthetic_run(tmp_path / "run", run)
    page = report_run(run_dir).read_text(encoding="utf-8")
    pngs = sorted(path.name for path in (run_dir / "figures").glob("*.png"))
    assert pngs == ["time_trace.png"]
    assert page.count('class="figure-skipped"') == 4
