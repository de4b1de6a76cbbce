"""Session reports: one self-contained HTML file with inline SVG plots (matplotlib).

Import this package only when a report is made: it loads matplotlib.
"""

from livestep.reports.document import write_report
from livestep.reports.session_info import SessionInfo, read_session_info

__all__ = ["SessionInfo", "read_session_info", "write_report"]
