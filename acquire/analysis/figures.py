"""PNG figures of a run for the report (matplotlib, an optional extra, imported lazily).

Each figure function returns a FigureOutcome: the PNG's file name, or the reason the data
cannot support the figure (the report says so instead of showing an empty plot).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from acquire.analysis.fit_tables import RunContext
from acquire.analysis.fits import FIELD_FORMS, field_inverse, field_linear, harmonic_curve

FIGURE_DPI = 120
# Our own palette: deep ink blue, brick, moss, plum, ochre, slate.
SERIES_COLOURS = ("#1f3b5a", "#b5452c", "#5b7f2a", "#7a3b69", "#c28a12", "#55606e")
POLARITY_COLOURS = {1: "#b5452c", 0: "#8c9096", -1: "#1f6f8b"}
POLARITY_LABELS = {1: "+I", 0: "0", -1: "-I"}
MAX_SERIES = 6
TIME_TRACE_POINTS = 4


@dataclass(frozen=True)
class FigureOutcome:
    key: str
    title: str
    filename: str | None
    reason: str = ""


FIGURE_TITLES = {
    "angle": "Resistance and unidirectional part against angle",
    "current": "Unidirectional ratio against current density",
    "field": "Unidirectional part against field",
    "temperature": "Amplitudes against temperature",
    "time_trace": "Voltage against time, first points",
}


def make_figures(
    run_dir: Path, points: pd.DataFrame, fits: pd.DataFrame, context: RunContext
) -> list[FigureOutcome]:
    """Write run_dir/figures/*.png; one outcome per figure, in the report's order."""
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        reason = "matplotlib is not installed (install the plots extra)"
        return [FigureOutcome(key, title, None, reason) for key, title in FIGURE_TITLES.items()]

    folder = run_dir / "figures"
    folder.mkdir(exist_ok=True)
    makers: dict[str, Callable[[], Any]] = {
        "angle": lambda: _angle_figure(points, fits, context),
        "current": lambda: _current_figure(points, fits),
        "field": lambda: _field_figure(points, fits),
        "temperature": lambda: _temperature_figure(points, fits),
        "time_trace": lambda: _time_trace_figure(run_dir / "readings.csv"),
    }
    outcomes = []
    for key, make in makers.items():
        figure_or_reason = make()
        if isinstance(figure_or_reason, str):
            outcomes.append(FigureOutcome(key, FIGURE_TITLES[key], None, figure_or_reason))
            continue
        filename = f"{key}.png"
        figure_or_reason.savefig(folder / filename, dpi=FIGURE_DPI)
        plt.close(figure_or_reason)
        outcomes.append(FigureOutcome(key, FIGURE_TITLES[key], filename))
    return outcomes


def _new_figure(rows: int, columns: int, width: float = 5.2, height: float = 3.4) -> Any:
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


def _ohm_scale(values: np.ndarray) -> tuple[float, str]:
    """Factor and unit that put the largest |value| between 1 and 1000 (ohm, mohm, uohm)."""
    finite = np.abs(values[np.isfinite(values)])
    largest = finite.max() if finite.size else 1.0
    for factor, unit in ((1.0, "Ω"), (1e3, "mΩ"), (1e6, "µΩ"), (1e9, "nΩ")):
        if largest * factor >= 1:
            return factor, unit
    return 1e9, "nΩ"


def _pick(frame: pd.DataFrame, limit: int = MAX_SERIES) -> pd.DataFrame:
    """Up to `limit` rows spread evenly through the (sorted) frame."""
    if len(frame) <= limit:
        return frame
    return frame.iloc[np.unique(np.linspace(0, len(frame) - 1, limit).round().astype(int))]


def _label(row: pd.Series, keys: tuple[str, ...]) -> str:
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


def _quantity(fits: pd.DataFrame, analysis: str, quantity: str) -> pd.DataFrame:
    return fits[(fits["analysis"] == analysis) & (fits["quantity"] == quantity)]


def _matches(frame: pd.DataFrame, row: pd.Series, keys: tuple[str, ...]) -> np.ndarray:
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

ANGLE_GROUP_KEYS = ("temperature_K", "field_T", "current_A", "channel")


def _angle_figure(points: pd.DataFrame, fits: pd.DataFrame, context: RunContext) -> Any:
    groups = _quantity(fits, "angle", "resistance_c0")
    if groups.empty:
        return "no angle sweep with at least five angles"
    applied = fits[fits["quantity"] == "angle_offset_applied_deg"]["value"]
    offset = float(applied.iloc[0]) if len(applied) else 0.0
    channels = list(dict.fromkeys(groups["channel"]))[:3]
    figure, axes = _new_figure(2, len(channels))
    angle_name = "φ" if context.rotation_plane == "xy" else "θ"
    fine = np.linspace(0, 360, 361)
    for column, channel in enumerate(channels):
        chosen = _pick(groups[groups["channel"] == channel].sort_values(list(ANGLE_GROUP_KEYS)), 4)
        for panel, label in ((0, "resistance"), (1, "unidirectional")):
            axis = axes[panel, column]
            selected = [_matches(points, row, ANGLE_GROUP_KEYS) for _, row in chosen.iterrows()]
            values = np.concatenate(
                [points.loc[mask, f"{label}_ohm"].to_numpy(float) for mask in selected]
            )
            if panel == 0:
                factor, unit, shift = 1.0, "Ω", 0.0
            else:
                factor, unit = _ohm_scale(values)
                shift = 0.0
            for colour, (_, row), mask in zip(SERIES_COLOURS, chosen.iterrows(), selected):
                data = points[mask].sort_values("angle_deg")
                coefficients = [
                    _coefficient(fits, row, f"{label}_{term}")
                    for term in ("c0", "cos1", "sin1", "cos2", "sin2")
                ]
                axis.errorbar(
                    data["angle_deg"],
                    (data[f"{label}_ohm"] - shift) * factor,
                    yerr=data[f"{label}_ohm_err"] * factor,
                    fmt="o",
                    markersize=3.5,
                    color=colour,
                    label=_label(row, ("temperature_K", "field_T", "current_A")),
                    elinewidth=0.8,
                )
                if np.all(np.isfinite(coefficients)):
                    curve = harmonic_curve(fine - offset, coefficients)
                    axis.plot(fine, (curve - shift) * factor, color=colour, linewidth=1.2)
            axis.set_xlabel(f"angle {angle_name} (deg)")
            axis.set_xticks(np.arange(0, 361, 90))
            name = "resistance R" if panel == 0 else "unidirectional part"
            axis.set_ylabel(f"{name} ({unit})")
            axis.set_title(f"{channel}: {name}", fontsize=10)
        axes[1, column].legend(fontsize=7, loc="best")
    figure.suptitle("points with error bars; lines are the harmonic fits", fontsize=9)
    return figure


def _coefficient(fits: pd.DataFrame, row: pd.Series, quantity: str) -> float:
    rows = _quantity(fits, "angle", quantity)
    found = rows[_matches(rows, row, ANGLE_GROUP_KEYS)]
    return float(found["value"].iloc[0]) if len(found) else float("nan")


# --- current ---------------------------------------------------------------------------------

CURRENT_GROUP_KEYS = ("temperature_K", "field_T", "angle_deg", "channel")


def _current_figure(points: pd.DataFrame, fits: pd.DataFrame) -> Any:
    slopes = fits[
        (fits["analysis"] == "current") & fits["quantity"].str.startswith("umr_ratio_per")
    ]
    slopes = slopes[np.isfinite(slopes["value"]) & (slopes["error"] > 0)]
    if slopes.empty:
        return "no group with at least three currents"
    by_density = slopes["quantity"].iloc[0].endswith("A_m2")
    significance = (slopes["value"] / slopes["error"]).abs()
    chosen = slopes.loc[significance.sort_values(ascending=False).index[:MAX_SERIES]]
    chosen = chosen.sort_values(list(CURRENT_GROUP_KEYS))
    from_amplitudes = chosen["angle_deg"].isna().all() and points["angle_deg"].notna().any()
    figure, axes = _new_figure(1, 1, width=6.4, height=4.2)
    axis = axes[0, 0]
    largest_x = 0.0
    for colour, (_, row) in zip(SERIES_COLOURS, chosen.iterrows()):
        x, y, y_err = _current_series(points, fits, row, from_amplitudes, by_density)
        if x.size == 0:
            continue
        largest_x = max(largest_x, float(np.nanmax(x)))
        label = _label(row, ("temperature_K", "field_T", "angle_deg", "channel"))
        axis.errorbar(
            x,
            y * 1e6,
            yerr=y_err * 1e6,
            fmt="o",
            markersize=4,
            color=colour,
            label=label,
            elinewidth=0.8,
        )
        line_x = np.linspace(0, float(np.nanmax(x)) * 1.05, 50)
        axis.plot(line_x, row["value"] * line_x * 1e6, color=colour, linewidth=1.2)
    axis.axhline(0, color="#9aa0a6", linewidth=0.7)
    axis.set_xlim(0, largest_x * 1.08 if largest_x > 0 else 1)
    axis.set_xlabel(
        "current density j in the carrier (10¹¹ A/m²)" if by_density else "current (mA)"
    )
    what = "UMR amplitude / R" if from_amplitudes else "unidirectional ratio"
    axis.set_ylabel(f"{what} (ppm)")
    axis.set_title("lines: fits through the origin, U/R = r·j", fontsize=9)
    axis.legend(fontsize=7)
    return figure


def _current_series(
    points: pd.DataFrame,
    fits: pd.DataFrame,
    row: pd.Series,
    from_amplitudes: bool,
    by_density: bool,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if from_amplitudes:
        ratios = _quantity(fits, "angle", "umr_ratio")
        ratios = ratios[_matches(ratios, row, ("temperature_K", "field_T", "channel"))]
        ratios = ratios.sort_values("current_A")
        current = ratios["current_A"].to_numpy(float)
        density = _density_for_currents(points, current)
        x = density / 1e11 if by_density else current * 1e3
        return x, ratios["value"].to_numpy(float), ratios["error"].to_numpy(float)
    data = points[_matches(points, row, CURRENT_GROUP_KEYS)].sort_values("current_A")
    x = data["current_density_A_m2"] / 1e11 if by_density else data["current_A"] * 1e3
    return (
        x.to_numpy(float),
        data["unidirectional_ratio"].to_numpy(float),
        data["unidirectional_ratio_err"].to_numpy(float),
    )


def _density_for_currents(points: pd.DataFrame, currents: np.ndarray) -> np.ndarray:
    table = points.groupby("current_A")["current_density_A_m2"].mean()
    return table.reindex(currents).to_numpy(float)


# --- field -----------------------------------------------------------------------------------

FIELD_GROUP_KEYS = ("temperature_K", "angle_deg", "current_A", "channel")


def _field_figure(points: pd.DataFrame, fits: pd.DataFrame) -> Any:
    independent = _quantity(fits, "field", "umr_field_independent_ohm")
    if independent.empty:
        return "no group with at least three fields"
    groups = independent.drop_duplicates(list(FIELD_GROUP_KEYS))
    # The largest current has the largest UMR: show it across temperatures and angles.
    largest = groups["current_A"].max()
    if pd.notna(largest):
        groups = groups[np.isclose(groups["current_A"].to_numpy(float), largest)]
    chosen = _pick(groups.sort_values(list(FIELD_GROUP_KEYS)))
    from_amplitudes = chosen["angle_deg"].isna().all() and points["angle_deg"].notna().any()
    series = [_field_series(points, fits, row, from_amplitudes) for _, row in chosen.iterrows()]
    factor, unit = _ohm_scale(np.concatenate([values for _, values, _ in series]))
    figure, axes = _new_figure(1, 1, width=6.4, height=4.2)
    axis = axes[0, 0]
    for colour, (_, row), (field_T, values, errors) in zip(
        SERIES_COLOURS, chosen.iterrows(), series
    ):
        label = _label(row, ("temperature_K", "angle_deg", "current_A", "channel"))
        axis.errorbar(
            field_T,
            values * factor,
            yerr=errors * factor,
            fmt="o",
            markersize=4,
            color=colour,
            label=label,
            elinewidth=0.8,
        )
        curve_x, curve_y = _field_curve(fits, row, field_T)
        axis.plot(curve_x, curve_y * factor, color=colour, linewidth=1.2)
    what = "UMR amplitude" if from_amplitudes else "unidirectional part"
    axis.set_xlabel("field μ₀H (T)")
    axis.set_ylabel(f"{what} ({unit})")
    model = chosen["model"].iloc[0]
    axis.set_title(f"lines: {model}", fontsize=9)
    axis.legend(fontsize=7)
    return figure


def _field_series(
    points: pd.DataFrame, fits: pd.DataFrame, row: pd.Series, from_amplitudes: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if from_amplitudes:
        amplitudes = _quantity(fits, "angle", "umr_ohm")
        data = amplitudes[_matches(amplitudes, row, ("temperature_K", "current_A", "channel"))]
        data = data.sort_values("field_T")
        return (
            data["field_T"].to_numpy(float),
            data["value"].to_numpy(float),
            data["error"].to_numpy(float),
        )
    data = points[_matches(points, row, FIELD_GROUP_KEYS)].sort_values("field_T")
    return (
        data["field_T"].to_numpy(float),
        data["unidirectional_ohm"].to_numpy(float),
        data["unidirectional_ohm_err"].to_numpy(float),
    )


def _field_curve(
    fits: pd.DataFrame, row: pd.Series, field_T: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    rows = fits[(fits["analysis"] == "field") & _matches(fits, row, FIELD_GROUP_KEYS)]
    values = dict(zip(rows["quantity"], rows["value"]))
    finite = field_T[np.isfinite(field_T)]
    if finite.size == 0:
        return np.array([]), np.array([])
    sign = -1.0 if finite.max() <= 0 else 1.0
    magnitude = np.linspace(np.abs(finite).min(), np.abs(finite).max(), 200)
    if "umr_field_scale_T" in values:
        curve = field_inverse(
            magnitude,
            values["umr_field_independent_ohm"],
            values["umr_field_dependent_ohm"],
            values["umr_field_scale_T"],
        )
    elif "umr_field_slope_ohm_per_T" in values:
        curve = field_linear(
            magnitude, values["umr_field_independent_ohm"], values["umr_field_slope_ohm_per_T"]
        )
    else:
        return np.array([]), np.array([])
    assert set(FIELD_FORMS) == {"linear", "inverse"}  # keep the curves in step with the forms
    return sign * magnitude, curve


# --- temperature -----------------------------------------------------------------------------


def _temperature_figure(points: pd.DataFrame, fits: pd.DataFrame) -> Any:
    rows = fits[fits["analysis"] == "temperature"]
    panels = [q for q in ("umr_ratio", "amr_ratio", "smr_ratio") if q in set(rows["quantity"])]
    if panels:
        return _amplitude_temperature_figure(rows, panels)
    temperatures = points["temperature_K"].dropna().unique()
    if temperatures.size < 2:
        return "the run has fewer than two temperatures"
    keys = ("field_T", "angle_deg", "current_A", "channel")
    data = points.dropna(subset=["temperature_K"])
    figure, axes = _new_figure(1, 2)
    groups = data.groupby(list(keys), dropna=False, sort=True)
    names = _pick(pd.DataFrame({"name": list(groups.groups)}))["name"]
    for colour, name in zip(SERIES_COLOURS, names):
        group = groups.get_group(name).sort_values("temperature_K")
        label = _label(pd.Series(dict(zip(keys, name))), keys)
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
    figure, axes = _new_figure(1, len(panels))
    units = {
        "umr_ratio": ("UMR amplitude / R (ppm)", 1e6),
        "amr_ratio": ("AMR ratio (%)", 1e2),
        "smr_ratio": ("SMR ratio (%)", 1e2),
    }
    keys = ("field_T", "current_A", "channel")
    for axis, quantity in zip(axes.flat, panels):
        data = rows[rows["quantity"] == quantity]
        series = _pick(data.drop_duplicates(list(keys)).sort_values(list(keys)))
        label_text, factor = units[quantity]
        for colour, (_, row) in zip(SERIES_COLOURS, series.iterrows()):
            group = data[_matches(data, row, keys)].sort_values("temperature_K")
            axis.errorbar(
                group["temperature_K"],
                group["value"] * factor,
                yerr=group["error"] * factor,
                fmt="o-",
                color=colour,
                markersize=4,
                linewidth=1,
                label=_label(row, keys),
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


def _time_trace_figure(readings_path: Path) -> Any:
    if not readings_path.exists():
        return "readings.csv is missing"
    readings = read_first_readings(readings_path)
    readings = readings.dropna(subset=["time_s", "voltage_V"])
    if readings.empty:
        return "readings.csv has no readings"
    channels = list(dict.fromkeys(readings["channel"].astype(str)))[:3]
    figure, axes = _new_figure(len(channels), 1, width=8.0, height=2.8)
    start = readings["time_s"].min()
    for axis, channel in zip(axes[:, 0], channels):
        data = readings[readings["channel"].astype(str) == channel]
        factor, unit = _volt_scale(data["voltage_V"].to_numpy(float))
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


def _volt_scale(values: np.ndarray) -> tuple[float, str]:
    finite = np.abs(values[np.isfinite(values)])
    largest = finite.max() if finite.size else 1.0
    for factor, unit in ((1.0, "V"), (1e3, "mV"), (1e6, "µV")):
        if largest * factor >= 1:
            return factor, unit
    return 1e9, "nV"
