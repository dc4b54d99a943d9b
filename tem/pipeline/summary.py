"""The closing summary of ``tem run``: one row per station, readable at 80 columns."""
from __future__ import annotations

import math

from ..io.models import verdict_reasons
from ..qc.verdict import whole_minutes
from .runner import STATION_STAGES

__all__ = ["summary_table"]

_VERDICT_COLOUR = {"good": "green", "check": "yellow", "reoccupy": "bold red",
                   "fitted": "green", "misfit": "bold red", "stalled": "yellow",
                   "parameter-at-bound": "yellow", "degenerate-layer": "yellow"}
#: Model verdicts never shown as "ok" in the stages column (docs/inversion.md,
#: "Verdicts"): misfit fails the station; stalled is a warning, but not an ok.
_FAILURES = ("misfit", "stalled")


def _finite(v):
    return isinstance(v, (int, float)) and math.isfinite(v)


def _stages_cell(state, sid):
    ran = [(stage, state["stages"][stage]["stations"].get(sid))
           for stage in STATION_STAGES if stage in state["stages"]]
    ran = [(stage, rec) for stage, rec in ran if rec is not None]
    failed = [stage for stage, rec in ran if rec["status"] != "ok"]
    if failed:
        return f"[red]failed {failed[0]}[/]"
    summary = state.get("stations", {}).get(sid, {})
    verdict = summary.get("verdict")
    if ran and verdict in _FAILURES:       # never "ok" for a model that does not fit
        return f"[{_VERDICT_COLOUR[verdict]}]{verdict}[/] to {ran[-1][0]}"
    if ran and summary.get("qc_verdict") == "reoccupy":   # nor for a recording that failed QC
        return f"[bold red]QC failed[/] to {ran[-1][0]}"
    return f"[green]ok[/] to {ran[-1][0]}" if ran else "[dim]-[/]"


def summary_table(state, title=None):
    """A rich Table per station: stages passed, usable gates, evening verdict, the verdict on
    the chosen model and its final chi2, DOI, notes.

    Numbers are never cut (columns do not wrap); only the note column folds.
    """
    from rich import box
    from rich.table import Table

    t = Table(title=title or f"tem run: {state.get('survey', {}).get('name', '')}",
              header_style="bold", box=box.SIMPLE_HEAD, pad_edge=False, padding=(0, 1),
              collapse_padding=True)
    for col, just in (("station", "left"), ("stages", "left"), ("gates", "right"),
                      ("QC", "left"), ("min", "right"), ("fit", "left"), ("chi2", "right"),
                      ("DOI m", "right")):
        t.add_column(col, justify=just, no_wrap=True)
    t.add_column("notes", overflow="fold", ratio=1)
    for sid, s in state.get("stations", {}).items():
        gates = f"{s['usable_gates']}/{s.get('gates', '?')}" if "usable_gates" in s else "-"
        verdict = s.get("qc_verdict", "")
        qc = f"[{_VERDICT_COLOUR.get(verdict, 'white')}]{verdict}[/]" if verdict else "-"
        minutes = s.get("extra_minutes")
        minutes = whole_minutes(minutes) if _finite(minutes) and minutes > 0 else ""
        chi2 = f"{s['chi2']:.2f}" if _finite(s.get("chi2")) else "-"
        doi = f"{s['doi']:.0f}" if _finite(s.get("doi")) else "-"
        fit = s.get("verdict", "")
        fit_cell = f"[{_VERDICT_COLOUR.get(fit, 'white')}]{fit}[/]" if fit else "-"
        reasons = verdict_reasons(s.get("verdict_text", "")) if fit and fit != "fitted" else ""
        # an unconverged posterior interval is a warning on the intervals, not on the fit
        # (docs/inversion.md, "Interval verdict"): said in the notes, the fit column unchanged
        iv = s.get("interval_verdict")
        interval = (f"[{'red' if iv == 'unusable' else 'yellow'}]"
                    f"{s.get('interval_text', 'intervals ' + iv)}[/]"
                    if iv in ("unconverged", "unusable") else "")
        notes = [n for n in (s.get("message"), s.get("qc_reasons"), reasons, interval) if n]
        t.add_row(sid, _stages_cell(state, sid), gates, qc, minutes, fit_cell, chi2, doi,
                  "; ".join(notes))
    return t
