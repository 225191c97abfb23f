"""Group points.csv into fit groups and produce the tidy fits table (fits.csv).

fits.csv has one row per fitted quantity and group:

    temperature_K, field_T, current_A, angle_deg, channel
        the group's keys; a key is empty when the quantity is not tied to it (angle_deg
        for an angle fit, current_A for a current fit, field_T for a field fit, ...) or when
        the protocol does not sweep that loop
    analysis      angle | current | field | temperature | heating
    quantity      what the row holds (QUANTITY_NOTES lists every name)
    value, error  the fitted value and its standard error (one sigma)
    unit          unit of value and error
    reduced_chi2  chi^2/(n - p) of a weighted fit; empty for an unweighted fit (its errors
                  come from the residual scatter) or when there is no degree of freedom
    n_points      points that entered the fit
    model         the fitted model as a formula
    note          context and warnings (a row whose note starts with WARNING needs a look)

Angle conventions (the field saturates the magnetisation m, so m follows the field):
xy: phi in the film plane from the current direction x towards y; zy: theta from the film
normal z towards y; zx: theta from z towards x.

Channels are longitudinal or transverse: the rig's instrument "probe" entry decides when it
is there, else the name does (a name containing "xy", "yx" or "hall" is transverse).
"""

from __future__ import annotations

import contextlib
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.csvw import Column
from acquire.fits import (
    FIELD_FORMS,
    HARMONIC_TERMS,
    GroupedLinearFit,
    carrier_current_density,
    fit_field_dependence,
    fit_harmonics_by_group,
    fit_linear_by_group,
    ratio_with_error,
    second_harmonic_offset_deg,
)

KEY_COLUMNS: tuple[str, ...] = ("temperature_K", "field_T", "current_A", "angle_deg", "channel")
FIT_COLUMNS: tuple[Column, ...] = (
    Column("temperature_K", "double", "K", "group key: temperature setpoint"),
    Column("field_T", "double", "T", "group key: field setpoint mu0*H"),
    Column("current_A", "double", "A", "group key: current amplitude"),
    Column("angle_deg", "double", "deg", "group key: field angle setpoint"),
    Column("channel", "string", "", "group key: voltmeter channel"),
    Column("analysis", "string", "", "angle, current, field, temperature or heating"),
    Column("quantity", "string", "", "name of the fitted quantity"),
    Column("value", "double", "", "fitted value, in the row's unit"),
    Column("error", "double", "", "standard error (one sigma), in the row's unit"),
    Column("unit", "string", "", "unit of value and error"),
    Column("reduced_chi2", "double", "", "chi^2/(n-p) of a weighted fit; empty if unweighted"),
    Column("n_points", "integer", "", "points that entered the fit"),
    Column("model", "string", "", "the fitted model"),
    Column("note", "string", "", "context and warnings"),
)
FIT_COLUMN_NAMES: tuple[str, ...] = tuple(column.name for column in FIT_COLUMNS)
ANALYSES: tuple[str, ...] = ("angle", "current", "field", "temperature", "heating")

MIN_ANGLES = 5  # five harmonic coefficients
MIN_CURRENTS = 3
MIN_FIELDS = 3
DENSITY_UNIT = 1e11  # current densities are fitted in units of 1e11 A/m^2
LINEARITY_SIGMAS = 3.0

QUANTITY_NOTES: dict[str, str] = {
    "resistance_<term>": "harmonic coefficient of resistance_ohm, term c0, cos1, sin1, cos2, sin2",
    "unidirectional_<term>": "harmonic coefficient of unidirectional_ohm",
    "amr_ohm": "anisotropic MR, R(m along the current x) - R(m across it) (xy: 2*a2; zx: -2*a2)",
    "smr_ohm": "spin Hall MR in zy, R(m along z) - R(m along y) (2*a2)",
    "amr_ratio, smr_ratio": "amr_ohm or smr_ohm over the mean resistance c0",
    "planar_hall_ohm": "planar Hall, R_xy = planar_hall_ohm/2 * sin 2phi (2*b2)",
    "anomalous_hall_ohm": "anomalous Hall in zx/zy, the cos(theta) term a1 of the transverse R",
    "umr_ohm": "unidirectional MR amplitude, the sin term b1 of unidirectional_ohm (m_y part)",
    "umr_ratio": "umr_ohm over the mean resistance c0",
    "angle_offset_deg": "sample mounting offset from the 2phi phase, folded into (-45, 45] deg",
    "angle_offset_applied_deg": "run-wide offset subtracted from the angles before fitting",
    "umr_slope_ohm": "unidirectional_ohm = k*j, k per 1e11 A/m^2 (per mA without a density)",
    "umr_linear_ohm, umr_cubic_ohm": "unidirectional_ohm = k1*j + k3*j^3",
    "umr_ratio_per_1e11_A_m2 (umr_ratio_per_mA)": "unidirectional_ratio = r*j",
    "nonlinear_from_A_m2 (nonlinear_from_A)": "first j off the low-current line by > 3 sigma",
    "umr_field_independent_ohm": "UMR part that survives at high field (A)",
    "umr_field_dependent_ohm": "inverse form: UMR part falling with field, its zero-field value C",
    "umr_field_scale_T": "inverse form: field Bs at which that part has halved",
    "umr_field_slope_ohm_per_T": "linear form: slope of UMR against |B|",
    "dR_dT_ohm_per_K": "local slope of the lowest-current resistance against temperature",
    "heating_slope_ohm_per_mA2": "h in R = R0 + h*I^2",
    "temperature_rise_K_per_mA2": "h/(dR/dT)",
    "temperature_rise_at_max_current_K": "h*I_max^2/(dR/dT); note WARNING above the limit",
}


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
    dR_dT_ohm_per_K: float | None = None
    heating_warn_K: float = 5.0


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
        or _number(sample.get("width_m")),
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


