"""Decision stage output: quality-against-latency tables, recommendation, plots, listening page.

Public API: :func:`render_report`, :class:`ReportOptions`, :class:`ReportResult`. They are loaded
on first use, so that the command line can build its parser without the statistics stack.
"""
from __future__ import annotations

import importlib
from typing import Any

_EXPORTS = {"ReportOptions": "options", "ReportResult": "render", "render_report": "render"}
__all__ = list(_EXPORTS)


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
