"""Figures against temperature and against time (the first points' raw readings)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pandas as pd

from acquire.analysis.figure_style import (
    POLARITY_COLOURS,
    POLARITY_LABELS,
    SERIES_COLOURS,
    new_figure,
    pick_series,
    rows_matching,
    series_label,
    volt_scale,
)

TIME_TRACE_POINTS = 4


def temperature_figure(points: pd.DataFrame, fits: pd.DataFrame) -> Any:
    rows = fits[fits["analysis"] == "temperature"]
    panels = [q for q in ("umr_ratio", "amr_ratio", "smr_ratio") if q in set(rows["quantity"])]
    if panels:
        return _amplitude_temperature_figure(rows, panels)
    temperatures = points["temperature_K"].dropna().unique()
    if temperatures.size < 2:
        return "the run has fewer than two temperatures"
    keys = ("field_T", "angle_deg", "current_A", "channel")
    data = points.dropna(subset=["temperature_K"])
    figure, axes = new_figure(1, 2)
    groups = data.groupby(list(keys), dropna=False, sort=True)
    names = pick_series(pd.DataFrame({"name": list(groups.groups)}))["name"]
    for colour, name in zip(SERIES_COLOURS, names):
        group = groups.get_group(name).sort_values("temperature_K")
        label = series_label(pd.Series(dict(zip(keys, name))), keys)
        axes[0, 0].errorbar(
            group["temperature_K"],
            group["resistance_ohm"],
            yerr=group["resistance_ohm_err"],
            fmt="o-",
            color=colour,
            markersize=3.5,
            label=label,
            linewidth=1,
        )
        axes[0, 1].errorbar(
            group["temperature_K"],
            group["unidirectional_ratio"] * 1e6,
            yerr=group["unidirectional_ratio_err"] * 1e6,
            fmt="o-",
            color=colour,
            markersize=3.5,
            linewidth=1,
        )
    axes[0, 0].set_ylabel("resistance R (Ω)")
    axes[0, 1].set_ylabel("unidirectional ratio (ppm)")
    for axis in axes.flat:
        axis.set_xlabel("temperature T (K)")
    axes[0, 0].legend(fontsize=7)
    return figure


def _amplitude_temperature_figure(rows: pd.DataFrame, panels: list[str]) -> Any:
    figure, axes = new_figure(1, len(panels))
    units = {
        "umr_ratio": ("UMR amplitude / R (ppm)", 1e6),
        "amr_ratio": ("AMR ratio (%)", 1e2),
        "smr_ratio": ("SMR ratio (%)", 1e2),
    }
    keys = ("field_T", "current_A", "channel")
    for axis, quantity in zip(axes.flat, panels):
        data = rows[rows["quantity"] == quantity]
        series = pick_series(data.drop_duplicates(list(keys)).sort_values(list(keys)))
        label_text, factor = units[quantity]
        for colour, (_, row) in zip(SERIES_COLOURS, series.iterrows()):
            group = data[rows_matching(data, row, keys)].sort_values("temperature_K")
            axis.errorbar(
                group["temperature_K"],
                group["value"] * factor,
                yerr=group["error"] * factor,
                fmt="o-",
                color=colour,
                markersize=4,
                linewidth=1,
                label=series_label(row, keys),
            )
        axis.set_xlabel("temperature T (K)")
        axis.set_ylabel(label_text)
        axis.legend(fontsize=7)
    figure.suptitle("amplitudes from the angle fits", fontsize=9)
    return figure


# --- time trace ------------------------------------------------------------------------------


def read_first_readings(path: Path, n_points: int = TIME_TRACE_POINTS) -> pd.DataFrame:
    """Readings of the first `n_points` points, reading no further into the file than needed."""
    columns = ["point", "time_s", "polarity", "channel", "voltage_V"]
    kept: list[pd.DataFrame] = []
    first_points: list[int] = []
    for chunk in pd.read_csv(path, usecols=columns, chunksize=200_000):
        for point in chunk["point"].drop_duplicates():
            if len(first_points) < n_points and point not in first_points:
                first_points.append(int(point))
        selected = chunk[chunk["point"].isin(first_points)]
        kept.append(selected)
        if len(first_points) >= n_points and len(selected) < len(chunk):
            break
    return pd.concat(kept, ignore_index=True) if kept else pd.DataFrame(columns=columns)


def time_trace_figure(readings_path: Path) -> Any:
    if not readings_path.exists():
        return "readings.csv is missing"
    readings = read_first_readings(readings_path)
    readings = readings.dropna(subset=["time_s", "voltage_V"])
    if readings.empty:
        return "readings.csv has no readings"
    channels = list(dict.fromkeys(readings["channel"].astype(str)))[:3]
    figure, axes = new_figure(len(channels), 1, width=8.0, height=2.8)
    start = readings["time_s"].min()
    for axis, channel in zip(axes[:, 0], channels):
        data = readings[readings["channel"].astype(str) == channel]
        factor, unit = volt_scale(data["voltage_V"].to_numpy(float))
        for polarity in (1, 0, -1):
            subset = data[data["polarity"] == polarity]
            axis.plot(
                subset["time_s"] - start,
                subset["voltage_V"] * factor,
                "o",
                markersize=3.5,
                color=POLARITY_COLOURS[polarity],
                label=POLARITY_LABELS[polarity],
            )
        for point, group in data.groupby("point"):
            begin = group["time_s"].min() - start
            axis.axvline(begin, color="#c6cad0", linewidth=0.8, linestyle="--")
            axis.annotate(
                f"point {point}",
                (begin, 1.0),
                xycoords=("data", "axes fraction"),
                fontsize=7,
                va="bottom",
                ha="left",
                color="#55606e",
                xytext=(2, 1),
                textcoords="offset points",
            )
        axis.set_ylabel(f"{channel} voltage ({unit})")
        axis.legend(title="current", fontsize=7, title_fontsize=7, loc="center right")
    axes[-1, 0].set_xlabel("time since the first reading (s)")
    return figure