POINT_COLUMNS: tuple[str, ...] = (
    "point",
    "temperature_K",
    "field_T",
    "angle_deg",
    "current_A",
    "current_density_A_m2",
    "channel",
    "n_cycles",
    "resistance_ohm",
    "resistance_ohm_err",
    "unidirectional_ohm",
    "unidirectional_ohm_err",
    "unidirectional_ratio",
    "unidirectional_ratio_err",
    "offset_V",
    "offset_V_err",
    "flags",
)


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


# --- grouping --------------------------------------------------------------------------------


def group_ids(frame: pd.DataFrame, keys: Sequence[str]) -> tuple[NDArray[np.int64], pd.DataFrame]:
    """Group index of every row (groups sorted by key, empty keys last) and one row per group.

    Empty (NaN) keys form their own group: a loop the protocol does not use is one group.
    """
    if frame.empty:
        return np.zeros(0, np.int64), pd.DataFrame(columns=list(keys))
    codes = np.column_stack(
        [pd.factorize(frame[key], sort=True, use_na_sentinel=False)[0] for key in keys]
    )
    _, first, inverse = np.unique(codes, axis=0, return_index=True, return_inverse=True)
    key_frame = frame[list(keys)].iloc[first].reset_index(drop=True)
    return inverse.ravel().astype(np.int64), key_frame


def distinct_per_group(
    ids: NDArray[np.int64], values: NDArray[np.float64], n_groups: int
) -> NDArray[np.int64]:
    usable = (ids >= 0) & np.isfinite(values)
    if not usable.any():
        return np.zeros(n_groups, np.int64)
    pairs = np.unique(np.column_stack([ids[usable], values[usable]]), axis=0)
    return np.bincount(pairs[:, 0].astype(np.int64), minlength=n_groups).astype(np.int64)


def _keep_groups(
    ids: NDArray[np.int64], key_frame: pd.DataFrame, keep: NDArray[np.bool_]
) -> tuple[NDArray[np.int64], pd.DataFrame]:
    """Renumber so that only the kept groups remain; rows of dropped groups get -1."""
    new_index = np.full(keep.size, -1, np.int64)
    new_index[keep] = np.arange(int(keep.sum()))
    mapped = np.where(ids >= 0, new_index[np.clip(ids, 0, None)], -1)
    return mapped, key_frame[keep].reset_index(drop=True)


def tidy_rows(
    keys: pd.DataFrame,
    analysis: str,
    quantity: str,
    value: Any,
    error: Any,
    unit: str,
    reduced_chi2: Any,
    n_points: Any,
    model: str,
    note: Any = "",
) -> pd.DataFrame:
    """One fits.csv row per row of `keys`; key columns absent from `keys` stay empty."""
    n = len(keys)
    columns: dict[str, Any] = {}
    for key in KEY_COLUMNS:
        if key in keys:
            columns[key] = keys[key].to_numpy()
        else:
            columns[key] = np.full(
                n, "" if key == "channel" else np.nan, dtype=object if key == "channel" else float
            )
    columns.update(
        analysis=analysis,
        quantity=quantity,
        value=np.broadcast_to(np.asarray(value, dtype=float), (n,)),
        error=np.broadcast_to(np.asarray(error, dtype=float), (n,)),
        unit=unit,
        reduced_chi2=np.broadcast_to(np.asarray(reduced_chi2, dtype=float), (n,)),
        n_points=np.broadcast_to(np.asarray(n_points, dtype=np.int64), (n,)),
        model=model,
        note=np.broadcast_to(np.asarray(note, dtype=object), (n,)),
    )
    return pd.DataFrame(columns, index=pd.RangeIndex(n))


def read_fits_table(path: Path) -> pd.DataFrame:
    """fits.csv back as written: text columns as str (empty, not NaN), numbers as float."""
    text = ("channel", "analysis", "quantity", "unit", "model", "note")
    table = pd.read_csv(path, dtype={name: str for name in text}, keep_default_na=False)
    for name in FIT_COLUMN_NAMES:
        if name not in table:
            table[name] = "" if name in text else np.nan
        elif name not in text:
            table[name] = pd.to_numeric(table[name].replace("", np.nan), errors="coerce")
    return table[list(FIT_COLUMN_NAMES)]


def empty_fits_table() -> pd.DataFrame:
    return pd.DataFrame({name: pd.Series(dtype=_dtype(name)) for name in FIT_COLUMN_NAMES})


def _dtype(name: str) -> str:
    if name == "n_points":
        return "int64"
    if name in ("channel", "analysis", "quantity", "unit", "model", "note"):
        return "object"
    return "float64"


# --- angle -----------------------------------------------------------------------------------

ANGLE_KEYS = ("temperature_K", "field_T", "current_A", "channel")
HARMONIC_MODEL = "c0 + a1 cos(phi) + b1 sin(phi) + a2 cos(2phi) + b2 sin(2phi)"


@dataclass(frozen=True)
class AngleResult:
    rows: pd.DataFrame
    amplitudes: pd.DataFrame  # one row per angle group: keys + named amplitudes and errors


