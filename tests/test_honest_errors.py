"""Errors that mean what they say, and flags that count.

- The quoted per-point error is the half-width of a 68.3 % Student's t interval: over 200
  seeds its coverage is within binomial error of 68.3 % (source: scipy.stats.t, and the
  binomial standard deviation sqrt(p (1 - p) / n), common practice).
- Points flagged compliance, instrument_error or wait_timeout stay out of the fits unless
  asked; fits.csv counts them; the report lists them and refits when points.csv is newer.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binom
from scipy.stats import t as student_t

from acquire.analysis import fit_run, report_run
from acquire.analysis.fit_context import RunContext
from acquire.analysis.fit_tables import build_fits_table
from acquire.modes.dc_reversal.reduction import reduce_blocks
from tests.test_report import SyntheticRun, build_synthetic_run

NOMINAL = 0.682689492137086  # P(|z| < 1) for a normal law (scipy.stats.norm.cdf(1) * 2 - 1)


def _coverage(pattern: str, cycles: int, blocks: int, seed: int) -> tuple[float, float, float]:
    """Fraction of blocks whose R and U intervals cover the truth; and of the bare
    standard error's intervals for R."""
    rng = np.random.default_rng(seed)
    current, resistance, unidirectional, sigma = 1e-3, 300.0, 2e-3, 2e-7
    polarity = np.array([{"+": 1, "0": 0, "-": -1}[s] for s in pattern], dtype=float)
    clean = polarity * current * resistance + np.abs(polarity) * current * unidirectional + 1e-5
    voltages = clean[None, None, :, None] + rng.normal(0, sigma, (blocks, cycles, len(pattern), 1))
    result = reduce_blocks(voltages, pattern, np.full(blocks, current))
    r_covered = np.abs(result.resistance_ohm - resistance) <= result.resistance_ohm_err
    u_covered = np.abs(result.unidirectional_ohm - unidirectional) <= result.unidirectional_ohm_err
    t68 = student_t.ppf(0.5 + NOMINAL / 2, cycles - 1)
    bare = np.abs(result.resistance_ohm - resistance) <= result.resistance_ohm_err / t68
    return float(r_covered.mean()), float(u_covered.mean()), float(bare.mean())


def test_four_cycles_quote_t3_intervals_that_cover_68_percent_over_200_seeds() -> None:
    n = 200
    # 99.7 % two-sided binomial acceptance region of the count (scipy.stats.binom).
    low, high = binom.ppf(0.0015, n, NOMINAL) / n, binom.ppf(0.9985, n, NOMINAL) / n
    r_cover, u_cover = [], []
    for seed in range(n):
        r, u, _ = _coverage("+0--0+", 4, 1, seed)
        r_cover.append(r)
        u_cover.append(u)
    assert low <= np.mean(r_cover) <= high, np.mean(r_cover)
    assert low <= np.mean(u_cover) <= high, np.mean(u_cover)


def test_the_bare_standard_error_would_undercover_at_four_cycles() -> None:
    # 40,000 blocks: binomial sd 0.0023. The t interval covers 68.3 %; the bare standard
    # error covers P(|t_3| < 1) = 0.609 (scipy.stats.t.cdf), which the quoted error avoids.
    r, u, bare = _coverage("+0-", 4, 40000, seed=5)
    assert r == pytest.approx(NOMINAL, abs=0.01)
    assert u == pytest.approx(NOMINAL, abs=0.01)
    expected_bare = 2 * student_t.cdf(1.0, 3) - 1
    assert expected_bare == pytest.approx(0.609, abs=0.001)
    assert bare == pytest.approx(expected_bare, abs=0.01)


# --- flags ------------------------------------------------------------------------------------


def _sweep(flag_at: int | None, kind: str = "compliance") -> pd.DataFrame:
    """One angle sweep of R = 100 + 0.5 cos 2phi, errors with 3 dof; one point off by 5 ohm."""
    rng = np.random.default_rng(3)
    angle = np.arange(0.0, 360.0, 15.0)
    t68 = student_t.ppf(0.5 + NOMINAL / 2, 3)
    resistance = 100.0 + 0.5 * np.cos(np.deg2rad(2 * angle)) + rng.normal(0, 1e-3, angle.size)
    flags = np.full(angle.size, "", dtype=object)
    if flag_at is not None:
        resistance[flag_at] += 5.0  # the source was at its compliance limit
        flags[flag_at] = kind
    return pd.DataFrame({
        "point": np.arange(angle.size), "temperature_K": np.nan, "field_T": 1.0,
        "angle_deg": angle, "current_A": 1e-3, "current_density_A_m2": np.nan,
        "channel": "vxx", "n_cycles": 4, "dof": 3, "resistance_ohm": resistance,
        "resistance_ohm_err": 1e-3 * t68, "unidirectional_ohm": 0.0,
        "unidirectional_ohm_err": 1e-5 * t68, "unidirectional_ratio": 0.0,
        "unidirectional_ratio_err": 1e-7 * t68, "offset_V": np.nan, "offset_V_err": np.nan,
        "flags": flags,
    })


