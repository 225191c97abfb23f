"""What the report says about the data behind it: which files, and which points the fits
left out (flagged) or kept."""

from __future__ import annotations

import html
from dataclasses import dataclass

import pandas as pd

from acquire.analysis.fit_noise import EXCLUDED_FLAGS

LISTED_PER_KIND = 12


@dataclass(frozen=True)
class DataUsed:
    points_rows: int
    points_modified: str
    fits_modified: str
    refitted: bool


def provenance_html(used: DataUsed | None, fits: pd.DataFrame) -> str:
    if used is None:
        return ""
    how = ("fitted now (fits.csv was missing or older than points.csv)" if used.refitted
           else "fits.csv as written by 'flipsweep fit'")
    kept = fits["note"].astype(str).str.contains("--include-flagged").any() if len(fits) else False
    flags = ("flagged points kept (--include-flagged)" if kept
             else "flagged points (compliance, instrument_error, wait_timeout) left out")
    text = (f"Data: points.csv of {used.points_modified} ({used.points_rows} point-channel "
            f"rows); fits from {used.fits_modified}, {how}; {flags}.")
    return f'<p class="facts">{html.escape(text)}</p>'


def flagged_points_html(points: pd.DataFrame) -> str:
    """Every flagged point, by kind (a point may have several kinds)."""
    if points.empty or "flags" not in points:
        return ""
    flags = points["flags"].fillna("").astype(str)
    sections = []
    kinds = sorted({kind for cell in flags for kind in cell.split("|") if kind})
    for kind in kinds:
        rows = points[flags.map(lambda cell, k=kind: k in cell.split("|"))]
        numbers = sorted(set(int(n) for n in rows["point"]))
        shown = ", ".join(str(n) for n in numbers[:LISTED_PER_KIND])
        hidden = len(numbers) - LISTED_PER_KIND
        more = f" and {hidden} more" if hidden > 0 else ""
        effect = "left out of the fits" if kind in EXCLUDED_FLAGS else "kept in the fits"
        sections.append(
            f"<li>{html.escape(kind)}: {len(numbers)} point(s), {effect}: points "
            f"{html.escape(shown)}{html.escape(more)}</li>"
        )
    if not sections:
        return ""
    return f'<h2>Flagged points</h2><ul>{"".join(sections)}</ul>'
