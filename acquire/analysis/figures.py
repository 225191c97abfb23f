"""PNG figures of a run for the report (matplotlib, an optional extra, imported lazily).

Each figure function returns a FigureOutcome: the PNG's file name, or the reason the data
cannot support the figure (the report says so instead of showing an empty plot).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from acquire.analysis.figure_style import FIGURE_DPI
from acquire.analysis.figures_sweeps import angle_figure, current_figure, field_figure
from acquire.analysis.figures_time import temperature_figure, time_trace_figure
from acquire.analysis.fit_tables import RunContext


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
        "angle": lambda: angle_figure(points, fits, context),
        "current": lambda: current_figure(points, fits),
        "field": lambda: field_figure(points, fits),
        "temperature": lambda: temperature_figure(points, fits),
        "time_trace": lambda: time_trace_figure(run_dir / "readings.csv"),
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


