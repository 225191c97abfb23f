"""Ctrl-C and SIGTERM handled by one function while a block runs, then the old handlers back."""

from __future__ import annotations

import signal
from collections.abc import Callable, Iterator
from contextlib import contextmanager

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


@contextmanager
def on_stop_signals(handler: Callable[[int, object], None]) -> Iterator[None]:
    previous = {sig: signal.signal(sig, handler) for sig in STOP_SIGNALS}
    try:
        yield
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)
