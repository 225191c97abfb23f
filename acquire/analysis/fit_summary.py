"""What `flipsweep fit` tells the operator: what it fitted, and every warning, in a few lines."""

from __future__ import annotations

import math
import re

import pandas as pd

from acquire.analysis.fit_rows import ANALYSES, KEY_COLUMNS

WARNING_PREFIX = "WARNING"
MAX_NAMES = 4  # quantities named per analysis line; the rest are counted
HARMONIC_TERM = re.compile(r"^(resistance|unidirectional)_(c0|cos\d+|sin\d+)$")


def _group_text(row: pd.Series) -> str:
    keys = []
    for name in KEY_COLUMNS:
        value = row[name]
        if isinstance(value, str):
            if value:
                keys.append(value)
        elif not (isinstance(value, float) and math.isnan(value)):
            keys.append(f"{name} {value:g}")
    return ", ".join(keys)


def fit_summary(table: pd.DataFrame) -> list[str]:
    """One line per analysis (rows, groups, the quantities); then each quantity the data could
    not give, with the reason from its note; then one line per warning row."""
    if table.empty:
        return ["nothing to fit: the points hold no angle, current, field or temperature "
                "series with enough points for a fit"]
    lines = []
    order = [name for name in ANALYSES if name in set(table["analysis"])]
    order += sorted(set(table["analysis"]) - set(order))
    for analysis in order:
        rows = table[table["analysis"] == analysis]
        groups = rows[list(KEY_COLUMNS)].astype(str).drop_duplicates()
        # The physics first; the harmonic coefficients of an angle fit (resistance_c0, ...) last.
        names = sorted(dict.fromkeys(rows["quantity"]), key=lambda name: bool(
            HARMONIC_TERM.match(name)))
        shown = ", ".join(names[:MAX_NAMES])
        more = f" and {len(names) - MAX_NAMES} more" if len(names) > MAX_NAMES else ""
        lines.append(f"{analysis:<12} {len(rows)} values in {len(groups)} group(s): "
                     f"{shown}{more}")
    missing = table[pd.to_numeric(table["value"], errors="coerce").isna()]
    for (quantity, note), rows in missing.groupby(["quantity", "note"], sort=False):
        lines.append(f"no value: {quantity} in {len(rows)} group(s): {note}")
    warned = table[table["note"].astype(str).str.startswith(WARNING_PREFIX)]
    for _, row in warned.iterrows():
        group = _group_text(row)
        lines.append(f"warning: {row['quantity']} = {row['value']:.4g} {row['unit']}"
                     f"{f' ({group})' if group else ''}: {row['note']}")
    return lines
