"""Errors a user can fix (InputError, exit 2) and run failures after the safe shutdown (exit 1).

InputError is defined with the drivers, the lowest layer, so that a rig entry's problem found
there and a protocol's problem found here are one type the command line reports the same way.
"""

from __future__ import annotations

from drivers.errors import InputError, KeyPath, format_key_path

__all__ = ["InputError", "KeyPath", "RunFailure", "format_key_path"]


class RunFailure(Exception):
    """An instrument or run failure after the safe shutdown; exit code 1."""
