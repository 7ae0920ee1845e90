"""The study report: one self-contained HTML file with embedded PNG maps and charts."""

from .html import CAUTION, ReportData, render_report, write_report

__all__ = ["CAUTION", "ReportData", "render_report", "write_report"]
