"""What every figure shares: the palette, a new figure, unit scaling, picking and labelling
series, finding a fit's rows."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

FIGURE_DPI = 120
# Our own palette: deep ink blue, brick, moss, plum, ochre, slate.
SERIES_COLOURS = ("#1f3b5a", "#b5452c", "#5b7f2a", "#7a3b69", "#c28a12", "#55606e")
POLARITY_COLOURS = {1: "#b5452c", 0: "#8c9096", -1: "#1f6f8b"}
POLARITY_LABELS = {1: "+I", 0: "0", -1: "-I"}
MAX_SERIES = 6


def new_figure(rows: int, columns: int, width: float = 5.2, height: float = 3.4) -> Any:
    import matplotlib.pyplot as plt

    figure, axes = plt.subplots(
        rows,
        columns,
        figsize=(width * columns, height * rows),
        squeeze=False,
        layout="constrained",
    )
    for axis in axes.flat:
        axis.grid(True, color="#d9dce1", linewidth=0.6)
        axis.set_axisbelow(True)
    return figure, axes


def ohm_scale(values: np.ndarray) -> tuple[float, str]:
    """Factor and unit that put the largest |value| between 1 and 1000 (ohm, mohm, uohm)."""
    finite = np.abs(values[np.isfinite(values)])
    largest = finite.max() if finite.size else 1.0
    for factor, unit in ((1.0, "Ω"), (1e3, "mΩ"), (1e6, "µΩ"), (1e9, "nΩ")):
        if largest * factor >= 1:
            return factor, unit
    return 1e9, "nΩ"


def pick_series(frame: pd.DataFrame, limit: int = MAX_SERIES) -> pd.DataFrame:
    """Up to `limit` rows spread evenly through the (sorted) frame."""
    if len(frame) <= limit:
        return frame
    return frame.iloc[np.unique(np.linspace(0, len(frame) - 1, limit).round().astype(int))]


def series_label(row: pd.Series, keys: tuple[str, ...]) -> str:
    parts = []
    formats = {
        "temperature_K": ("{:.4g} K", 1.0),
        "field_T": ("{:.4g} T", 1.0),
        "current_A": ("{:.4g} mA", 1e3),
        "angle_deg": ("{:.4g}°", 1.0),
        "channel": ("{}", None),
    }
    for key in keys:
        value = row.get(key)
        template, factor = formats[key]
        if factor is None:
            parts.append(template.format(value))
        elif pd.notna(value):
            parts.append(template.format(round(float(value) * factor, 6)))
    return ", ".join(parts)


def fit_rows(fits: pd.DataFrame, analysis: str, quantity: str) -> pd.DataFrame:
    return fits[(fits["analysis"] == analysis) & (fits["quantity"] == quantity)]


def rows_matching(frame: pd.DataFrame, row: pd.Series, keys: tuple[str, ...]) -> np.ndarray:
    mask = np.ones(len(frame), dtype=bool)
    for key in keys:
        column = frame[key]
        value = row[key]
        if key == "channel":
            mask &= (column.astype(str) == str(value)).to_numpy()
        elif pd.isna(value):
            mask &= column.isna().to_numpy()
        else:
            mask &= np.isclose(column.to_numpy(float), float(value), rtol=1e-9, atol=1e-12)
    return mask


# --- angle -----------------------------------------------------------------------------------


def volt_scale(values: np.ndarray) -> tuple[float, str]:
    finite = np.abs(values[np.isfinite(values)])
    largest = finite.max() if finite.size else 1.0
    for factor, unit in ((1.0, "V"), (1e3, "mV"), (1e6, "µV")):
        if largest * factor >= 1:
            return factor, unit
    return 1e9, "nV"
