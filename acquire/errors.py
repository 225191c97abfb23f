"""Errors a user can fix: one line naming the file, the key, what is wrong and the fix."""

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
    """Invalid or unsafe input. The CLI prints `str(error)` alone and exits with code 2."""

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
        self.key = tuple(key)
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


class RunFailure(Exception):
    """An instrument or run failure after the safe shutdown; exit code 1."""
