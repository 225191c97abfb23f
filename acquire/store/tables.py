"""Table schemas: each table a run writes is defined once, as a TableSchema, and used by the
writer, the resume repair, the reader and the CSVW metadata alike."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from acquire.store.csvw import Column
from drivers.roles import movable_axes


@dataclass(frozen=True)
class TableSchema:
    file_name: str  # "readings.csv"
    description: str  # for the CSVW metadata
    columns: tuple[Column, ...]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(column.name for column in self.columns)

    def index(self, name: str) -> int:
        return self.names.index(name)

    def read(self, path: Path, usecols: list[str] | None = None) -> pd.DataFrame:
        """The table back with its datatypes: an empty number cell is NaN (a loop the protocol
        does not use), an empty text cell is the empty string, never NaN."""
        kinds = {column.name: column.datatype for column in self.columns}
        numbers = [name for name, kind in kinds.items() if kind == "double"]
        texts = {name: str for name, kind in kinds.items() if kind in ("string", "dateTime")}
        return pd.read_csv(
            path, keep_default_na=False, na_values={name: [""] for name in numbers},
            dtype=texts, usecols=usecols,
        )


def setpoint_columns() -> list[Column]:
    """One column per loop axis a role moves, in the registry's order: the setpoints."""
    return [Column(axis.setpoint_column, "double", axis.quantity.si_unit, axis.setpoint_title)
            for axis in movable_axes()]


def readback_columns(when: str) -> list[Column]:
    """The readbacks of those axes; `when` says when they were read ("at this step")."""
    return [Column(axis.readback_column, "double", axis.quantity.si_unit,
                   f"{axis.readback_title} {when}") for axis in movable_axes()]
