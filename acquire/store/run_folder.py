"""The output folder of one run: its files, run.json, the status heartbeat and the log."""

from __future__ import annotations

import contextlib
import json
import logging
import os
import platform
import shutil
import socket
import sys
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path
from typing import Any

from acquire.errors import InputError
from acquire.store.file_lock import try_lock, unlock
from acquire.store.run_record import RunRecord, parse_run_record
from acquire.store.safe_files import (
    NO_FOLLOW,
    atomic_write_text,
    open_for_append,
    open_for_update,
)
from acquire.version import __version__

# Kept free on the run's disk while it runs and given back at its end, so that a run stopped
# by a full disk can still write its status, its history and its log.
RESERVE_FILE = ".flipsweep-reserve"
RESERVE_BYTES = 1 << 20
LIBRARIES = ("numpy", "pandas", "pint", "pydantic", "pyvisa", "pyvisa-sim", "pyvisa-py", "scipy")


def software_versions() -> dict[str, str]:
    versions = {"flipsweep": __version__, "python": sys.version.split()[0]}
    for name in LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


@dataclass(frozen=True)
class RunFolder:
    path: Path

    @property
    def readings(self) -> Path:
        return self.path / "readings.csv"

    @property
    def points(self) -> Path:
        return self.path / "points.csv"

    @property
    def run_json(self) -> Path:
        return self.path / "run.json"

    @property
    def status_json(self) -> Path:
        return self.path / "status.json"

    @property
    def log(self) -> Path:
        return self.path / "run.log"

    def prepare_new(self, needed_bytes: int) -> None:
        """Refuse before any instrument is touched if the folder is unusable."""
        if self.path.exists() and not self.path.is_dir():
            raise InputError("is a file, not a folder", file=str(self.path), key=("--out",),
                             fix="give a new folder for the run")
        # A lock left by a process killed before it wrote run.json holds no data.
        if self.path.exists() and any(entry.name not in ("run.lock", RESERVE_FILE)
                                      for entry in self.path.iterdir()):
            raise InputError(
                "the output folder is not empty", file=str(self.path), key=("--out",),
                fix="give a new folder, or use 'flipsweep resume' to continue a run there",
            )
        try:
            self.path.mkdir(parents=True, exist_ok=True)
        except OSError as error:
            raise InputError(
                f"the output folder cannot be written ({error.strerror})", file=str(self.path),
                key=("--out",), fix="choose a folder you can write to",
            ) from None
        self.check_writable(("--out",))
        self.check_space(needed_bytes)

    def check_writable(self, key: tuple[str, ...] = ()) -> None:
        """Refuse (exit 2) a folder no file can be created in: read-only, or not ours."""
        try:
            descriptor, probe = tempfile.mkstemp(dir=self.path, prefix=".write-test.")
            os.close(descriptor)
            os.unlink(probe)
        except OSError as error:
            raise InputError(
                f"the run folder cannot be written ({error.strerror})", file=str(self.path),
                key=key, fix="make the folder writable (or copy it to a disk that is)",
            ) from None

    def check_space(self, needed_bytes: int) -> None:
        free = shutil.disk_usage(self.path).free
        # Twice the estimate: reduction, fits and figures write beside the readings.
        if free < 2 * needed_bytes:
            raise InputError(
                f"only {free / 1e6:.0f} MB free, the run needs about "
                f"{2 * needed_bytes / 1e6:.0f} MB",
                file=str(self.path), key=("--out",), fix="free space or choose another disk",
            )

    def require_folder(self) -> None:
        """A clear error (exit 2) for a path that is not a folder at all."""
        if not self.path.exists():
            raise InputError("no such folder", file=str(self.path),
                             fix="give the folder a run was started in (its --out)")
        if not self.path.is_dir():
            raise InputError("is a file, not a run folder", file=str(self.path),
                             fix="give the folder a run was started in (its --out)")

    def read_run_json(self) -> RunRecord:
        self.require_folder()
        rebuild = (f"rebuild it with 'flipsweep resume {self.path} --rebuild-record "
                   "--protocol PROTOCOL --rig RIG' (the files the run was started with)")
        try:
            data = self.run_json.read_bytes()
        except FileNotFoundError:
            raise InputError(
                "has no run.json, so it is not a flipsweep run folder", file=str(self.path),
                fix="give the folder a run was started in; if run.json was lost, " + rebuild,
            ) from None
        except OSError as error:
            raise InputError(f"run.json cannot be read ({error.strerror})",
                             file=str(self.run_json), fix="check the file's permissions") from None
        try:
            if b"\0" in data:
                raise ValueError("it holds NUL bytes, as a power cut can leave")
            try:
                parsed = json.loads(data.decode("utf-8"))
            except UnicodeDecodeError:
                raise ValueError("it is not UTF-8 text") from None
            except json.JSONDecodeError as error:
                raise ValueError(f"{error.msg} at line {error.lineno}") from None
        except ValueError as error:
            raise InputError(f"run.json is damaged ({error})", file=str(self.run_json),
                             fix=rebuild) from None
        try:
            return parse_run_record(parsed)
        except ValueError as error:
            raise InputError(f"run.json is not a run record: {error}",
                             file=str(self.run_json), fix=rebuild) from None

    def write_run_json(self, record: RunRecord) -> None:
        atomic_write_text(self.run_json, json.dumps(record.to_json(), indent=2) + "\n")

    def write_status(self, status: dict[str, Any]) -> None:
        status = {**status, "updated_utc": utc_now(), "pid": os.getpid(),
                  "host": socket.gethostname()}
        # A heartbeat needs atomicity, not durability: after a power cut it is stale anyway.
        atomic_write_text(self.status_json, json.dumps(status, indent=2) + "\n", durable=False)

    def check_own_files(self) -> None:
        """Refuse a run folder where one of the run's files is a symbolic link (exit 2)."""
        for entry in self.path.iterdir():
            if entry.is_symlink() and (entry.suffix in (".csv", ".json", ".log", ".lock")
                                       or entry.name.endswith("-metadata.json")):
                raise InputError(
                    f"{entry.name} is a symbolic link; a run's files must be the files "
                    "themselves", file=str(entry),
                    fix="replace the link by the file it points to (or remove it)")

    def reserve_space(self) -> None:
        path = self.path / RESERVE_FILE
        descriptor = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | NO_FOLLOW, 0o644)
        with open(descriptor, "wb") as handle:
            handle.write(bytes(RESERVE_BYTES))
            handle.flush()
            os.fsync(handle.fileno())

    def release_space(self) -> None:
        with contextlib.suppress(OSError):
            (self.path / RESERVE_FILE).unlink()

    @property
    def lock_file(self) -> Path:
        return self.path / "run.lock"

    @contextmanager
    def locked(self) -> Iterator[None]:
        """Hold the folder for one process: a second `resume` while the run still goes would
        drive the same instruments twice and interleave the files. The kernel drops the lock
        when the process ends, however it ends (kill -9 included)."""
        try:
            handle = open_for_update(self.lock_file)
        except OSError as error:
            raise InputError(f"the run's lock file cannot be opened ({error.strerror})",
                             file=str(self.lock_file),
                             fix="make the folder writable; remove run.lock if it is a link"
                             ) from None
        if not try_lock(handle):
            handle.seek(0)
            holder = handle.read().strip() or "another process"
            handle.close()
            raise InputError(
                f"a run is still going in this folder (pid {holder})", file=str(self.path),
                fix="let it finish, or stop it first (Ctrl-C in its terminal, or kill that pid)",
            ) from None
        try:
            handle.seek(0)
            handle.truncate()
            handle.write(str(os.getpid()))
            handle.flush()
            yield
        finally:
            unlock(handle)
            handle.close()

    def is_running(self) -> bool:
        """True when a live process holds the folder's lock (on this machine)."""
        if not self.lock_file.is_file() or self.lock_file.is_symlink():
            return False
        with open(self.lock_file, encoding="utf-8") as handle:
            if not try_lock(handle):
                return True
            unlock(handle)
            return False

    def read_status(self) -> dict[str, Any] | None:
        try:
            status = json.loads(self.status_json.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError):
            return None
        return status if isinstance(status, dict) else None


def host_description(operator: str | None = None) -> dict[str, str]:
    """The computer that ran the run and, as `user`, who ran it: `operator`, or the login name
    when it is None; an empty operator records no one (`flipsweep run --operator ''`)."""
    described = {"host": socket.gethostname(), "platform": platform.platform()}
    user = os.environ.get("USER", "") if operator is None else operator
    if user:
        described["user"] = user
    return described


class RunLogHandler(logging.StreamHandler):
    """run.log; a line that cannot be written (disk full) is dropped without a traceback on
    the terminal: the run's own failure handling says what happened, once."""

    failed = False

    def handleError(self, record: logging.LogRecord) -> None:
        self.failed = True


def attach_log(folder: RunFolder) -> logging.Handler:
    handler = RunLogHandler(open_for_append(folder.log))
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    logger = logging.getLogger("flipsweep")
    logger.setLevel(logging.INFO)
    logger.addHandler(handler)
    return handler


def detach_log(handler: logging.Handler) -> None:
    logging.getLogger("flipsweep").removeHandler(handler)
    handler.close()
    stream = getattr(handler, "stream", None)
    if stream is not None:
        with contextlib.suppress(OSError):  # a full disk: what is lost is lost
            stream.close()
