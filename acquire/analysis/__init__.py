"""The morning analysis of a run folder: fits (fits.csv), figures and the report page."""

from acquire.analysis.run_analysis import fit_run, report_run

__all__ = ["fit_run", "report_run"]
