"""What the runner asks of every instrument, whatever its role. Each role's module in
drivers/roles/ extends this with its own methods; drivers implement those and nothing else.

A driver knows its command dialect and nothing about sweeps, waits or retries: those are the
runner's. Every method is one or a few transactions and returns promptly (no sleeping).
"""

from __future__ import annotations

from typing import Protocol


class Instrument(Protocol):
    name: str

    def identify(self) -> str: ...  # the *IDN? reply
    def reset(self) -> None: ...  # *RST, *CLS
    def errors(self) -> list[str]: ...  # drain the SCPI error queue; [] when "0,No error"
    def reconnect(self) -> None: ...  # close and reopen the VISA session
    def close(self) -> None: ...
