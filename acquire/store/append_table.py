"""Append-only CSV tables, flushed and fsynced at every point so a power cut loses nothing."""

from __future__ import annotations

import math
import os
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import IO

from acquire.store import csvw
from acquire.store.tables import TableSchema


def format_cell(value: object) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        return repr(value)  # shortest text that reads back to the same float
    text = str(value)
    if any(ch in text for ch in ',"\n'):
        return '"' + text.replace('"', '""') + '"'
    return text


class AppendTable:
    """One CSV file with a fixed header; rows are buffered and made durable by `commit()`."""

    def __init__(self, folder: Path, schema: TableSchema) -> None:
        self.path = folder / schema.file_name
        self.schema = schema
        fresh = not self.path.exists() or self.path.stat().st_size == 0
        self._file: IO[str] = open(self.path, "a", encoding="utf-8", newline="")  # noqa: SIM115
        if fresh:
            self._file.write(csvw.header(list(schema.columns)) + "\n")
            csvw.write_metadata(self.path, list(schema.columns), schema.description)
            self.commit()

    def append(self, row: Sequence[object]) -> None:
        self._file.write(",".join(map(format_cell, row)) + "\n")

    def extend(self, rows: Iterable[Sequence[object]]) -> None:
        self._file.writelines(",".join(map(format_cell, row)) + "\n" for row in rows)

    def write_lines(self, lines: Iterable[str]) -> None:
        """Rows already formatted by the caller, each ending in a newline."""
        self._file.writelines(lines)

    def commit(self, durable: bool = True) -> None:
        """Flush to the operating system (survives a crash or kill); fsync also survives a
        power cut."""
        self._file.flush()
        if durable:
            os.fsync(self._file.fileno())

    def close(self) -> None:
        if not self._file.closed:
            self.commit()
            self._file.close()


def atomic_write_text(path: Path, text: str, durable: bool = True) -> None:
    """Write via a temporary file and rename, so a reader never sees half a file."""
    temporary = path.with_name(path.name + ".tmp")
    with open(temporary, "w", encoding="utf-8") as handle:
        handle.write(text)
        handle.flush()
        if durable:
            os.fsync(handle.fileno())
    os.replace(temporary, path)
