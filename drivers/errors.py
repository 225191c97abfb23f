"""Errors the drivers raise: bad input in a rig entry, and what instruments report or refuse.

InputError is the one error type a user can fix by editing a file: one line naming the file,
the key, what is wrong and the fix (the command line prints it and exits 2). acquire locates a
driver's InputError in the rig file (file and line) before showing it.
"""

from __future__ import annotations

from collections.abc import Sequence

KeyPath = tuple[str | int, ...]


def format_key_path(path: Sequence[str | int]) -> str:
    text = ""
    for part in path:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            text += ("." if text else "") + part
    return text or "(top level)"


class InputError(Exception):
    """Invalid or unsafe input. The CLI prints `one_line()` alone and exits with code 2."""

    def __init__(
        self,
        problem: str,
        *,
        file: str | None = None,
        key: Sequence[str | int] = (),
        line: int | None = None,
        fix: str = "",
    ) -> None:
        self.problem = problem
        self.file = file
        self.key: KeyPath = tuple(key)
        self.line = line
        self.fix = fix
        super().__init__(self.one_line())

    def one_line(self) -> str:
        where = self.file or "input"
        if self.line is not None:
            where += f":{self.line}"
        # A located error about the document as a whole still names its key path: the top level.
        key = f" {format_key_path(self.key)}:" if self.key or self.line is not None else ""
        fix = f" -- fix: {self.fix}" if self.fix else ""
        return f"{where}:{key} {self.problem}{fix}".replace("\n", " ")

    def located(self, file: str, line: int | None) -> InputError:
        return InputError(self.problem, file=file, key=self.key, line=line, fix=self.fix)


class InstrumentError(Exception):
    """The instrument reported a problem (SCPI error queue) or answered nonsense."""

    def __init__(self, instrument: str, command: str, message: str) -> None:
        self.instrument = instrument
        self.command = command
        self.message = message
        super().__init__(f"{instrument}: {message} (after {command!r})")


class LimitError(InstrumentError):
    """A command refused before it was sent: its value is past a limit. Never retried."""


class CommunicationError(Exception):
    """A transient transport fault (VISA timeout, I/O error, dropped connection)."""

    def __init__(self, instrument: str, command: str, cause: str) -> None:
        self.instrument = instrument
        self.command = command
        self.cause = cause
        super().__init__(f"{instrument}: {cause} (during {command!r})")
