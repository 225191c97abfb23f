"""The run's one-page HTML summary: what was measured, the main fitted numbers, the figures.

The page is self-contained apart from the PNGs, which it links by relative path
(figures/NAME.png) so the run folder can be moved or shared as a whole.
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterable

import numpy as np
import pandas as pd

from acquire.analysis.figures import FigureOutcome
from acquire.analysis.fit_tables import RunContext
from acquire.analysis.report_data import DataUsed, flagged_points_html, provenance_html

# (analysis, quantity, heading, display factor, display unit): the numbers a reader wants first.
SUMMARY_QUANTITIES: tuple[tuple[str, str, str, float, str], ...] = (
    ("angle", "umr_ratio", "UMR amplitude / R", 1e6, "ppm"),
    ("angle", "umr_ohm", "UMR amplitude", 1e3, "mΩ"),
    ("angle", "amr_plus_smr_ratio", "(AMR + SMR) ratio, in-plane", 1e2, "%"),
    ("angle", "amr_ratio", "AMR ratio", 1e2, "%"),
    ("angle", "smr_ratio", "SMR ratio", 1e2, "%"),
    ("angle", "planar_hall_ohm", "planar Hall", 1.0, "Ω"),
    ("angle", "anomalous_hall_ohm", "anomalous Hall", 1.0, "Ω"),
    ("angle", "anisotropy_field_T", "in-plane anisotropy field B_k", 1e3, "mT"),
    ("angle", "effective_demag_field_T", "effective demagnetising field B_eff", 1.0, "T"),
    ("angle", "angle_offset_applied_deg", "mounting offset applied", 1.0, "deg"),
    ("current", "umr_ratio_per_1e11_A_m2", "UMR / R per 10¹¹ A/m²", 1e6, "ppm"),
    ("current", "umr_ratio_per_mA", "UMR / R per mA", 1e6, "ppm"),
    ("current", "nonlinear_from_A_m2", "departs from linear at", 1e-11, "10¹¹ A/m²"),
    ("field", "umr_field_independent_ohm", "UMR, field-independent part", 1e3, "mΩ"),
    ("field", "umr_field_dependent_ohm", "UMR, part falling with field", 1e3, "mΩ"),
    ("field", "umr_field_scale_T", "UMR field scale", 1.0, "T"),
    ("field", "umr_field_slope_ohm_per_T", "UMR field slope", 1e3, "mΩ/T"),
    ("heating", "temperature_rise_at_max_current_K", "heating at the largest current", 1.0, "K"),
)
ROWS_PER_QUANTITY = 6
KEY_LABELS = (
    ("temperature_K", "T", "{:.4g} K", 1.0),
    ("field_T", "B", "{:.4g} T", 1.0),
    ("current_A", "I", "{:.4g} mA", 1e3),
    ("angle_deg", "angle", "{:.4g}°", 1.0),
)

STYLE = """
body { font-family: system-ui, sans-serif; margin: 2rem auto; max-width: 72rem; color: #1d232b;
       padding: 0 1rem; }
