"""The `flipsweep` command line: argument parsing and exit codes only."""

from acquire.cli.main import main

__all__ = ["main"]
