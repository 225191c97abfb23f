"""What `flipsweep fit` prints: what it fitted, what it could not give and why, every warning."""

from __future__ import annotations

import math

import pandas as pd

from acquire.analysis.fit_rows import FIT_COLUMN_NAMES
from acquire.analysis.fit_summary import fit_summary

NAN = math.nan


def row(analysis: str, quantity: str, value: float, note: str = "", field: float = NAN,
        channel: str = "vxx", unit: str = "ohm") -> dict[str, object]:
    entry: dict[str, object] = dict.fromkeys(FIT_COLUMN_NAMES, NAN)
    entry.update({"analysis": analysis, "quantity": quantity, "value": value, "error": 0.1,
                  "unit": unit, "n_points": 5, "model": "m", "note": note, "channel": channel,
                  "field_T": field})
    return entry


def test_summary_names_analyses_missing_values_and_warnings() -> None:
    table = pd.DataFrame([
        row("angle", "resistance_c0", 300.0, field=0.2),
        row("angle", "umr_ohm", 0.01, field=0.2),
        row("angle", "umr_ohm", 0.02, field=1.0),
        row("heating", "temperature_rise_K_per_mA2", NAN, "no dR/dT in this run", unit="K"),
        row("heating", "temperature_rise_at_max_current_K", 7.5, "WARNING: above 5 K", 0.2,
            unit="K"),
    ])
    lines = fit_summary(table)
    # The physics before the harmonic coefficients; rows and groups counted from the table.
    assert lines[0] == "angle        3 values in 2 group(s): umr_ohm, resistance_c0"
    assert lines[1].startswith("heating      2 values in 2 group(s)")
    assert "no value: temperature_rise_K_per_mA2 in 1 group(s): no dR/dT in this run" in lines
    assert lines[-1] == ("warning: temperature_rise_at_max_current_K = 7.5 K (field_T 0.2, "
                         "vxx): WARNING: above 5 K")


def test_an_empty_table_says_why() -> None:
    assert fit_summary(pd.DataFrame(columns=list(FIT_COLUMN_NAMES)))[0].startswith(
        "nothing to fit")