h1 { font-size: 1.5rem; margin-bottom: 0.2rem; } h2 { font-size: 1.15rem; margin-top: 2rem;
     border-bottom: 1px solid #d9dce1; padding-bottom: 0.2rem; }
table { border-collapse: collapse; font-size: 0.85rem; }
th, td { padding: 0.25rem 0.6rem; border-bottom: 1px solid #e6e8eb; text-align: left; }
td.number { text-align: right; font-variant-numeric: tabular-nums; }
.facts td:first-child { color: #55606e; }
.warning { color: #8f2d16; } .skipped, .figure-skipped { color: #55606e; font-style: italic; }
figure { margin: 1.2rem 0; } figcaption { font-size: 0.85rem; color: #55606e; }
img { max-width: 100%; border: 1px solid #e6e8eb; }
"""


def render_report(
    context: RunContext,
    points: pd.DataFrame,
    fits: pd.DataFrame,
    figures: Iterable[FigureOutcome],
    used: DataUsed | None = None,
) -> str:
    title = context.name or "flipsweep run"
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{_text(title)}</title><style>{STYLE}</style></head><body>",
        f"<h1>{_text(title)}</h1>",
        _facts(context, points, fits),
        provenance_html(used, fits),
        _warnings(fits),
        flagged_points_html(points),
        "<h2>Main fitted quantities</h2>",
        _summary_table(fits),
        "<p>Every fitted number, with its model, reduced χ² and notes, is in "
        "<code>fits.csv</code> (described by <code>fits.csv-metadata.json</code>).</p>",
        "<h2>Figures</h2>",
        *(_figure(outcome) for outcome in figures),
        "</body></html>",
    ]
    return "\n".join(part for part in parts if part) + "\n"


def _text(value: object) -> str:
    return html.escape(str(value), quote=True)


def _facts(context: RunContext, points: pd.DataFrame, fits: pd.DataFrame) -> str:
    sample = context.sample_id or "not recorded"
    if context.stack:
        sample += f" ({context.stack})"
    facts = [
        ("sample", sample),
        ("rotation plane", context.rotation_plane),
        ("points", f"{points['point'].nunique()} points, {len(points)} point-channel rows"),
        ("channels", ", ".join(sorted(set(points["channel"].astype(str)))) or "none"),
    ]
    for column, label in (
        ("temperature_K", "temperatures"),
        ("field_T", "fields"),
        ("angle_deg", "angles"),
        ("current_A", "currents"),
    ):
        values = np.unique(points[column].dropna().to_numpy(float))
        if values.size:
            facts.append((label, _range_text(column, values)))
    analyses = [name for name in dict.fromkeys(fits["analysis"])] if len(fits) else []
    facts.append(("analyses", ", ".join(analyses) or "none: too few points to fit"))
    rows = "".join(f"<tr><td>{_text(k)}</td><td>{_text(v)}</td></tr>" for k, v in facts)
    return f'<table class="facts">{rows}</table>'


def _range_text(column: str, values: np.ndarray) -> str:
    unit, factor = {
        "temperature_K": ("K", 1.0),
        "field_T": ("T", 1.0),
        "angle_deg": ("deg", 1.0),
        "current_A": ("mA", 1e3),
    }[column]
    scaled = values * factor
    if scaled.size <= 6:
        return ", ".join(f"{value:g}" for value in scaled) + f" {unit}"
    return f"{scaled.size} values from {scaled.min():g} to {scaled.max():g} {unit}"


def _warnings(fits: pd.DataFrame) -> str:
    if fits.empty:
        return ""
    flagged = fits[fits["note"].astype(str).str.startswith("WARNING")]
    if flagged.empty:
        return ""
    items = "".join(
        f"<li>{_text(_keys_text(row))}: {_text(row['quantity'])} = {row['value']:.3g} "
        f"{_text(row['unit'])} ({_text(row['note'])})</li>"
        for _, row in flagged.head(20).iterrows()
    )
    more = f"<p>{len(flagged) - 20} more in fits.csv.</p>" if len(flagged) > 20 else ""
    return f'<h2 class="warning">Warnings</h2><ul class="warning">{items}</ul>{more}'


def _summary_table(fits: pd.DataFrame) -> str:
    """One row per group for a quantity fitted in a few groups; one line of statistics for a
    quantity fitted in many (a night's run has hundreds of angle sweeps)."""
    body = []
    for analysis, quantity, heading, factor, unit in SUMMARY_QUANTITIES:
        rows = fits[(fits["analysis"] == analysis) & (fits["quantity"] == quantity)]
        if rows.empty:
            continue
        if len(rows) <= ROWS_PER_QUANTITY:
            for _, row in rows.iterrows():
                value = _measurement(row["value"] * factor, row["error"] * factor)
                note = row["note"] if isinstance(row["note"], str) else ""
                body.append(_summary_row(heading, _keys_text(row), value, unit, note))
        else:
            body.append(_statistics_row(rows, heading, factor, unit))
    if not body:
        return '<p class="skipped">No fit: the run has too few angles, currents or fields.</p>'
    head = (
        "<tr><th>quantity</th><th>group</th><th>value ± error</th><th>unit</th><th>note</th></tr>"
    )
    return f"<table>{head}{''.join(body)}</table>"


def _summary_row(heading: str, group: str, value: str, unit: str, note: str) -> str:
    return (
        f"<tr><td>{_text(heading)}</td><td>{_text(group)}</td>"
        f'<td class="number">{_text(value)}</td><td>{_text(unit)}</td><td>{_text(note)}</td></tr>'
    )


def _statistics_row(rows: pd.DataFrame, heading: str, factor: float, unit: str) -> str:
    values = rows["value"].to_numpy(float) * factor
    errors = rows["error"].to_numpy(float) * factor
    finite = values[np.isfinite(values)]
    group = f"{len(rows)} groups ({len(finite)} with a value)"
    if finite.size == 0:
        linear = rows["note"].astype(str).str.startswith("none").all()
        note = "none: linear in every group" if linear else "no group has a value: see fits.csv"
        return _summary_row(heading, group, "—", unit, note)
    median_error = np.nanmedian(errors) if np.isfinite(errors).any() else math.nan
    value = _measurement(float(np.median(finite)), float(median_error))
    note = (
        f"median (± median error); range {finite.min():.4g} to {finite.max():.4g}; "
        "every group in fits.csv"
    )
    return _summary_row(heading, group, value, unit, note)


def _keys_text(row: pd.Series) -> str:
    parts = []
    for column, label, template, factor in KEY_LABELS:
        value = row.get(column)
        if value is not None and pd.notna(value):
            parts.append(f"{label} = {template.format(round(float(value) * factor, 6))}")
    if isinstance(row.get("channel"), str) and row["channel"]:
        parts.append(row["channel"])
    return ", ".join(parts) or "whole run"


def _measurement(value: float, error: float) -> str:
    """value ± error with the error to two significant figures (common practice)."""
    if not math.isfinite(value):
        return "—"
    if not math.isfinite(error) or error <= 0:
        return f"{value:.4g}"
    decimals = max(0, 1 - math.floor(math.log10(error)))
    if decimals > 8 or abs(value) >= 1e6:
        return f"{value:.3e} ± {error:.2g}"
    return f"{value:.{decimals}f} ± {error:.{decimals}f}"


def _figure(outcome: FigureOutcome) -> str:
    if outcome.filename is None:
        return (
            f'<p class="figure-skipped">{_text(outcome.title)}: not drawn, '
            f"{_text(outcome.reason)}.</p>"
        )
    source = f"figures/{outcome.filename}"
    return (
        f'<figure><img src="{_text(source)}" alt="{_text(outcome.title)}">'
        f"<figcaption>{_text(outcome.title)}</figcaption></figure>"
    )
