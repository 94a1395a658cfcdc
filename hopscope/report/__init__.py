"""The HTML report: a self-contained page (figures embedded) built from a fit, its tracks and its rig."""

from .build import CAUTIONS, ReportInputs, load_report_inputs, render_report, write_report

__all__ = ["CAUTIONS", "ReportInputs", "load_report_inputs", "render_report", "write_report"]
