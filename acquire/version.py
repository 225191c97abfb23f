"""flipsweep's version, in one place (pyproject.toml carries the same)."""

__version__ = "0.2.0"
