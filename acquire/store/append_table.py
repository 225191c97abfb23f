"""Append-only CSV tables: rows reach the operating system within seconds of being taken and
are fsynced at every point, so a crash, a kill or a power cut loses nothing worth keeping."""

from __future__ import annotations

import contextlib
import math
import os
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import IO

from acquire.store import csvw
from acquire.store.safe_files import atomic_write_text, open_for_append
from acquire.store.tables import TableSchema

__all__ = ["AppendTable", "atomic_write_text", "format_cell"]

# Rows inside a long point reach the operating system at least this often (run clock), so a
# kill in the middle of a point loses at most this much of it.
FLUSH_INTERVAL_S = 2.0


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


def _named(error: OSError, path: Path) -> OSError:
    """The same error, naming the file (a failed write() does not say which)."""
    if error.filename:
        return error
    return OSError(error.errno, error.strerror or str(error), str(path))


class AppendTable:
    """One CSV file with a fixed header; rows are buffered and made durable by `commit()`.

    A write that fails (a full disk, a folder gone read-only) raises OSError naming the file.
    """

    def __init__(self, folder: Path, schema: TableSchema) -> None:
        self.path = folder / schema.file_name
        self.schema = schema
        fresh = not self.path.exists() or self.path.stat().st_size == 0
        self._file: IO[str] = open_for_append(self.path)
        self._flushed_at_s = -math.inf
        if fresh:
            self._file.write(csvw.header(list(schema.columns)) + "\n")
            csvw.write_metadata(self.path, list(schema.columns), schema.description)
            self.commit()

    def append(self, row: Sequence[object]) -> None:
        self.write_lines([",".join(map(format_cell, row)) + "\n"])

    def extend(self, rows: Iterable[Sequence[object]]) -> None:
        self.write_lines(",".join(map(format_cell, row)) + "\n" for row in rows)

    def write_lines(self, lines: Iterable[str]) -> None:
        """Rows already formatted by the caller, each ending in a newline."""
        try:
            self._file.writelines(lines)
        except OSError as error:
            raise _named(error, self.path) from error

    def flush_if_due(self, run_clock_s: float) -> None:
        """Hand the rows to the operating system if FLUSH_INTERVAL_S of run clock has passed
        since the last time (a kill then loses nothing; fsync waits for the point's end)."""
        if run_clock_s - self._flushed_at_s >= FLUSH_INTERVAL_S:
            self._flushed_at_s = run_clock_s
            try:
                self._file.flush()
            except OSError as error:
                raise _named(error, self.path) from error

    def commit(self, durable: bool = True) -> None:
        """Flush to the operating system (survives a crash or kill); fsync also survives a
        power cut."""
        try:
            self._file.flush()
            if durable:
                os.fsync(self._file.fileno())
        except OSError as error:
            raise _named(error, self.path) from error

    def close(self) -> None:
        """Commit and close; the file is closed even if the commit fails (disk full)."""
        if self._file.closed:
            return
        try:
            self.commit()
        finally:
            with contextlib.suppress(OSError):  # what could not be written is lost either way
                self._file.close()
