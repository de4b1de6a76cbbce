"""Every rendering of results: tables, CSV rows, JSON, and the HTML session report.

The HTML report (``write_report``) loads matplotlib; it is imported on first use, so that
``livestep.reports.tables`` and the other renderings load no plotting library.
"""

from __future__ import annotations

from typing import Any

__all__ = ["SessionInfo", "read_session_info", "write_report"]


def __getattr__(name: str) -> Any:
    if name == "write_report":
        from livestep.reports.document import write_report

        return write_report
    if name in ("SessionInfo", "read_session_info"):
        from livestep.reports import session_info

        return getattr(session_info, name)
    raise AttributeError(f"module 'livestep.reports' has no attribute {name!r}")
