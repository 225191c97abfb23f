"""Writing into a run folder safely: no write follows a symbolic link planted there.

Appends open the file itself (O_NOFOLLOW), and every rewrite goes through a fresh temporary
file in the same folder, created exclusively (mkstemp: O_CREAT | O_EXCL), then renamed over
the target, so a reader never sees half a file and a link at the target is replaced, not
followed.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import IO

NO_FOLLOW = getattr(os, "O_NOFOLLOW", 0)  # POSIX; 0 where the platform has no such flag


def _process_umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


# mkstemp makes files readable by their owner only; a run's files keep the usual permissions.
FILE_MODE = 0o666 & ~_process_umask()


def open_for_append(path: Path) -> IO[str]:
    """`path` opened for appending text, never through a symbolic link (ELOOP if it is one)."""
    descriptor = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT | NO_FOLLOW, 0o644)
    return open(descriptor, "a", encoding="utf-8", newline="")


def open_for_update(path: Path) -> IO[str]:
    """`path` opened for reading and writing (created if missing), never through a link."""
    descriptor = os.open(path, os.O_RDWR | os.O_CREAT | NO_FOLLOW, 0o644)
    return open(descriptor, "r+", encoding="utf-8")


def atomic_write_text(path: Path, text: str, durable: bool = True) -> None:
    """Write via a fresh temporary file in the same folder and rename it over `path`, so a
    reader never sees half a file. The temporary file is created exclusively (never an
    existing file or a link), and the rename replaces a link at `path` rather than its target.
    """
    descriptor, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.",
                                             suffix=".tmp")
    try:
        if hasattr(os, "fchmod"):
            os.fchmod(descriptor, FILE_MODE)
        with open(descriptor, "w", encoding="utf-8") as handle:
            handle.write(text)
            handle.flush()
            if durable:
                os.fsync(handle.fileno())
        os.replace(temporary, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(temporary)
        raise
