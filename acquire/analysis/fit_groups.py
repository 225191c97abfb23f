"""Vectorised grouping of point rows into fit groups: one integer id per row, no Python loop."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import NDArray


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


def keep_groups(
    ids: NDArray[np.int64], key_frame: pd.DataFrame, keep: NDArray[np.bool_]
) -> tuple[NDArray[np.int64], pd.DataFrame]:
    """Renumber so that only the kept groups remain; rows of dropped groups get -1."""
    new_index = np.full(keep.size, -1, np.int64)
    new_index[keep] = np.arange(int(keep.sum()))
    mapped = np.where(ids >= 0, new_index[np.clip(ids, 0, None)], -1)
    return mapped, key_frame[keep].reset_index(drop=True)


def group_mean(
    ids: NDArray[np.int64], values: NDArray[np.float64], n_groups: int
) -> NDArray[np.float64]:
    """Mean of each group's values; NaN if any value of the group is missing."""
    member = ids >= 0
    total = np.bincount(ids[member], weights=np.nan_to_num(values[member]), minlength=n_groups)
    count = np.bincount(ids[member], minlength=n_groups)
    missing = np.bincount(ids[member], weights=~np.isfinite(values[member]), minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where((missing == 0) & (count > 0), total / count, np.nan)
