"""run.json as a typed record: what a run folder holds about its own making.

Written at the start of a run and updated at every event (start, resume, end); read back by
`resume`, `reduce`, `fit`, `report` and `status` through this one model, with its version
checked, so a damaged or foreign file is a clear error rather than a KeyError later.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError

RUN_RECORD_VERSION = 2
READABLE_VERSIONS = (1, 2)  # version 1 had the same keys


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


class Record(BaseModel):
    model_config = ConfigDict(extra="forbid")


class FileRecord(Record):
    path: str
    sha256: str
    text: str | None = None  # the file given only; a base file is recorded by its hash


class InputRecord(Record):
    """A protocol or rig: the file given (verbatim, with its SHA-256), every base file it was
    merged from (SHA-256 only: a base may hold anything, and stays where it is), and the
    merged, unit-normalised result."""

    path: str
    files: list[FileRecord]
    normalised: dict[str, Any]

    def changed_files(self) -> list[str]:
        """Files that are missing or whose text no longer has the recorded SHA-256."""
        changed = []
        for entry in self.files:
            try:
                text = Path(entry.path).read_text(encoding="utf-8")
            except OSError:
                changed.append(f"{entry.path} (missing)")
                continue
            if sha256_text(text) != entry.sha256:
                changed.append(entry.path)
        return changed


class OptionsRecord(Record):
    simulate: bool = False
    seed: int | None = None
    realtime: bool = False
    notify_in_rehearsal: bool = False


class EstimateRecord(Record):
    points: int
    readings: int
    duration_s: float
    breakdown_s: dict[str, float]


class HistoryEvent(BaseModel):
    """start, resume, done, interrupted, failed: with its UTC time and what goes with it."""

    model_config = ConfigDict(extra="allow")

    event: str
    utc: str
    reason: str | None = None
    run_clock_s: float | None = None
    from_point: int | None = None


class RunRecord(Record):
    flipsweep_run: int = Field(default=RUN_RECORD_VERSION, description="version of this record")
    protocol: InputRecord = Field(description="the protocol: path, every file merged (verbatim, "
                                  "SHA-256) and the normalised result (as `check --show`)")
    rig: InputRecord = Field(description="the rig, recorded the same way")
    options: OptionsRecord = Field(default=OptionsRecord(),
                                   description="simulate, seed and realtime, as the run was asked")
    estimate: EstimateRecord = Field(description="points, readings and duration estimated at start")
    software: dict[str, str] = Field(default_factory=dict,
                                     description="versions of flipsweep, Python and libraries")
    host: dict[str, str] = Field(
        default_factory=dict, description="host name and platform of the computer that ran it, "
        "and `user`: the operator (the login name, or `run --operator NAME`; `--operator ''` "
        "records none)",
    )
    history: list[HistoryEvent] = Field(default_factory=list,
                                        description="start, resume, done, interrupted, failed: "
                                        "each with its UTC time (and reason, run clock, point)")
    instruments: dict[str, str] = Field(default_factory=dict, description="*IDN? replies")
    simulation: dict[str, Any] | None = Field(
        default=None, description="a simulated run's true sample parameters and world settings"
    )

    @property
    def mode(self) -> str:
        return str(self.protocol.normalised.get("mode", "dc_reversal"))

    def resumes(self) -> int:
        return sum(1 for entry in self.history if entry.event == "resume")

    def last_run_clock_s(self) -> float:
        return max((entry.run_clock_s or 0.0 for entry in self.history), default=0.0)

    def to_json(self) -> dict[str, Any]:
        return self.model_dump(mode="json", exclude_none=True)


def parse_run_record(data: object) -> RunRecord:
    """RunRecord from run.json's parsed JSON; ValueError saying what is wrong."""
    if not isinstance(data, dict):
        raise ValueError("it is not a JSON object")
    version = data.get("flipsweep_run")
    if version not in READABLE_VERSIONS:
        raise ValueError(f"version {version!r} is not one this flipsweep reads "
                         f"({', '.join(map(str, READABLE_VERSIONS))})")
    try:
        return RunRecord.model_validate(data)
    except ValidationError as error:
        first = error.errors()[0]
        where = ".".join(str(part) for part in first["loc"])
        raise ValueError(f"{where}: {first['msg']}") from None
