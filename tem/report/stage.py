"""The report stage's one door: a project folder -> ``report.html``.

``tem report`` and ``tem run`` both call :func:`run`. It reads the models file,
the figures of every stage and, when present, the run record ``run.json``
(station failures, usable gates, QC notes).
"""
from __future__ import annotations

import json
from collections.abc import Mapping

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
                    "band (posterior models: P10-P90 band and, beside it, the depth probability "
                    "of an interface and of the target top)"}


def _run_record(project: Project):
    if not project.run_json.is_file():
        return {}
    try:
        state = json.loads(project.run_json.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        raise input_error("run.json", "unreadable", project.run_json) from None
    return state if isinstance(state, dict) else {}


def _qc_rows(src: Project):
    """Rows of ``qc/stations.csv`` ([] when the project has none)."""
    from ..qc import read_stations_csv

    path = src.folder("qc") / "stations.csv"
    return read_stations_csv(path) if path.is_file() else []


def qc_figures(src: Project, project: Project, qc_rows, ctx, notes=None):
    """The station map and the noise figure from the gated soundings; returns [(png, caption)].

    A gated file that cannot be read is left out of both figures and named in ``notes``
    (the station failed a later stage for the same reason; one file does not cost the
    report)."""
    import numpy as np

    from ..errors import TemInputError
    from ..io.figures import save_figure
    from ..io.stacked import read_product
    from .figures import noise_figure, station_map

    verdicts = {r["station"]: r["verdict"] for r in qc_rows}
    gated = sorted(src.folder("gated").glob("*.nc"))
    if not gated or not ctx.figures:
        return []
    stations, series, tx, epsg = [], [], None, 0
    for f in gated:
        try:
            ds = read_product(f, "gated")
        except TemInputError as exc:
            if notes is not None:
                notes.append(f"left out of the QC figures: {str(exc).splitlines()[0]}")
            continue
        sid = f.stem
        stations.append((sid, float(ds.attrs["x"]), float(ds.attrs["y"]), verdicts.get(sid, "")))
        if tx is None:
            tx = (str(ds.attrs["tx_kind"]), np.asarray(ds.attrs["tx_points"], float).reshape(-1, 2))
            epsg = int(ds.attrs.get("epsg", 0) or 0)
        t = ds["gate_centre"].values
        for c, comp in enumerate(ds["component"].values):
            series.append((sid, str(comp), t, ds["error"].values[c]))
    if tx is None:          # no gated file could be read
        return []
    stations += [(r["station"], np.nan, np.nan, r["verdict"]) for r in qc_rows
                 if r["station"] not in {s[0] for s in stations}]
    figs = project.folder("figures")
    out = []
    pts = [s for s in stations if np.isfinite(s[1])]
    p = save_figure(station_map(pts, tx[0], tx[1], epsg, title="Stations by evening verdict"),
                    figs / "qc_map", dpi=120)[0]
    out.append((p, "Stations coloured by evening verdict, with the transmitter (survey "
                "coordinates, m)"))
    p = save_figure(noise_figure(series, verdicts, title="Noise in each gate, by station"),
                    figs / "qc_noise", dpi=120)[0]
    out.append((p, "Standard error of every gate against time, one line per station and "
                "component, coloured by verdict; dashed: the survey median"))
    return out


def run(settings: ReportSettings, project_in, out, ctx: StageContext = StageContext()) -> StageResult:
    """Write ``OUT/report.html`` for the products of ``project_in``.

    It opens with the evening verdicts (``qc/stations.csv``), a station map and
    the noise figure, then the models, sections and per-station figures (the
    models part is left out when the project has no models yet).
    """
    from ..io.models import model_verdicts, read_models
    from .html import STATUS_MISFIT, STATUS_NONE, STATUS_OK, write_report

    src = project_in if isinstance(project_in, Project) else Project(project_in)
    project = out if isinstance(out, Project) else Project(out)
    mfile = src.folder("models") / "models.nc"
    qc_rows = _qc_rows(src)
    if not mfile.is_file() and not qc_rows:
        raise input_error("file", "missing (run the invert stage, or the evening check, first)",
                          mfile)
    models = read_models(mfile) if mfile.is_file() else None
    state = ctx.run_state if ctx.run_state is not None else _run_record(src)
    figs = src.folder("figures")
    sections = [(figs / "section.png", "Resistivity section (1D models stitched along the "
                 "profile; veiled and hatched below the depth of investigation)"),
                (figs / "section_lci.png", "Laterally constrained inversion section"),
                (figs / "section_posterior.png", "Posterior section: P50 resistivity and the "
                 "P10-P90 width in decades, with the target-top percentiles per station")]
    sections += [(p, f"Apparent-resistivity pseudo-section, {p.stem.split('_', 1)[1]}")
                 for p in sorted(figs.glob("pseudosection_*.png"))]
    sections = [(p, c) for p, c in sections if p.is_file()]
    model_figs = [(p, "1D models with +-1 std band and DOI") for p in [figs / "models.png"]
                  if p.is_file()]
    stations = state.get("stations", {}) if isinstance(state.get("stations"), Mapping) else {}
    modelled = list(models["station"].values.astype(str)) if models is not None else []
    ids = list(modelled)
    ids += [s for s in stations if s not in ids]
    station_figs, info = {}, {}
    verdicts = dict(zip(modelled, model_verdicts(models))) if models is not None else {}
    for sid in ids:
        items = [(src.station_figure(sid, k), f"{sid}: {c}") for k, c in _CAPTIONS.items()]
        items = [(p, c) for p, c in items if p.is_file()]
        if items and sid in modelled:
            station_figs[sid] = items
        s = stations.get(sid, {})
        entry = {}
        if "usable_gates" in s:
            entry["usable_gates"] = s["usable_gates"]
        chi2 = s.get("chi2")
        if verdicts.get(sid) is not None:
            status = verdicts[sid]["status"]
        elif chi2 is not None:
            status = STATUS_OK if chi2 <= settings.chi2_limit else STATUS_MISFIT
        elif sid in modelled:
            status = None
        else:
            status = STATUS_NONE
        if status is not None:
            flags = s.get("channel_flags", s.get("qc"))     # "qc": records before 5 Dec 2026
            if flags and flags not in ("none", "ok"):
                status += f"; QC {flags}"
            entry["status"] = status
        info[sid] = entry
    name = state.get("survey", {}).get("name", "") if isinstance(state.get("survey"), dict) else ""
    notes = []
    if state:
        where = "run.json beside this report" if src.run_json.parent.resolve() == \
            project.report.parent.resolve() else str(src.run_json.resolve())
        notes.append((f"Survey: {name}. " if name else "") + "Processing parameters and input "
                     f"checksums of every stage are in {where}.")
    for sid, s in stations.items():
        if s.get("failed_stage"):
            notes.append(f"Station {sid} failed at stage {s['failed_stage']}: {s.get('message', '')}")
    title = settings.title or (f"{name}: TEM quality-control report" if name
                               else "TEM quality-control report")
    qfigs = qc_figures(src, project, qc_rows, ctx, notes)
    path = write_report(project.report, models, section_figures=sections, model_figures=model_figs,
                        station_figures=station_figs, station_info=info, title=title,
                        chi2_limit=settings.chi2_limit, embed=settings.embed, notes=notes,
                        qc_rows=qc_rows, qc_figures=qfigs)
    inputs = [{"file": str(f), "sha256": file_sha256(f)} for f in
              (mfile, src.folder("qc") / "stations.csv") if f.is_file()]
    return StageResult(outputs=[str(path)] + [str(p) for p, _ in qfigs], inputs=inputs)