def angle_fits(points: pd.DataFrame, context: RunContext, apply_offset: bool) -> AngleResult:
    """Harmonic fits of resistance and unidirectional part per (T, field, current, channel)."""
    swept = points[np.isfinite(points["angle_deg"].to_numpy())]
    ids, keys = group_ids(swept, ANGLE_KEYS)
    angle = swept["angle_deg"].to_numpy(float)
    n_angles = distinct_per_group(ids, angle, len(keys))
    ids, keys = _keep_groups(ids, keys, n_angles >= MIN_ANGLES)
    if keys.empty:
        return AngleResult(empty_fits_table(), pd.DataFrame(columns=[*ANGLE_KEYS]))

    kinds = np.array([context.channel_kind(str(name)) for name in keys["channel"]])
    longitudinal = kinds == "longitudinal"
    resistance = _fit_quantity(swept, ids, len(keys), angle, "resistance_ohm")
    offset, offset_err = _mounting_offsets(resistance, longitudinal, context.rotation_plane)

    frames: list[pd.DataFrame] = []
    applied = 0.0
    if apply_offset:
        applied, applied_err, note = _run_offset(offset, offset_err, longitudinal)
        frames.append(
            tidy_rows(
                pd.DataFrame(index=range(1)),
                "angle",
                "angle_offset_applied_deg",
                applied,
                applied_err,
                "deg",
                np.nan,
                int(np.isfinite(offset).sum()),
                "weighted mean of the groups' angle_offset_deg",
                note,
            )
        )
        resistance = _fit_quantity(swept, ids, len(keys), angle - applied, "resistance_ohm")
    unidirectional = _fit_quantity(swept, ids, len(keys), angle - applied, "unidirectional_ohm")

    angle_name = "phi" if context.rotation_plane == "xy" else "theta"
    model = HARMONIC_MODEL.replace("phi", angle_name)
    for label, fit in (("resistance", resistance), ("unidirectional", unidirectional)):
        for index, term in enumerate(HARMONIC_TERMS):
            frames.append(
                tidy_rows(
                    keys,
                    "angle",
                    f"{label}_{term}",
                    fit.coefficients[:, index],
                    fit.scaled_errors[:, index],
                    "ohm",
                    fit.reduced_chi2,
                    fit.n_points,
                    model,
                    _fit_note(fit),
                )
            )
    offset_note = "from raw angles; +-90 deg ambiguity folded into (-45, 45]"
    has_offset = np.isfinite(offset)
    frames.append(
        tidy_rows(
            keys[has_offset],
            "angle",
            "angle_offset_deg",
            offset[has_offset],
            offset_err[has_offset],
            "deg",
            resistance.reduced_chi2[has_offset],
            resistance.n_points[has_offset],
            "a2 cos 2phi + b2 sin 2phi = A cos 2(phi - phi0)",
            offset_note,
        )
    )
    named, amplitudes = _named_amplitudes(keys, kinds, resistance, unidirectional, context)
    amplitudes["current_density_A_m2"] = _group_mean(
        ids, swept["current_density_A_m2"].to_numpy(float), len(keys)
    )
    frames.extend(named)
    rows = pd.concat([frame for frame in frames if not frame.empty], ignore_index=True)
    return AngleResult(rows, amplitudes)


