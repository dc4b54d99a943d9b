"""The report stage's one door: a project folder -> ``report.html``.

``tem report`` and ``tem run`` both call :func:`run`. It reads the models file,
the figures of every stage and, when present, the run record ``run.json``
(station failures, usable gates, QC notes).
"""
from __future__ import annotations

import json

from ..errors import input_error
from ..io.project import Project
from ..provenance import file_sha256
from ..runtime import StageContext, StageResult
from .settings import ReportSettings

__all__ = ["run"]

_CAPTIONS = {"raw": "first raw period against the stack",
             "decay": "gated decay (error bars; crosses below the noise)",
             "rhoa": "apparent resistivity",
             "fit": "data, model response, normalised residuals; model with DOI and uncertainty "
                    "band"}


def _run_record(project: Project):
    if not project.run_json.is_file():
        return {}
    try:
        state = json.loads(project.run_json.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        raise input_error("run.json", "unreadable", project.run_json) from None
    return state if isinstance(state, dict) else {}


def run(settings: ReportSettings, project_in, out, ctx: StageContext = StageContext()) -> StageResult:
    """Write ``OUT/report.html`` for the products of ``project_in``."""
    from ..io.models import read_models
    from .html import STATUS_MISFIT, STATUS_NONE, STATUS_OK, write_report

    src = project_in if isinstance(project_in, Project) else Project(project_in)
    project = out if isinstance(out, Project) else Project(out)
    mfile = src.folder("models") / "models.nc"
    if not mfile.is_file():
        raise input_error("file", "missing (run the invert stage first)", mfile)
    models = read_models(mfile)
    state = ctx.run_state if ctx.run_state is not None else _run_record(src)
    figs = src.folder("figures")
    sections = [(figs / "section.png", "Resistivity section (1D models stitched along the "
                 "profile; veiled and hatched below the depth of investigation)"),
                (figs / "section_lci.png", "Laterally constrained inversion section")]
    sections += [(p, f"Apparent-resistivity pseudo-section, {p.stem.split('_', 1)[1]}")
                 for p in sorted(figs.glob("pseudosection_*.png"))]
    sections = [(p, c) for p, c in sections if p.is_file()]
    model_figs = [(p, "1D models with +-1 std band and DOI") for p in [figs / "models.png"]
                  if p.is_file()]
    stations = state.get("stations", {}) if isinstance(state.get("stations"), dict) else {}
    ids = list(models["station"].values.astype(str))
    ids += [s for s in stations if s not in ids]
    station_figs, info = {}, {}
    for sid in ids:
        items = [(src.station_figure(sid, k), f"{sid}: {c}") for k, c in _CAPTIONS.items()]
        items = [(p, c) for p, c in items if p.is_file()]
        if items and sid in models["station"].values.astype(str):
            station_figs[sid] = items
        s = stations.get(sid, {})
        entry = {}
        if "usable_gates" in s:
            entry["usable_gates"] = s["usable_gates"]
        chi2 = s.get("chi2")
        if chi2 is not None:
            status = STATUS_OK if chi2 <= settings.chi2_limit else STATUS_MISFIT
        elif sid in models["station"].values.astype(str):
            status = None
        else:
            status = STATUS_NONE
        if status is not None:
            if s.get("qc") and s["qc"] != "ok":
                status += f"; QC {s['qc']}"
            entry["status"] = status
        info[sid] = entry
    name = state.get("survey", {}).get("name", "") if isinstance(state.get("survey"), dict) else ""
    notes = []
    if state:
        notes.append((f"Survey: {name}. " if name else "") + "Processing parameters and input "
                     "checksums of every stage are in run.json beside this report.")
    for sid, s in stations.items():
        if s.get("failed_stage"):
            notes.append(f"Station {sid} failed at stage {s['failed_stage']}: {s.get('message', '')}")
    title = settings.title or (f"{name}: TEM quality-control report" if name
                               else "TEM quality-control report")
    path = write_report(project.report, models, section_figures=sections, model_figures=model_figs,
                        station_figures=station_figs, station_info=info, title=title,
                        chi2_limit=settings.chi2_limit, embed=settings.embed, notes=notes)
    return StageResult(outputs=[str(path)],
                       inputs=[{"file": str(mfile), "sha256": file_sha256(mfile)}])
