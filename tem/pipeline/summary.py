"""The closing summary of ``tem run``: one row per station, readable at 80 columns."""
from __future__ import annotations

import math

from .runner import STATION_STAGES

__all__ = ["summary_table"]


def _finite(v):
    return isinstance(v, (int, float)) and math.isfinite(v)


def summary_table(state, title=None):
    """A rich Table: per station the status of each station stage, usable gates, chi2, DOI."""
    from rich.table import Table

    t = Table(title=title or f"tem run: {state.get('survey', {}).get('name', '')}",
              header_style="bold")
    t.add_column("station")
    for stage in STATION_STAGES:
        t.add_column(stage)
    for col in ("usable gates", "chi2", "DOI (m)", "QC / message"):
        t.add_column(col, justify="right" if col != "QC / message" else "left")
    for sid, s in state.get("stations", {}).items():
        cells = []
        for stage in STATION_STAGES:
            rec = state["stages"].get(stage, {}).get("stations", {}).get(sid)
            if rec is None:
                cells.append("[dim]-[/]")
            else:
                cells.append("[green]ok[/]" if rec["status"] == "ok" else "[red]FAILED[/]")
        gates = f"{s['usable_gates']}/{s.get('gates', '?')}" if "usable_gates" in s else "-"
        chi2 = f"{s['chi2']:.2f}" if _finite(s.get("chi2")) else "-"
        doi = f"{s['doi']:.0f}" if _finite(s.get("doi")) else "-"
        note = s.get("message") or ("" if s.get("qc", "ok") == "ok" else f"QC {s['qc']}")
        if not note and s.get("invert_message"):
            note = s["invert_message"]
        t.add_row(sid, *cells, gates, chi2, doi, note)
    return t