def _group_mean(
    ids: NDArray[np.int64], values: NDArray[np.float64], n_groups: int
) -> NDArray[np.float64]:
    """Mean of each group's values; NaN if any value of the group is missing."""
    member = ids >= 0
    total = np.bincount(ids[member], weights=np.nan_to_num(values[member]), minlength=n_groups)
    count = np.bincount(ids[member], minlength=n_groups)
    missing = np.bincount(ids[member], weights=~np.isfinite(values[member]), minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where((missing == 0) & (count > 0), total / count, np.nan)


def _fit_quantity(
    frame: pd.DataFrame,
    ids: NDArray[np.int64],
    n_groups: int,
    angle: NDArray[np.float64],
    column: str,
) -> GroupedLinearFit:
    # One sweep shares current, channel, temperature and field, hence one noise level.
    return fit_harmonics_by_group(
        angle,
        frame[column].to_numpy(float),
        frame[f"{column}_err"].to_numpy(float),
        ids,
        n_groups,
        pool_errors=True,
    )


def _fit_note(fit: GroupedLinearFit) -> NDArray[np.object_]:
    factor = fit.birge_factor
    scaled = np.char.mod("errors x %.3g = sqrt(reduced chi2)", factor)
    notes = np.where(
        fit.weighted,
        np.where(factor > 1, scaled, ""),
        "unweighted: errors from the residual scatter",
    )
    failed = ~np.isfinite(fit.coefficients[:, 0])
    return np.where(failed, "not fitted: angles do not determine the harmonics", notes).astype(
        object
    )


def _mounting_offsets(
    resistance: GroupedLinearFit, longitudinal: NDArray[np.bool_], plane: str
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Offset from the 2phi phase: of R_xx in every plane, of the planar Hall R_xy in xy."""
    cov = resistance.covariance
    cos2, sin2 = resistance.coefficients[:, 3], resistance.coefficients[:, 4]
    from_longitudinal = second_harmonic_offset_deg(
        cos2, sin2, cov[:, 3, 3], cov[:, 4, 4], cov[:, 3, 4], reference_deg=0.0
    )
    from_hall = second_harmonic_offset_deg(
        cos2, sin2, cov[:, 3, 3], cov[:, 4, 4], cov[:, 3, 4], reference_deg=45.0
    )
    usable_hall = ~longitudinal & (plane == "xy")
    from_longitudinal = (from_longitudinal[0], from_longitudinal[1] * resistance.birge_factor)
    from_hall = (from_hall[0], from_hall[1] * resistance.birge_factor)
    offset = np.where(
        longitudinal, from_longitudinal[0], np.where(usable_hall, from_hall[0], np.nan)
    )
    error = np.where(
        longitudinal, from_longitudinal[1], np.where(usable_hall, from_hall[1], np.nan)
    )
    return offset, error


def _run_offset(
    offset: NDArray[np.float64], error: NDArray[np.float64], longitudinal: NDArray[np.bool_]
) -> tuple[float, float, str]:
    """One mounting offset for the run: inverse-variance mean, longitudinal channels first."""
    usable = np.isfinite(offset) & np.isfinite(error) & (error > 0)
    preferred = usable & longitudinal
    chosen = preferred if preferred.any() else usable
    if not chosen.any():
        return 0.0, math.nan, "no group gave an offset: none applied"
    weight = 1.0 / error[chosen] ** 2
    mean = float(np.sum(weight * offset[chosen]) / weight.sum())
    spread = float(np.std(offset[chosen]))
    note = f"applied to all angle fits; spread over {int(chosen.sum())} groups {spread:.3g} deg"
    return mean, float(1.0 / math.sqrt(weight.sum())), note


def _named_amplitudes(
    keys: pd.DataFrame,
    kinds: NDArray[np.str_],
    resistance: GroupedLinearFit,
    unidirectional: GroupedLinearFit,
    context: RunContext,
) -> tuple[list[pd.DataFrame], pd.DataFrame]:
    plane = context.rotation_plane
    c0, c0_err = resistance.coefficients[:, 0], resistance.scaled_errors[:, 0]
    longitudinal = kinds == "longitudinal"
    frames: list[pd.DataFrame] = []
    amplitudes = keys.copy()
    amplitudes["kind"] = kinds
    amplitudes["resistance_c0"] = c0
    amplitudes["resistance_c0_err"] = c0_err

    def add(
        mask: NDArray[np.bool_],
        quantity: str,
        value: Any,
        error: Any,
        unit: str,
        fit: GroupedLinearFit,
        model: str,
        note: str = "",
    ) -> None:
        value = np.asarray(value, dtype=float)
        error = np.asarray(error, dtype=float)
        frames.append(
            tidy_rows(
                keys[mask],
                "angle",
                quantity,
                value[mask],
                error[mask],
                unit,
                fit.reduced_chi2[mask],
                fit.n_points[mask],
                model,
                note,
            )
        )
        amplitudes[quantity] = np.where(mask, value, np.nan)
        amplitudes[f"{quantity}_err"] = np.where(mask, error, np.nan)

    cos1, sin1 = 1, 2
    cos2, sin2 = 3, 4
    r_coef, r_err = resistance.coefficients, resistance.scaled_errors
    if plane == "zy":
        mr_name, mr_sign, mr_model = "smr", 2.0, "smr_ohm = 2*a2 = R(m||z) - R(m||y)"
    elif plane == "zx":
        mr_name, mr_sign, mr_model = "amr", -2.0, "amr_ohm = -2*a2 = R(m||x) - R(m||z)"
    else:
        mr_name, mr_sign, mr_model = "amr", 2.0, "amr_ohm = 2*a2 = R(m||x) - R(m||y)"
    mr = mr_sign * r_coef[:, cos2]
    mr_err = abs(mr_sign) * r_err[:, cos2]
    add(longitudinal, f"{mr_name}_ohm", mr, mr_err, "ohm", resistance, mr_model)
    mr_ratio = ratio_with_error(mr, mr_err, c0, c0_err)
    add(longitudinal, f"{mr_name}_ratio", *mr_ratio, "1", resistance, f"{mr_name}_ohm / c0")

    umr, umr_err = unidirectional.coefficients[:, sin1], unidirectional.scaled_errors[:, sin1]
    umr_note = "expected ~0: m_y = 0 in the zx plane" if plane == "zx" else ""
    umr_model = "umr_ohm = b1 of unidirectional_ohm (m_y part)"
    add(longitudinal, "umr_ohm", umr, umr_err, "ohm", unidirectional, umr_model, umr_note)
    umr_ratio = ratio_with_error(umr, umr_err, c0, c0_err)
    add(longitudinal, "umr_ratio", *umr_ratio, "1", unidirectional, "umr_ohm / c0", umr_note)

    transverse = ~longitudinal
    if plane == "xy":
        hall, hall_err = 2.0 * r_coef[:, sin2], 2.0 * r_err[:, sin2]
        add(
            transverse,
            "planar_hall_ohm",
            hall,
            hall_err,
            "ohm",
            resistance,
            "R_xy = planar_hall_ohm/2 * sin 2phi (2*b2)",
        )
    else:
        add(
            transverse,
            "anomalous_hall_ohm",
            r_coef[:, cos1],
            r_err[:, cos1],
            "ohm",
            resistance,
            "R_xy = anomalous_hall_ohm * cos(theta) (a1; m_z part)",
        )
    return frames, amplitudes


# --- where the current, field and heating analyses take their values from ------------------

SOURCE_COLUMNS = (
    "temperature_K",
    "field_T",
    "angle_deg",
    "current_A",
    "current_density_A_m2",
    "channel",
    "resistance_ohm",
    "resistance_ohm_err",
    "unidirectional_ohm",
    "unidirectional_ohm_err",
    "unidirectional_ratio",
    "unidirectional_ratio_err",
)


@dataclass(frozen=True)
class AnalysisSource:
    """Values the current, field, temperature-slope and heating analyses fit.

    With angle sweeps these are the angle fits' amplitudes of the longitudinal channels
    (resistance_c0 as resistance, umr_ohm and umr_ratio as the unidirectional part) with an
    empty angle: one fit per sweep instead of one per angle, and no fit at angles where the
    UMR vanishes. Without angle sweeps they are the points, at each fixed angle.
    """

    frame: pd.DataFrame
    origin: str
    from_angle_fits: bool


def analysis_source(
    points: pd.DataFrame, amplitudes: pd.DataFrame, context: RunContext
) -> AnalysisSource:
    if "umr_ohm" in amplitudes and np.isfinite(amplitudes["umr_ohm"].to_numpy(float)).any():
        renamed = amplitudes[amplitudes["kind"] == "longitudinal"].rename(
            columns={
                "resistance_c0": "resistance_ohm",
                "resistance_c0_err": "resistance_ohm_err",
                "umr_ohm": "unidirectional_ohm",
                "umr_ohm_err": "unidirectional_ohm_err",
                "umr_ratio": "unidirectional_ratio",
                "umr_ratio_err": "unidirectional_ratio_err",
            }
        )
        renamed = renamed.assign(angle_deg=np.nan)
        return AnalysisSource(
            renamed[list(SOURCE_COLUMNS)].reset_index(drop=True), "angle-fit amplitudes", True
        )
    return AnalysisSource(points[list(SOURCE_COLUMNS)], "points at fixed angle", False)


def longitudinal_only(frame: pd.DataFrame, context: RunContext) -> pd.DataFrame:
    kinds = np.array([context.channel_kind(str(name)) for name in frame["channel"]], dtype=object)
    return frame[kinds == "longitudinal"] if len(frame) else frame


# --- current ---------------------------------------------------------------------------------

CURRENT_KEYS = ("temperature_K", "field_T", "angle_deg", "channel")


def current_abscissa(
    frame: pd.DataFrame, context: RunContext
) -> tuple[NDArray[np.float64], str, float]:
    """The abscissa of current fits, its unit label and its scale factor (value per unit).

    points.csv's current density is used where present, the parallel-resistor model of
    run.json's sample fills the gaps, and when neither is possible the fits fall back to the
    current itself in mA.
    """
    density = frame["current_density_A_m2"].to_numpy(float).copy()
    missing = ~np.isfinite(density)
    if missing.any() and context.layers and context.width_m:
        # An ill-defined stack leaves the gaps empty: the fit then falls back to mA and says so.
        with contextlib.suppress(ValueError, TypeError, KeyError):
            density[missing] = carrier_current_density(
                frame["current_A"].to_numpy(float)[missing],
                context.width_m,
                context.layers,
                context.sheet_resistance_ohm,
            )
    if np.isfinite(density).all():
        return density / DENSITY_UNIT, "1e11 A/m^2", DENSITY_UNIT
    return frame["current_A"].to_numpy(float) * 1e3, "mA", 1e-3


def current_fits(source: AnalysisSource, context: RunContext) -> pd.DataFrame:
    """UMR against current density per (T, field, angle, channel) with >= 3 currents."""
    usable = source.frame[np.isfinite(source.frame["current_A"].to_numpy(float))]
    if usable.empty:
        return empty_fits_table()
    x, x_unit, scale = current_abscissa(usable, context)
    ids, keys = group_ids(usable, CURRENT_KEYS)
    n_currents = distinct_per_group(ids, usable["current_A"].to_numpy(float), len(keys))
    ids, keys = _keep_groups(ids, keys, n_currents >= MIN_CURRENTS)
    if keys.empty:
        return empty_fits_table()
    n = len(keys)
    umr = usable["unidirectional_ohm"].to_numpy(float)
    umr_err = usable["unidirectional_ohm_err"].to_numpy(float)
    ratio = usable["unidirectional_ratio"].to_numpy(float)
    ratio_err = usable["unidirectional_ratio_err"].to_numpy(float)

    line = fit_linear_by_group(x, umr, umr_err, ids, n)
    cubic = fit_linear_by_group(np.column_stack([x, x**3]), umr, umr_err, ids, n)
    ratio_line = fit_linear_by_group(x, ratio, ratio_err, ids, n)
    onset, onset_note = _linearity_onset(ids, n, x, umr, umr_err, scale)
    per = f"per {x_unit}"
    by_density = x_unit != "mA"
    ratio_name = "umr_ratio_per_1e11_A_m2" if by_density else "umr_ratio_per_mA"
    frames = [
        tidy_rows(
            keys,
            "current",
            "umr_slope_ohm",
            line.coefficients[:, 0],
            line.scaled_errors[:, 0],
            f"ohm {per}",
            line.reduced_chi2,
            line.n_points,
            "U = k*j",
            _fit_note(line),
        ),
        tidy_rows(
            keys,
            "current",
            "umr_linear_ohm",
            cubic.coefficients[:, 0],
            cubic.scaled_errors[:, 0],
            f"ohm {per}",
            cubic.reduced_chi2,
            cubic.n_points,
            "U = k1*j + k3*j^3",
            _fit_note(cubic),
        ),
        tidy_rows(
            keys,
            "current",
            "umr_cubic_ohm",
            cubic.coefficients[:, 1],
            cubic.scaled_errors[:, 1],
            f"ohm per ({x_unit})^3",
            cubic.reduced_chi2,
            cubic.n_points,
            "U = k1*j + k3*j^3",
            _fit_note(cubic),
        ),
        tidy_rows(
            keys,
            "current",
            ratio_name,
            ratio_line.coefficients[:, 0],
            ratio_line.scaled_errors[:, 0],
            f"1 {per}",
            ratio_line.reduced_chi2,
            ratio_line.n_points,
            "U/R = r*j",
            _fit_note(ratio_line),
        ),
        tidy_rows(
            keys,
            "current",
            "nonlinear_from_A_m2" if by_density else "nonlinear_from_A",
            onset,
            np.nan,
            "A/m^2" if by_density else "A",
            np.nan,
            line.n_points,
            f"first |U - k_low*j| > {LINEARITY_SIGMAS:g} sigma",
            onset_note,
        ),
    ]
    extra = [f"from {source.origin}"]
    if not by_density:
        extra.append("no current density (no density column, no sample geometry): per mA")
    for frame in frames:
        frame["note"] = [_join_notes(old, *extra) for old in frame["note"]]
    return pd.concat(frames, ignore_index=True)


def _join_notes(*parts: object) -> str:
    return "; ".join(str(part) for part in parts if part and str(part) != "nan")


def _linearity_onset(
    ids: NDArray[np.int64],
    n_groups: int,
    x: NDArray[np.float64],
    y: NDArray[np.float64],
    y_err: NDArray[np.float64],
    scale: float,
) -> tuple[NDArray[np.float64], NDArray[np.object_]]:
    """First abscissa (in A/m^2 or A) whose residual from the low-current line exceeds 3 sigma.

    The low-current line goes through the origin and is fitted to the lower half of each
    group's distinct currents (at least two). A point's sigma combines its own error (or the
    low line's residual scatter when errors are missing) with the line's slope error times x;
    both are inflated by the low line's Birge factor when its scatter exceeds its errors.
    """
    valid = (ids >= 0) & np.isfinite(x) & np.isfinite(y)
    frame = pd.DataFrame({"g": np.where(valid, ids, -1), "x": np.abs(x)})
    rank = frame[valid].groupby("g")["x"].rank(method="dense").reindex(frame.index).to_numpy()
    n_distinct = distinct_per_group(np.where(valid, ids, -1), np.abs(x), n_groups)
    n_low = np.maximum(2, np.ceil(n_distinct / 2)).astype(np.int64)
    in_low = valid & (rank <= n_low[np.clip(ids, 0, None)])
    low = fit_linear_by_group(x, y, y_err, np.where(in_low, ids, -1), n_groups)
    slope = low.coefficients[:, 0]
    slope_err = low.scaled_errors[:, 0]
    sum_x2 = np.bincount(ids[in_low], weights=x[in_low] ** 2, minlength=n_groups)
    scatter = np.sqrt(low.covariance[:, 0, 0] * sum_x2)  # s, for unweighted groups

    g = np.clip(ids, 0, None)
    point_sigma = np.where(low.weighted[g], y_err * low.birge_factor[g], scatter[g])
    sigma = np.sqrt(point_sigma**2 + (x * slope_err[g]) ** 2)
    residual = y - slope[g] * x
    off_line = valid & np.isfinite(sigma) & (np.abs(residual) > LINEARITY_SIGMAS * sigma)
    first = np.full(n_groups, np.inf)
    np.minimum.at(first, ids[off_line], np.abs(x[off_line]))
    largest = np.full(n_groups, -np.inf)
    np.maximum.at(largest, ids[valid], np.abs(x[valid]))
    found = np.isfinite(first)
    determined = np.isfinite(slope)
    onset = np.where(found & determined, first * scale, np.nan)
    notes = np.where(
        found,
        "departs from the low-current line here",
        np.char.add("none: linear up to ", np.char.mod("%.3g", largest * scale)),
    ).astype(object)
    notes[~determined] = "not determined: low-current line not fitted"
    return onset, notes


# --- field ---------------------------------------------------------------------------------

FIELD_KEYS = ("temperature_K", "angle_deg", "current_A", "channel")
FIELD_QUANTITIES = {
    "independent": ("umr_field_independent_ohm", "ohm"),
    "dependent": ("umr_field_dependent_ohm", "ohm"),
    "slope": ("umr_field_slope_ohm_per_T", "ohm/T"),
    "scale_T": ("umr_field_scale_T", "T"),
}


def field_fits(source: AnalysisSource, form: str) -> pd.DataFrame:
    """UMR against |field| per (T, angle, current, channel) with >= 3 fields.

    Positive and negative fields are fitted separately (the UMR changes sign with m). The
    non-linear form is fitted group by group; there are few field groups in any run.
    """
    if form not in FIELD_FORMS:
        raise ValueError(f"unknown field form {form!r}; choose one of {sorted(FIELD_FORMS)}")
    field_values = source.frame["field_T"].to_numpy(float)
    has_field = np.isfinite(field_values)
    frame = source.frame[has_field].assign(
        field_branch=np.where(field_values[has_field] < 0, -1, 1)
    )
    ids, key_frame = group_ids(frame, (*FIELD_KEYS, "field_branch"))
    n_fields = distinct_per_group(ids, frame["field_T"].to_numpy(float), len(key_frame))
    order = np.argsort(ids, kind="stable")
    bounds = np.searchsorted(ids[order], np.arange(len(key_frame) + 1))
    field_T = frame["field_T"].to_numpy(float)
    values = frame["unidirectional_ohm"].to_numpy(float)
    errors = frame["unidirectional_ohm_err"].to_numpy(float)
    collected: dict[str, list[Any]] = {
        "group": [],
        "quantity": [],
        "value": [],
        "error": [],
        "unit": [],
        "reduced_chi2": [],
        "n_points": [],
        "model": [],
        "note": [],
    }
    for group in np.flatnonzero(n_fields >= MIN_FIELDS):
        rows = order[bounds[group] : bounds[group + 1]]
        fit = fit_field_dependence(field_T[rows], values[rows], errors[rows], form)
        used_form = form
        notes = [f"from {source.origin}"]
        if form == "inverse" and fit.note == "needs >= 4 points":
            fit = fit_field_dependence(field_T[rows], values[rows], errors[rows], "linear")
            used_form = "linear"
            notes.append("inverse form needs >= 4 fields: linear form used")
        if key_frame["field_branch"].iloc[group] < 0:
            notes.append("negative fields, fitted against |B|")
        birge = math.sqrt(fit.reduced_chi2) if fit.reduced_chi2 > 1 else 1.0
        if not fit.weighted:
            notes.append("unweighted: errors from the residual scatter")
        elif birge > 1:
            notes.append(f"errors x {birge:.3g} = sqrt(reduced chi2)")
        notes.append(fit.note)
        notes.append(_scale_warning(fit.names, fit.values, np.abs(field_T[rows])))
        for name, value, error in zip(fit.names, fit.values, fit.errors * birge):
            quantity, unit = FIELD_QUANTITIES[name]
            for column, item in (
                ("group", group),
                ("quantity", quantity),
                ("value", value),
                ("error", error),
                ("unit", unit),
                ("reduced_chi2", fit.reduced_chi2),
                ("n_points", fit.n_points),
                ("model", FIELD_FORMS[used_form]),
                ("note", _join_notes(*notes)),
            ):
                collected[column].append(item)
    if not collected["group"]:
        return empty_fits_table()
    table = key_frame.iloc[collected.pop("group")][list(FIELD_KEYS)].reset_index(drop=True)
    table = table.assign(analysis="field", **collected)
    for key in KEY_COLUMNS:
        if key not in table:
            table[key] = np.nan
    return table[list(FIT_COLUMN_NAMES)]


def _scale_warning(
    names: tuple[str, ...], values: NDArray[np.float64], field_T: NDArray[np.float64]
) -> str:
    """Bs far outside the measured fields means the data cannot tell the two parts apart."""
    if "scale_T" not in names:
        return ""
    scale = values[names.index("scale_T")]
    positive = field_T[field_T > 0]
    if not np.isfinite(scale) or positive.size == 0:
        return ""
    if scale > 10 * positive.max() or scale < 0.1 * positive.min():
        return "Bs outside the measured field range: the two parts are not separated"
    return ""


# --- temperature -----------------------------------------------------------------------------

TEMPERATURE_QUANTITIES = (
    "umr_ohm",
    "umr_ratio",
    "amr_ohm",
    "amr_ratio",
    "smr_ohm",
    "smr_ratio",
    "planar_hall_ohm",
    "anomalous_hall_ohm",
)
SLOPE_KEYS = ("field_T", "angle_deg", "channel")


def temperature_fits(
    angle_rows: pd.DataFrame, source: AnalysisSource, context: RunContext
) -> pd.DataFrame:
    """Angle-fit amplitudes gathered per temperature, and the local dR/dT."""
    frames = [
        _amplitudes_by_temperature(angle_rows),
        _resistance_slopes(longitudinal_only(source.frame, context), source.origin),
    ]
    frames = [frame for frame in frames if not frame.empty]
    return pd.concat(frames, ignore_index=True) if frames else empty_fits_table()


def _amplitudes_by_temperature(angle_rows: pd.DataFrame) -> pd.DataFrame:
    if angle_rows.empty:
        return empty_fits_table()
    rows = angle_rows[angle_rows["quantity"].isin(TEMPERATURE_QUANTITIES)].copy()
    if rows.empty:
        return empty_fits_table()
    ids, keys = group_ids(rows, ("field_T", "current_A", "channel", "quantity"))
    n_temperatures = distinct_per_group(ids, rows["temperature_K"].to_numpy(float), len(keys))
    rows = rows[n_temperatures[ids] >= 2]
    rows["analysis"] = "temperature"
    rows["note"] = [_join_notes("from the angle fit", note) for note in rows["note"]]
    return rows.reset_index(drop=True)


def _resistance_slopes(frame: pd.DataFrame, origin: str) -> pd.DataFrame:
    """dR/dT of the lowest-current resistance, local: fitted over each temperature and its
    neighbours in the sorted list of temperatures (one-sided at the ends)."""
    usable = frame[np.isfinite(frame["temperature_K"].to_numpy(float))]
    if usable.empty:
        return empty_fits_table()
    current = usable["current_A"].to_numpy(float)
    outer_ids, _ = group_ids(usable, SLOPE_KEYS)
    lowest = pd.Series(current).groupby(outer_ids).transform("min").to_numpy()
    at_lowest = (current == lowest) | (np.isnan(current) & np.isnan(lowest))
    usable = usable[at_lowest].reset_index(drop=True)
    outer_ids, outer_keys = group_ids(usable, SLOPE_KEYS)
    temperature = usable["temperature_K"].to_numpy(float)
    rank = pd.Series(temperature).groupby(outer_ids).rank(method="dense").to_numpy()
    rank = rank.astype(np.int64) - 1
    n_temperatures = distinct_per_group(outer_ids, temperature, len(outer_keys))
    if n_temperatures.max(initial=0) < 2:
        return empty_fits_table()

    # Each point serves the windows centred on its own temperature and on its two neighbours.
    copies = []
    n_of_row = n_temperatures[outer_ids]
    for shift in (-1, 0, 1):
        centre = rank + shift
        inside = (centre >= 0) & (centre < n_of_row) & (n_of_row >= 2)
        copies.append(
            pd.DataFrame(
                {
                    "outer": outer_ids[inside],
                    "centre": centre[inside],
                    "row": np.flatnonzero(inside),
                }
            )
        )
    windows = pd.concat(copies, ignore_index=True)
    window_ids, window_keys = group_ids(windows, ("outer", "centre"))
    rows = windows["row"].to_numpy()
    centre_rows = usable.assign(outer=outer_ids, centre=rank).drop_duplicates(["outer", "centre"])
    centres = window_keys.merge(centre_rows, on=["outer", "centre"], how="left")
    t_centre = centres["temperature_K"].to_numpy(float)
    dt = temperature[rows] - t_centre[window_ids]
    fit = fit_linear_by_group(
        np.column_stack([np.ones_like(dt), dt]),
        usable["resistance_ohm"].to_numpy(float)[rows],
        usable["resistance_ohm_err"].to_numpy(float)[rows],
        window_ids,
        len(window_keys),
    )
    keys = centres[["temperature_K", "current_A", *SLOPE_KEYS]]
    notes = [_join_notes("lowest current", f"from {origin}", note) for note in _fit_note(fit)]
    return tidy_rows(
        keys,
        "temperature",
        "dR_dT_ohm_per_K",
        fit.coefficients[:, 1],
        fit.scaled_errors[:, 1],
        "ohm/K",
        fit.reduced_chi2,
        fit.n_points,
        "R = R(T0) + dR/dT*(T - T0), over T0 and its neighbours",
        np.array(notes, dtype=object),
    )


# --- heating ---------------------------------------------------------------------------------

HEATING_KEYS = ("temperature_K", "field_T", "angle_deg", "channel")


def heating_fits(
    source: AnalysisSource, slopes: pd.DataFrame, context: RunContext, options: FitOptions
) -> pd.DataFrame:
    """Joule heating of the longitudinal channels: R = R0 + h I^2, rise = h I^2 / (dR/dT)."""
    frame = longitudinal_only(source.frame, context)
    usable = frame[np.isfinite(frame["current_A"].to_numpy(float))]
    ids, keys = group_ids(usable, HEATING_KEYS)
    current_mA = usable["current_A"].to_numpy(float) * 1e3
    n_currents = distinct_per_group(ids, current_mA, len(keys))
    ids, keys = _keep_groups(ids, keys, n_currents >= 2)
    if keys.empty:
        return empty_fits_table()
    fit = fit_linear_by_group(
        np.column_stack([np.ones_like(current_mA), current_mA**2]),
        usable["resistance_ohm"].to_numpy(float),
        usable["resistance_ohm_err"].to_numpy(float),
        ids,
        len(keys),
    )
    slope, slope_err = fit.coefficients[:, 1], fit.scaled_errors[:, 1]
    largest = np.full(len(keys), -np.inf)
    np.maximum.at(largest, ids[ids >= 0], np.abs(current_mA[ids >= 0]))

    if options.dR_dT_ohm_per_K is not None:
        dr_dt = np.full(len(keys), float(options.dR_dT_ohm_per_K))
        dr_dt_err = np.zeros(len(keys))
        dr_dt_source = "dR/dT given by the user"
    else:
        lookup = slopes.loc[
            slopes["quantity"] == "dR_dT_ohm_per_K",
            ["temperature_K", *SLOPE_KEYS, "value", "error"],
        ]
        matched = keys.merge(lookup, on=["temperature_K", *SLOPE_KEYS], how="left")
        matched = matched.drop_duplicates(list(HEATING_KEYS))
        dr_dt = matched["value"].to_numpy(float)
        dr_dt_err = np.nan_to_num(matched["error"].to_numpy(float))
        dr_dt_source = "dR/dT from this run's temperature series"
    rise, rise_err = ratio_with_error(slope, slope_err, dr_dt, dr_dt_err)
    at_max, at_max_err = rise * largest**2, rise_err * largest**2

    rise_notes = [
        _join_notes(
            f"from {source.origin}",
            dr_dt_source if np.isfinite(value) else "no dR/dT in this run: pass dR_dT_ohm_per_K",
        )
        for value in dr_dt
    ]
    max_notes = [
        _join_notes(
            f"WARNING: above {options.heating_warn_K:g} K"
            if rise_K > options.heating_warn_K
            else "",
            f"at {current:.4g} mA",
            note,
        )
        for rise_K, current, note in zip(np.nan_to_num(at_max, nan=-np.inf), largest, rise_notes)
    ]
    model = "R = R0 + h*I^2"
    rise_model = f"{model}; rise = h*I^2/(dR/dT)"
    return pd.concat(
        [
            tidy_rows(
                keys,
                "heating",
                "heating_slope_ohm_per_mA2",
                slope,
                slope_err,
                "ohm/mA^2",
                fit.reduced_chi2,
                fit.n_points,
                model,
                np.array(
                    [_join_notes(f"from {source.origin}", note) for note in _fit_note(fit)],
                    dtype=object,
                ),
            ),
            tidy_rows(
                keys,
                "heating",
                "temperature_rise_K_per_mA2",
                rise,
                rise_err,
                "K/mA^2",
                fit.reduced_chi2,
                fit.n_points,
                rise_model,
                np.array(rise_notes, dtype=object),
            ),
            tidy_rows(
                keys,
                "heating",
                "temperature_rise_at_max_current_K",
                at_max,
                at_max_err,
                "K",
                fit.reduced_chi2,
                fit.n_points,
                rise_model,
                np.array(max_notes, dtype=object),
            ),
        ],
        ignore_index=True,
    )


# --- the whole table -------------------------------------------------------------------------


def build_fits_table(
    points: pd.DataFrame, context: RunContext, options: FitOptions | None = None
) -> pd.DataFrame:
    """Every analysis the data support, as one tidy table (columns FIT_COLUMN_NAMES)."""
    options = options or FitOptions()
    points = normalise_points(points)
    angle = angle_fits(points, context, options.angle_offset)
    source = analysis_source(points, angle.amplitudes, context)
    temperature = temperature_fits(angle.rows, source, context)
    frames = [
        angle.rows,
        current_fits(source, context),
        field_fits(source, options.field_form),
        temperature,
        heating_fits(source, temperature, context, options),
    ]
    frames = [frame for frame in frames if not frame.empty]
    if not frames:
        return empty_fits_table()
    table = pd.concat(frames, ignore_index=True)[list(FIT_COLUMN_NAMES)]
    table["n_points"] = table["n_points"].astype(np.int64)
    return table
