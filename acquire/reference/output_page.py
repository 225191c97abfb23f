"""docs/output.md: every column of every table a run writes, from each mode's TableSchemas (the
mode registry), the columns and quantity names of fits.csv, and the keys of run.json."""

from __future__ import annotations

import dataclasses

from acquire.analysis.fit_rows import FIT_COLUMNS
from acquire.analysis.fit_tables import QUANTITY_NOTES
from acquire.modes import all_modes
from acquire.reference import markdown
from acquire.reference.fields import section_docs
from acquire.store.csvw import Column
from acquire.store.run_record import RunRecord
from acquire.store.tables import TableSchema

INTRO = """
A run writes one folder (`flipsweep run ... --out DIR`). Every table is tidy CSV (one
observation per row) with a CSV on the Web (W3C CSVW) metadata file beside it,
`<table>.csv-metadata.json`, naming each column's datatype, unit and meaning; this page lists
the same. An empty cell is "no value" (a loop the protocol does not sweep, a quantity a pattern
cannot give), never zero. Units are SI, and the unit is in each column's name.

Besides the tables: `run.json` (below), `run.log` (the human log), `status.json` (the heartbeat
`flipsweep status` reads: state, points done and total, ETA, last point), `run.lock` (held by
the process running in the folder), `readings.partial.csv` (after a resume: rows of a point cut
short, kept aside), `figures/` and `report.html` (after `flipsweep report`).
"""


def _columns(columns: tuple[Column, ...] | list[Column]) -> str:
    rows = [(f"`{column.name}`", column.datatype, column.unit or "-", column.title)
            for column in columns]
    return markdown.table(("column", "datatype", "unit", "meaning"), rows)


def _table_section(schema: TableSchema, modes: list[str]) -> str:
    written = ", ".join(f"`{name}`" for name in modes)
    return "\n".join([f"### {schema.file_name}", "",
                      f"{schema.description[0].upper()}{schema.description[1:]}; "
                      f"written by mode {written}.", "", _columns(schema.columns), ""])


def _mode_tables() -> list[str]:
    # A table two modes share (the same file name and columns) is listed once.
    writers: dict[str, tuple[TableSchema, list[str]]] = {}
    for mode in all_modes():
        for schema in mode.tables():
            key = f"{schema.file_name}:{schema.names}"
            writers.setdefault(key, (schema, []))[1].append(mode.name)
    return ["## Tables of a run",
            *(_table_section(schema, names) for schema, names in writers.values())]


def _fits_section() -> str:
    quantities = [(f"`{name}`", meaning) for name, meaning in QUANTITY_NOTES.items()]
    return "\n".join([
        "## fits.csv (after `flipsweep fit`)", "",
        "One row per fitted quantity and group. A key column is empty when the quantity is not "
        "tied to it (angle_deg for an angle fit, ...) or the protocol does not sweep that "
        "loop; a row whose note starts with WARNING needs a look.", "",
        _columns(tuple(FIT_COLUMNS)), "",
        "### Quantities (`quantity`)", "",
        markdown.table(("quantity", "meaning"), quantities), "",
    ])


def _run_json_section() -> str:
    top = section_docs(RunRecord, "")[0]
    top = dataclasses.replace(top, keys=tuple(
        dataclasses.replace(key, takes=key.takes.split(" (see")[0]) for key in top.keys))
    return "\n".join([
        "## run.json", "",
        "What the folder holds about its own making, written at the start and at every event "
        "(start, resume, end). `simulation` holds a simulated run's true sample parameters, "
        "the reference a rehearsal's results are judged against.", "",
        markdown.table(("key", "holds", "meaning"),
                       [(f"`{key.key}`", key.takes, key.meaning) for key in top.keys]), "",
    ])


def output_page() -> str:
    return markdown.page(
        "Output reference", "acquire/modes/*/__init__.py (TableSchemas), acquire/analysis/, "
        "acquire/store/run_record.py", INTRO,
        [*_mode_tables(), _fits_section(), _run_json_section()],
    )
