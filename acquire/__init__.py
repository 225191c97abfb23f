"""flipsweep: unattended current-reversal magnetotransport sweeps."""

__version__ = "0.1.0"
