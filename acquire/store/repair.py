"""Making a run folder's tables whole again before a resume, without losing or doubling a row.

readings.csv is the primary record; points.csv is derived from it and is rebuilt. What the
repair finds and does:

- a cut last line (a power cut in the middle of a write): cut back to the last complete row;
- damage at the end (NUL bytes a power cut can leave, a line that is not a row) with no good
  row after it: cut back, the cut bytes kept in `readings.damaged.csv`;
- damage with good rows after it, or points in points.csv that readings.csv no longer holds
  (readings.csv deleted or truncated): refused with what to do, unless the operator asked to
  keep those aside (`--keep-points-aside`): the damaged part goes to `readings.damaged.csv`,
  the unbacked points' rows to `points.unbacked.csv`, and those points are measured again;
- the rows of a point cut short (its latest attempt incomplete) go to readings.partial.csv.

Nothing is ever deleted: every row taken out of a table is kept in a file beside it.
"""

from __future__ import annotations

import csv
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from acquire.errors import InputError
from acquire.store import csvw
from acquire.store.safe_files import atomic_write_text, open_for_append
from acquire.store.tables import TableSchema

PARTIAL_READINGS = "readings.partial.csv"
DAMAGED_SUFFIX = ".damaged.csv"
UNBACKED_POINTS = "points.unbacked.csv"


@dataclass
class RepairNotes:
    """What the repair did, for the log and the closing line."""

    notes: list[str] = field(default_factory=list)

    def add(self, text: str) -> None:
        self.notes.append(text)


def _row_ok(line: str, columns: int) -> bool:
    """A complete row of `columns` cells whose first cell is a point number."""
    if "\0" in line or not line.endswith("\n"):
        return False
    cells = line.count(",") + 1
    if cells != columns or '"' in line:
        try:
            cells = len(next(csv.reader([line])))
        except (csv.Error, StopIteration):
            return False
    first = line.split(",", 1)[0]
    return cells == columns and first.isdigit()


def _keep_aside(folder: Path, name: str, data: str) -> Path:
    target = folder / name
    with open_for_append(target) as handle:
        handle.write(data)
    return target


@dataclass(frozen=True)
class TableText:
    header: str
    rows: list[str]  # complete, well-formed rows (each ending in a newline)
    damaged_at: int | None  # 1-based line number of the first damaged line
    damaged_tail: str  # the text from that line on
    good_after_damage: bool  # a well-formed row follows the damage


def read_table_text(path: Path, schema: TableSchema) -> TableText | None:
    """The table's lines, checked; None if the file is missing or empty."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return None
    except OSError as error:
        raise InputError(f"cannot read {path.name} ({error.strerror})", file=str(path),
                         fix="check the file's permissions") from None
    text = data.decode("utf-8", errors="replace")
    if not text.strip("\0 \n"):
        return None
    lines = text.splitlines(keepends=True)
    expected = csvw.header(list(schema.columns)) + "\n"
    if lines[0] != expected:
        return TableText(expected, [], 1, text, any(_row_ok(line, len(schema.names))
                                                    for line in lines[1:]))
    columns = len(schema.names)
    for index, line in enumerate(lines[1:], start=1):
        if not _row_ok(line, columns):
            rest = lines[index + 1:]
            return TableText(lines[0], lines[1:index], index + 1, "".join(lines[index:]),
                             any(_row_ok(later, columns) for later in rest))
    return TableText(lines[0], lines[1:], None, "", False)


def cut_damage(folder: Path, path: Path, table: TableText, keep_aside: bool,
               notes: RepairNotes, what_to_do: Callable[[str], str]) -> None:
    """Cut the table back to its good rows, keeping the rest; refuse if good rows would go."""
    if table.damaged_at is None:
        return
    tail = table.damaged_tail
    # Half a last line, and nothing else: a write cut short, nothing worth keeping.
    only_a_cut_line = tail.count("\n") == 0 and "\0" not in tail
    if table.good_after_damage and not keep_aside:
        raise InputError(
            f"{path.name} is damaged at line {table.damaged_at} and has good rows after it",
            file=str(path), fix=what_to_do(path.name))
    kept = tail.replace("\0", "")
    if not only_a_cut_line and kept.strip():
        aside = _keep_aside(folder, path.stem + DAMAGED_SUFFIX, kept)
        notes.add(f"{path.name}: damaged from line {table.damaged_at} on; that part is kept "
                  f"in {aside.name}")
    elif not only_a_cut_line:
        notes.add(f"{path.name}: NUL bytes from line {table.damaged_at} on (a power cut) cut")
    atomic_write_text(path, table.header + "".join(table.rows))


def split_complete_points(
    readings: pd.DataFrame, rows_per_point: int | None, stored: set[int] | None = None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(rows of done points, rows of partial points). Done: every row of the latest attempt.

    `rows_per_point` None: points differ in length (precision-targeted cycles), so a count
    cannot tell. Points are measured in order, so every point before the last one in the file
    is done; the last one is done when the points table (`stored`) holds it, for its rows are
    written after its readings."""
    if readings.empty:
        return readings, readings
    if rows_per_point is None:
        numbers = set(readings["point"].unique())
        last = max(numbers)
        done = numbers - ({last} - (stored or set()))
        keep = readings["point"].isin(done)
        return readings[keep], readings[~keep]
    latest = readings.groupby("point")["attempt"].transform("max")
    counts = readings[readings["attempt"] == latest].groupby("point").size()
    done = set(counts[counts == rows_per_point].index)
    keep = readings["point"].isin(done)
    return readings[keep], readings[~keep]


