"""Decision stage output: quality-against-latency tables, recommendation, plots, listening page.

Public API: :func:`render_report`, :class:`ReportOptions`, :class:`ReportResult`.
"""
from __future__ import annotations

from .options import ReportOptions
from .render import ReportResult, render_report

__all__ = ["ReportOptions", "ReportResult", "render_report"]
