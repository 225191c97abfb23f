"""The morning analysis of a run folder: `fit_run` writes fits.csv, `report_run` the page.

Both read only the run folder (points.csv, run.json and, for one figure, readings.csv) and
never touch an instrument, so they can run while a run is still going or on a copy.
"""

from __future__ import annotations

import os
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from acquire.analysis.fit_tables import (
    FIELD_FORMS,
    FIT_COLUMNS,
    QUANTITY_NOTES,
    FitOptions,
    build_fits_table,
    read_fits_table,
    read_points,
    read_run_context,
)
from acquire.analysis.report_data import DataUsed
from acquire.store.csvw import write_metadata

FITS_DESCRIPTION = (
    "Fits of a flipsweep run: one row per fitted quantity and group (tidy). Key columns "
    "(temperature_K, field_T, current_A, angle_deg, channel) are empty when the quantity is "
    "not tied to that key. analysis is angle, current, field, temperature or heating; value "
    "and error (one sigma) are in the row's unit; reduced_chi2 is empty for unweighted fits. "
    "Quantities: " + "; ".join(f"{name}: {meaning}" for name, meaning in QUANTITY_NOTES.items())
)


def fit_run(
    run_dir: Path,
    *,
    angle_offset: bool = False,
    field_form: str = "inverse",
    dR_dT_ohm_per_K: float | None = None,
    heating_warn_K: float = 5.0,
    anisotropy_T: float | None = None,
    anisotropy_from_hall: bool = False,
    include_flagged: bool = False,
    inflate_errors: bool = False,
) -> Path:
    """Fit the run's points; write run_dir/fits.csv and its CSVW metadata; return fits.csv.

    angle_offset: estimate the sample's mounting offset from the 2phi phase and refit all
    angle sweeps with phi - offset. field_form: "inverse" or "linear" (see FIELD_FORMS).
    dR_dT_ohm_per_K: the sample's dR/dT for the heating estimate, when the run has no
    temperature series of its own. heating_warn_K: a temperature rise above this is flagged.
    anisotropy_T: the rotation plane's anisotropy field held fixed in the angle fits (B_k in
    xy, B_eff in zx/zy); None fits it from each sweep. anisotropy_from_hall (zx, zy): each
    longitudinal sweep takes B_eff from the transverse sweep measured with it.
    include_flagged: keep points flagged compliance, instrument_error or wait_timeout (left
    out by default; fits.csv counts them either way). inflate_errors: multiply errors by
    sqrt(reduced chi^2) where it exceeds 1 (off by default: the chi^2 and its p-value say
    whether the model describes the data).
    """
    run_dir = Path(run_dir)
    if field_form not in FIELD_FORMS:
        raise ValueError(f"field_form must be one of {sorted(FIELD_FORMS)}, got {field_form!r}")
    points_path = run_dir / "points.csv"
    if not points_path.exists():
        raise FileNotFoundError(f"{points_path} not found: reduce the run first")
    options = FitOptions(
        angle_offset=angle_offset,
        field_form=field_form,
        dR_dT_ohm_per_K=dR_dT_ohm_per_K,
        heating_warn_K=heating_warn_K,
        anisotropy_T=anisotropy_T,
        anisotropy_from_hall=anisotropy_from_hall,
        include_flagged=include_flagged,
        inflate_errors=inflate_errors,
    )
    table = build_fits_table(read_points(points_path), read_run_context(run_dir), options)
    target = run_dir / "fits.csv"
    _write_csv_atomically(table, target)
    write_metadata(target, list(FIT_COLUMNS), FITS_DESCRIPTION)
    return target


def fits_are_stale(run_dir: Path) -> bool:
    """fits.csv missing, or older than points.csv (a resume or a reduce came after it)."""
    fits_path, points_path = Path(run_dir) / "fits.csv", Path(run_dir) / "points.csv"
    if not fits_path.exists():
        return True
    return points_path.stat().st_mtime_ns > fits_path.stat().st_mtime_ns


def report_run(run_dir: Path) -> Path:
    """Write run_dir/figures/*.png and run_dir/report.html; fit first (with the default
    options) if fits.csv is missing or older than points.csv, so the page never shows fits
    of fewer points than it lists."""
    # Imported here so that fitting never needs the report's modules (or matplotlib).
    from acquire.analysis.figures import make_figures
    from acquire.analysis.report import render_report

    run_dir = Path(run_dir)
    fits_path = run_dir / "fits.csv"
    refitted = fits_are_stale(run_dir)
    if refitted:
        fit_run(run_dir)
    fits = read_fits_table(fits_path)
    points = read_points(run_dir / "points.csv")
    context = read_run_context(run_dir)
    figures = make_figures(run_dir, points, fits, context)
    provenance = DataUsed(
        points_rows=len(points),
        points_modified=_modified(run_dir / "points.csv"),
        fits_modified=_modified(fits_path),
        refitted=refitted,
    )
    page = render_report(context, points, fits, figures, provenance)
    target = run_dir / "report.html"
    temporary = target.with_name(target.name + ".tmp")
    temporary.write_text(page, encoding="utf-8")
    os.replace(temporary, target)
    return target


def _modified(path: Path) -> str:
    stamp = datetime.fromtimestamp(path.stat().st_mtime, tz=timezone.utc)
    return stamp.strftime("%Y-%m-%d %H:%M:%S UTC")


def _write_csv_atomically(table: pd.DataFrame, target: Path) -> None:
    # A report or a plotting script may read fits.csv at any moment: never show it half written.
    temporary = target.with_name(target.name + ".tmp")
    table.to_csv(temporary, index=False, na_rep="", float_format="%.10g")
    os.replace(temporary, target)