def point_numbers(rows: list[str]) -> set[int]:
    return {int(row.split(",", 1)[0]) for row in rows}


@dataclass(frozen=True)
class Repaired:
    done: pd.DataFrame  # the readings of complete points
    start_point: int  # the first point still to measure
    notes: list[str]


def repair_tables(folder: Path, readings_schema: TableSchema, points_schema: TableSchema,
                  rows_per_point: int | None, keep_aside: bool,
                  what_to_do: Callable[[str], str]) -> Repaired:
    """Readings and points tables made consistent; the rows of complete points."""
    notes = RepairNotes()
    readings_path = folder / readings_schema.file_name
    points_path = folder / points_schema.file_name
    readings_text = read_table_text(readings_path, readings_schema)
    if readings_text is not None:
        cut_damage(folder, readings_path, readings_text, keep_aside, notes, what_to_do)
    points_text = read_table_text(points_path, points_schema)
    if points_text is not None and points_text.damaged_at is not None:
        # Derived data: its good rows tell which points it held; it is rebuilt below.
        kept = points_text.damaged_tail.replace("\0", "")
        if kept.strip() and "\n" in kept:
            aside = _keep_aside(folder, points_path.stem + DAMAGED_SUFFIX, kept)
            notes.add(f"{points_path.name}: damaged from line {points_text.damaged_at}; kept "
                      f"in {aside.name}")
    readings = (readings_schema.read(readings_path)
                if readings_text is not None and (readings_text.rows or readings_text.damaged_at)
                else pd.DataFrame(columns=list(readings_schema.names)))
    held = point_numbers(points_text.rows) if points_text is not None else set()
    done, partial = split_complete_points(readings, rows_per_point, held)
    if not partial.empty:
        aside_path = folder / PARTIAL_READINGS
        partial.to_csv(aside_path, mode="a", header=not aside_path.exists(), index=False)
        lines = readings_path.read_text(encoding="utf-8").splitlines(keepends=True)
        rest = (line for line, keep in zip(lines[1:], ~readings.index.isin(partial.index))
                if keep)
        atomic_write_text(readings_path, lines[0] + "".join(rest))
        notes.add(f"the rows of point(s) {_numbers(set(partial['point']))} cut short are kept "
                  f"in {PARTIAL_READINGS}; measured again")
    done_points = {int(number) for number in done["point"].unique()} if not done.empty else set()
    unbacked = held - done_points
    if unbacked:
        if not keep_aside:
            raise InputError(
                f"points.csv holds {len(unbacked)} point(s) ({_numbers(unbacked)}) whose readings "
                f"{readings_schema.file_name} no longer has (deleted, truncated or damaged)",
                file=str(points_path), fix=what_to_do(readings_schema.file_name))
        assert points_text is not None
        aside = _keep_aside(folder, UNBACKED_POINTS, "".join(
            row for row in points_text.rows if int(row.split(",", 1)[0]) in unbacked))
        notes.add(f"{len(unbacked)} point(s) without readings kept in {aside.name}; "
                  "measured again")
    if readings_text is None or not (folder / (readings_schema.file_name + "-metadata.json")
                                     ).exists():
        csvw.write_metadata(readings_path, list(readings_schema.columns),
                            readings_schema.description)
    start = _first_missing(done_points)
    return Repaired(done, start, notes.notes)


def _first_missing(done: set[int]) -> int:
    """Points are measured in order: the first number not done (gaps come from a skip)."""
    return max(done) + 1 if done else 0


def _numbers(numbers: set[int]) -> str:
    ordered = sorted(numbers)
    shown = ", ".join(map(str, ordered[:5]))
    return shown + (f", ... {ordered[-1]}" if len(ordered) > 5 else "")
