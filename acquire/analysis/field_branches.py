"""Field sweeps: which branch a point lies on, which fields are left out of the form fits,
and the sign of the magnetisation that makes the unidirectional part one odd function.

- Branch: within one sequence (same temperature, angle, current and channel, in measured
  order) a point is on the `up` branch when the field was rising towards it and on `back`
  when it was falling (the first point takes the direction towards the second). Branches are
  told apart only where the run measured the same field state on both (a loop with a
  return); otherwise the branch is empty and the sweeps are pooled.
- Left out of the form fits: B = 0 (no magnetisation direction is set), and the switching
  region: every |B| up to the largest |B| at which the two branches' resistance differs by
  more than SWITCHING_SIGMAS standard errors (m has not yet reached the branch it saturates
  on). The resistance is the witness because it is even in the current: a drifting offset
  in the unidirectional part of a pattern without a zero step would mark every field.
- m sign: the field direction's m_y sign (xy, zy) times the field's sign, so that
  s * unidirectional is the m_y-odd part; points at +m and -m with the same |B| then enter
  one fit and their m-even part cancels.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from acquire.analysis.fit_groups import group_ids

SEQUENCE_KEYS: tuple[str, ...] = ("temperature_K", "angle_deg", "current_A", "channel")
SWITCHING_SIGMAS: float = 4.0


def sweep_direction(frame: pd.DataFrame) -> NDArray[np.object_]:
    """'up' or 'back' for every row (see the module docstring), '' where no field."""
    result = np.full(len(frame), "", dtype=object)
    if frame.empty or "point" not in frame:
        return result
    field = frame["field_T"].to_numpy(float)
    ids, _ = group_ids(frame, SEQUENCE_KEYS)
    order = np.lexsort((frame["point"].to_numpy(float), ids))
    for start, stop in _runs(ids[order]):
        rows = order[start:stop]
        values = field[rows]
        steps = np.diff(values)
        direction = np.zeros(values.size)
        direction[1:] = np.sign(steps)
        direction[0] = np.sign(steps[0]) if steps.size else 0.0
        # A repeated field (another current or channel at the same point) keeps the last
        # direction of travel.
        for k in range(1, direction.size):
            if direction[k] == 0:
                direction[k] = direction[k - 1]
        result[rows] = np.where(direction > 0, "up", np.where(direction < 0, "back", ""))
    result[~np.isfinite(field)] = ""
    return result


def _runs(sorted_ids: NDArray[np.int64]) -> list[tuple[int, int]]:
    if sorted_ids.size == 0:
        return []
    edges = np.flatnonzero(np.diff(sorted_ids)) + 1
    starts = np.concatenate([[0], edges])
    stops = np.concatenate([edges, [sorted_ids.size]])
    return list(zip(starts.tolist(), stops.tolist()))


def m_sign(angle_deg: NDArray[np.float64], field_T: NDArray[np.float64], plane: str) -> NDArray[
    np.float64
]:
    """Sign of m_y for a saturating field (+1 where the angle gives no m_y, as in zx)."""
    along_y = np.sin(np.deg2rad(angle_deg)) if plane in ("xy", "zy") else np.ones_like(angle_deg)
    sign = np.sign(along_y)
    sign = np.where(sign == 0, 1.0, sign)
    return sign * np.where(field_T < 0, -1.0, 1.0)


def switching_limit(frame: pd.DataFrame, branch: NDArray[np.object_]) -> NDArray[np.float64]:
    """Per row, the |B| up to which its sequence is left out (0 where no branch pair)."""
    limit = np.zeros(len(frame))
    if frame.empty:
        return limit
    keyed = frame.assign(branch=branch, row=np.arange(len(frame)))
    # The sequence's RMS error: a standard error over a few cycles is a poor estimate of
    # the noise point by point, and one low estimate would mark a field as switching.
    for column in ("resistance_ohm_err", "unidirectional_ohm_err"):
        squared = keyed[column].astype(float) ** 2
        pooled = squared.groupby([keyed[k] for k in SEQUENCE_KEYS], dropna=False).transform(
            "mean")
        keyed[column] = np.sqrt(pooled.to_numpy(float))
    keys = [*SEQUENCE_KEYS, "field_T"]
    values = ["resistance_ohm", "resistance_ohm_err", "unidirectional_ohm",
              "unidirectional_ohm_err"]
    up = keyed[keyed["branch"] == "up"].groupby(keys, dropna=False)[values].mean()
    down = keyed[keyed["branch"] == "back"].groupby(keys, dropna=False)[values].mean()
    both = up.merge(down, left_index=True, right_index=True, suffixes=("_up", "_down"))
    if both.empty:
        return limit
    differs = np.zeros(len(both), bool)
    for column in ("resistance_ohm",):
        gap = np.abs(both[f"{column}_up"] - both[f"{column}_down"]).to_numpy(float)
        error = np.hypot(both[f"{column}_err_up"], both[f"{column}_err_down"]).to_numpy(float)
        differs |= gap > SWITCHING_SIGMAS * error
    both = both.assign(differs=differs).reset_index()
    both["abs_field"] = np.abs(both["field_T"])
    worst = both[both["differs"]].groupby(list(SEQUENCE_KEYS), dropna=False)["abs_field"].max()
    if worst.empty:
        return limit
    lookup = keyed.merge(worst.rename("limit").reset_index(), on=list(SEQUENCE_KEYS),
                         how="left")
    limit[lookup["row"].to_numpy(int)] = lookup["limit"].fillna(0.0).to_numpy(float)
    return limit


def has_branch_pairs(frame: pd.DataFrame, branch: NDArray[np.object_]) -> NDArray[np.bool_]:
    """Per row: does its sequence have a field state measured on both branches?"""
    keyed = frame.assign(branch=branch)
    result = np.zeros(len(frame), bool)
    if frame.empty:
        return result
    ids, keys = group_ids(keyed, SEQUENCE_KEYS)
    field = keyed["field_T"].to_numpy(float)
    paired = np.zeros(len(keys), bool)
    for group in range(len(keys)):
        rows = ids == group
        ups = set(field[rows & (branch == "up")].round(12))
        downs = set(field[rows & (branch == "back")].round(12))
        paired[group] = bool(ups & downs)
    result[:] = paired[ids]
    return result
