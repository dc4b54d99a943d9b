"""Settings of the report stage: one table, the source of ReportSettings, ``tem report`` options
and the ``[processing.report]`` keys."""
from __future__ import annotations

from ..settings import Setting, SettingsTable

__all__ = ["REPORT", "ReportSettings"]

REPORT = SettingsTable("report", [
    Setting("title", None, "text", help="report title (unset: the survey name)"),
    Setting("chi2_limit", 2.0, "float", minimum=0, exclusive=True, maximum=1e6,
            help="chi-square per datum above which a station's fit is marked 'check fit', for a "
            "models file without verdicts only (an older file; a file with verdicts shows "
            "them and ignores this)",
            source="common practice, no source"),
    Setting("embed", False, "bool", help="write the figures into the page instead of linking them"),
], "ReportSettings", doc="Report parameters.")

ReportSettings = REPORT.cls
