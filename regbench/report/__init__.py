"""The self-contained HTML report of a session."""

from regbench.report.html import SECTIONS, render_report, report_html

__all__ = ["render_report", "report_html", "SECTIONS"]