def _amr(table: pd.DataFrame) -> pd.Series:
    # In the xy plane the cos 2phi amplitude is AMR and SMR together.
    return table[table["quantity"] == "amr_plus_smr_ohm"].iloc[0]


@pytest.mark.parametrize("kind", ["compliance", "instrument_error", "wait_timeout"])
def test_fits_leave_out_flagged_points_and_count_them(kind: str) -> None:
    clean = _amr(build_fits_table(_sweep(None), RunContext()))
    flagged = build_fits_table(_sweep(5, kind), RunContext())
    amr = _amr(flagged)
    # AMR = 2*a2 = 1 ohm; the sweep's noise gives an error ~ 1e-3 * 2 / sqrt(12) ~ 6e-4.
    assert abs(amr["value"] - 1.0) < 4 * amr["error"]
    assert amr["n_points"] == clean["n_points"] - 1
    assert amr["n_flagged"] == 1 and clean["n_flagged"] == 0
    assert "1 flagged point row(s) left out" in amr["note"]


def test_include_flagged_keeps_them_marked() -> None:
    from acquire.analysis.fit_context import FitOptions

    kept = build_fits_table(_sweep(5), RunContext(), FitOptions(include_flagged=True))
    amr = _amr(kept)
    assert amr["n_flagged"] == 1
    assert "includes 1 flagged point row(s)" in amr["note"]
    # A 5 ohm outlier among 24 points moves 2*a2 by about 2 * 5 * 2 |cos(150 deg)|/24 =
    # 0.36 ohm in a plain harmonic fit (a2 = 2/N sum R cos 2phi on a full uniform sweep),
    # hundreds of errors: the kept point shows in the value.
    assert abs(amr["value"] - 1.0) > 0.1
    assert 2 * 2 * 5.0 * abs(math.cos(math.radians(150.0))) / 24 > 0.1


def test_flags_other_than_the_three_kinds_do_not_exclude() -> None:
    retried = _sweep(None)
    retried.loc[3, "flags"] = "retry"
    assert _amr(build_fits_table(retried, RunContext()))["n_points"] == 24


# --- the report -------------------------------------------------------------------------------


def test_report_refits_when_points_are_newer_and_says_which_data(tmp_path: Path) -> None:
    run_dir = build_synthetic_run(tmp_path / "run", SyntheticRun(cycles=4))
    fit_run(run_dir)
    first = pd.read_csv(run_dir / "fits.csv")
    # A resume adds points after the fit: here, keep only half of them, written later.
    points = pd.read_csv(run_dir / "points.csv")
    half = points[points["point"] < points["point"].max() // 2]
    half.to_csv(run_dir / "points.csv", index=False)
    earlier = (run_dir / "points.csv").stat().st_mtime - 5
    os.utime(run_dir / "fits.csv", (earlier, earlier))
    page = report_run(run_dir).read_text(encoding="utf-8")
    second = pd.read_csv(run_dir / "fits.csv")
    assert second["n_points"].max() < first["n_points"].max()
    assert "fitted now (fits.csv was missing or older than points.csv)" in page
    assert f"({len(half)} point-channel rows)" in page
    # Fresh fits are reused as they are.
    again = report_run(run_dir).read_text(encoding="utf-8")
    assert "fits.csv as written by" in again


def test_report_lists_flagged_points_by_kind(tmp_path: Path) -> None:
    run_dir = build_synthetic_run(tmp_path / "run", SyntheticRun(cycles=4))
    points = pd.read_csv(run_dir / "points.csv", keep_default_na=False)
    points["flags"] = points["flags"].astype(str)
    points.loc[points["point"] == 3, "flags"] = "compliance"
    points.loc[points["point"] == 7, "flags"] = "retry|wait_timeout"
    points.to_csv(run_dir / "points.csv", index=False)
    page = report_run(run_dir).read_text(encoding="utf-8")
    assert "<h2>Flagged points</h2>" in page
    assert "compliance: 1 point(s), left out of the fits: points 3" in page
    assert "wait_timeout: 1 point(s), left out of the fits: points 7" in page
    assert "retry: 1 point(s), kept in the fits: points 7" in page
    fits = pd.read_csv(run_dir / "fits.csv")
    assert fits["n_flagged"].max() >= 1
