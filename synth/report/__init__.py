"""Figures and the run report (one self-contained HTML page per run, docs/report.md)."""

from .html import report_html, write_report
from .run_analysis import plan_config, run_analysis

__all__ = ["run_analysis", "plan_config", "write_report", "report_html"]
