"""CSV on the Web (W3C CSVW) metadata for the tidy tables a run writes."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

from acquire.store.safe_files import atomic_write_text

# CSVW datatypes are XML Schema names (W3C, "Metadata Vocabulary for Tabular Data", sec. 5.11).
XSD_TYPES = {"integer", "double", "string", "dateTime", "boolean"}


@dataclass(frozen=True)
class Column:
    name: str
    datatype: str
    unit: str = ""
    title: str = ""

    def to_json(self) -> dict[str, object]:
        if self.datatype not in XSD_TYPES:
            raise ValueError(f"unknown CSVW datatype {self.datatype!r} for column {self.name}")
        entry: dict[str, object] = {
            "name": self.name,
            "titles": self.name,
            "datatype": self.datatype,
        }
        if self.title:
            entry["dc:description"] = self.title
        if self.unit:
            # CSVW has no unit property of its own; QUDT-style unit text in a common namespace.
            entry["schema:unitText"] = self.unit
        # Empty cells are "no value" (a loop the protocol does not use), never zero.
        entry["null"] = ""
        return entry


def metadata_document(csv_name: str, columns: list[Column], description: str) -> dict[str, object]:
    return {
        "@context": ["http://www.w3.org/ns/csvw", {"@language": "en"}],
        "url": csv_name,
        "dc:description": description,
        "tableSchema": {"columns": [column.to_json() for column in columns]},
    }


def write_metadata(csv_path: Path, columns: list[Column], description: str) -> Path:
    """Write `<csv>-metadata.json` beside `csv_path` (the CSVW default location)."""
    target = csv_path.with_name(csv_path.name + "-metadata.json")
    document = metadata_document(csv_path.name, columns, description)
    atomic_write_text(target, json.dumps(document, indent=2) + "\n")
    return target


def header(columns: list[Column]) -> str:
    return ",".join(column.name for column in columns)
