"""What the fits know about a run: run.json read tolerantly, points.csv with proper dtypes.

Channels are longitudinal or transverse: the rig's instrument "probe" entry decides when it
is there, else the name does (a name containing "xy", "yx" or "hall" is transverse).
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from acquire.modes.dc_reversal import POINTS

POINT_COLUMNS = POINTS.names


@dataclass(frozen=True)
class RunContext:
    """What the fits need to know about a run, read tolerantly from run.json."""

    name: str = ""
    sample_id: str = ""
    stack: str = ""
    rotation_plane: str = "xy"
    channel_probes: Mapping[str, str] = field(default_factory=dict)
    layers: tuple[Mapping[str, Any], ...] = ()
    width_m: float | None = None
    length_m: float | None = None
    sheet_resistance_ohm: float | None = None

    def channel_kind(self, channel: str) -> str:
        """'longitudinal' or 'transverse': the rig's probe entry, else the channel's name."""
        probe = self.channel_probes.get(channel, "")
        if probe in ("longitudinal", "transverse"):
            return probe
        lowered = channel.lower()
        is_transverse = any(mark in lowered for mark in ("xy", "yx", "hall"))
        return "transverse" if is_transverse else "longitudinal"


@dataclass(frozen=True)
class FitOptions:
    angle_offset: bool = False
    field_form: str = "inverse"
    # The plane's anisotropy field in tesla (B_k in xy, B_eff in zx/zy), held fixed in the
    # angle fits; None: fitted from each sweep.
    anisotropy_T: float | None = None
    # zx/zy: each longitudinal sweep takes B_eff from the transverse sweep measured with it.
    anisotropy_from_hall: bool = False
    dR_dT_ohm_per_K: float | None = None
    heating_warn_K: float = 5.0
    include_flagged: bool = False  # keep points flagged compliance, instrument_error, ...
    inflate_errors: bool = False  # scale errors by sqrt(reduced chi^2) where it exceeds 1


def read_run_context(run_dir: Path) -> RunContext:
    """RunContext from run_dir/run.json; every missing key falls back to a default."""
    path = Path(run_dir) / "run.json"
    if not path.exists():
        return RunContext()
    document = json.loads(path.read_text(encoding="utf-8"))
    protocol = _mapping(_mapping(document.get("protocol")).get("normalised"))
    sample = _mapping(protocol.get("sample"))
    channel_geometry = _mapping(sample.get("channel"))
    instruments = _mapping(
        _mapping(_mapping(document.get("rig")).get("normalised")).get("instruments")
    )
    probes = {
        name: str(_mapping(entry).get("probe", ""))
        for name, entry in instruments.items()
        if _mapping(entry).get("probe")
    }
    layers = tuple(_layer(entry) for entry in sample.get("layers", []) if isinstance(entry, dict))
    plane = str(protocol.get("rotation_plane", "xy"))
    return RunContext(
        name=str(protocol.get("name", "")),
        sample_id=str(sample.get("id", "")),
        stack=str(sample.get("stack", "")),
        rotation_plane=plane if plane in ("xy", "zx", "zy") else "xy",
        channel_probes=probes,
        layers=layers,
        width_m=_number(channel_geometry.get("width_m", channel_geometry.get("width")))
        or _number(sample.get("width_m", sample.get("channel_width_m"))),
        length_m=_number(channel_geometry.get("length_m", channel_geometry.get("length")))
        or _number(sample.get("length_m", sample.get("channel_length_m"))),
        sheet_resistance_ohm=_number(
            sample.get("sheet_resistance_ohm", sample.get("sheet_resistance"))
        ),
    )


def _mapping(value: object) -> Mapping[str, Any]:
    return value if isinstance(value, dict) else {}


def _number(value: object) -> float | None:
    return float(value) if isinstance(value, int | float) and not isinstance(value, bool) else None


def _layer(entry: Mapping[str, Any]) -> dict[str, Any]:
    # Both the documented SI-suffixed keys and the protocol model's own names are accepted.
    return {
        "name": entry.get("name", ""),
        "thickness_m": entry.get("thickness_m", entry.get("thickness")),
        "resistivity_ohm_m": entry.get("resistivity_ohm_m", entry.get("resistivity")),
        "carrier": bool(entry.get("carrier", False)),
    }




def read_points(path: Path) -> pd.DataFrame:
    points = pd.read_csv(path, keep_default_na=True)
    return normalise_points(points)


def normalise_points(points: pd.DataFrame) -> pd.DataFrame:
    """Add any missing column (as empty) and give every column its proper dtype."""
    frame = points.copy()
    for column in POINT_COLUMNS:
        if column not in frame:
            frame[column] = "" if column in ("channel", "flags") else np.nan
    for text in ("channel", "flags"):
        frame[text] = frame[text].astype(object).where(frame[text].notna(), "").astype(str)
    numeric = [c for c in POINT_COLUMNS if c not in ("channel", "flags")]
    frame[numeric] = frame[numeric].apply(pd.to_numeric, errors="coerce")
    return frame
